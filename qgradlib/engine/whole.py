"""On a few qubits a layered circuit is a chain of whole-register matrices.

With every qubit on one side of `qgradlib.engine.sides` (``a = 0``) a layer is one matrix
``K`` of the whole register, and so is a run of fixed gates. The fixed gates before a layer
fold into it: in row form (``psi_row -> psi_row @ R`` for a fixed run, ``@ K.T`` for a layer)

    W_l = R_l @ K_l.T,

one batched product for all layers (for Pauli rotations one product with fixed terms,
`expansion`), so that the forward pass is one vector-matrix product a layer and the backward
pass one more. The derivatives of all gates then come from one gather: when every ``-2i G``
is a permutation with phases (Pauli rotations, `sides._monomial`),

    dE/dphi_t = Re sum_i conj(lam_l[i]) phase_t[i] psi_l[flip_t[i]],

``psi_l`` and ``lam_l`` the kept ket and bra at the output of gate t's layer (the gates of a
layer commute). On four qubits the products are 16 x 16: what a gradient costs is the number
of NumPy calls, which no longer grows with the fixed gates or the qubits of a layer.
`derivatives` serves the two-sided layers of `qgradlib.engine.sides` too (on a flat view of
their kept states) where the gather is small.

For one observable a traced call needs the value and ``dE/dphi`` only, so `round_trip` does
the whole of it in one call and keeps nothing: the run after the last layer is folded into
the observable (``conj(R) O R.T``), each layer's ``-2i G`` are stacked as whole-register
matrices (one batched product for every gate's ``Re lam^H (-2i G) psi``), and when the
terms, the observable and those matrices are all real (RY and CZ measured in Z and X) the
state is real throughout. About twenty NumPy calls on three layers.

Examples
--------
>>> import numpy as np
>>> R = np.eye(2)[::-1][None]                   # an X gate before the one layer, row form
>>> K = np.array([[[0.6, -0.8], [0.8, 0.6]]])   # the layer's matrix
>>> psi = forward(chain(K, R), None, np.empty((1, 2), dtype=complex))
>>> bool(np.allclose(psi, K[0] @ np.array([0.0, 1.0])))      # K X |0>
True
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import small

__all__ = ["parts", "fold", "expansion", "expanded", "half_angles", "chain", "forward", "backward",
           "derivatives", "gather_for", "RoundTrip", "round_trip_for", "round_trip"]


def parts(steps, layer_steps, slots, pauli, n):
    """``(pre, end, B)`` of a circuit with every qubit on one side: the fixed runs of
    `fold` and, for Pauli rotations, the layers' `expansion` (or None)."""
    pre, end = fold(steps, layer_steps, n)
    B = None if pauli is None or not layer_steps else expansion(slots, pauli, pre, n)
    return pre, end, B


def fold(steps, layer_steps, n):
    """Row-form matrices of the fixed runs: ``pre`` (L, N, N), the run before each layer
    (the identity where there is none), and ``end`` (N, N), the run after the last layer
    (None when there is none); ``pre`` is None when no layer has a run before it."""
    N = 2 ** n
    L = len(layer_steps)
    eye = np.eye(N, dtype=complex)
    pre = np.broadcast_to(eye, (L, N, N)).copy()
    bounds = (-1,) + tuple(layer_steps)
    any_pre = False
    for b in range(L):
        run = steps[bounds[b] + 1:bounds[b + 1]]
        if run:
            pre[b] = _fixed(run, n, eye)
            any_pre = True
    tail = steps[bounds[-1] + 1:]
    end = _fixed(tail, n, eye) if tail else None
    if not any_pre:
        pre = None
    else:
        pre.flags.writeable = False
    if end is not None:
        end.flags.writeable = False
    return pre, end


def _fixed(run, n, eye):
    """The row-form matrix of a run of constant steps of `qgradlib.engine.small`: each basis
    row through the run (``rows @ R`` then applies it)."""
    rows = eye.copy()
    spare = np.empty_like(rows)
    for s in run:
        rows, spare = small._constant(s, rows, spare, n)
    return rows


# bytes the expansion of one circuit's layers may take (`expansion`); above, each layer's
# matrix is built as a Kronecker product at every call instead
EXPANSION_BYTES = 2 ** 23


def expansion(slots, pauli, pre, n):
    """``(B, picks, N)`` with ``W_l = sum_S coef_l[S] B[l, S]`` (`expanded`), or None when
    ``B`` would take more than `EXPANSION_BYTES`.

    A layer of Pauli rotations is ``K = kron_q (c_q I + s_q P_q)``, ``P_q = -2i G_q``,
    ``c, s = cos, sin`` of half the angle, so ``K`` is the sum over subsets S of the qubits
    of ``coef[S] kron_q (P_q if q in S else I)``, ``coef[S]`` the product of ``s_q`` over S
    and ``c_q`` elsewhere; each term's row-form ``pre_l @ M_S.T`` is fixed. ``slots`` (L, k)
    are the columns on each qubit (``len(pauli) - 1``, a zero, where a qubit has no gate);
    ``picks`` (L, 2**k, k) index the factors of every ``coef[S]`` in a flat (G + 1, 2)
    table of (c, s) pairs. ``B`` is the float view (L, 2**k, 2 N**2); the third entry is N.
    """
    L, k = slots.shape
    N = 2 ** n
    if L * 2 ** k * N * N * 16 > EXPANSION_BYTES:
        return None
    subsets = (np.arange(2 ** k)[:, None] >> (k - 1 - np.arange(k))) & 1       # (2**k, k)
    eye = np.eye(2, dtype=complex)
    f = np.where(subsets[None, :, :, None, None] == 1, pauli[slots][:, None], eye)
    M = small.krons(f.reshape(-1, k, 2, 2)).reshape(L, 2 ** k, N, N)
    B = np.swapaxes(M, -1, -2)
    if pre is not None:
        B = np.matmul(pre[:, None], B)
    B = np.ascontiguousarray(B).reshape(L, 2 ** k, N * N).view(np.float64)
    picks = np.ascontiguousarray(slots[:, None, :] * 2 + subsets[None])
    B.flags.writeable = False
    picks.flags.writeable = False
    return B, picks, N


def expanded(expansion, table):
    """The chain ``W`` (L, N, N) from an `expansion` and ``table`` (G + 1, 2) of
    `half_angles`; real when the expansion's terms are (``B`` (L, 2**k, N**2), the terms
    of a `RoundTrip` on a real circuit)."""
    B, picks, N = expansion
    coef = np.take(table, picks).prod(axis=-1)                  # (L, 2**k)
    # real coefficients times the float view: a real product, no complex cast
    W = np.matmul(coef[:, None, :], B)
    return (W if B.shape[-1] == N * N else W.view(complex)).reshape(-1, N, N)


def half_angles(phi):
    """(G + 1, 2): the cosine and sine of half of every gate angle ``phi`` (G,), then
    (1, 0), the factors of a qubit without a gate."""
    half = np.multiply(phi, 0.5)
    t = np.empty((half.size + 1, 2))
    np.cos(half, out=t[:-1, 0])
    np.sin(half, out=t[:-1, 1])
    t[-1, 0] = 1.0
    t[-1, 1] = 0.0
    return t


def chain(K, pre):
    """The layer matrices in row form with their fixed runs, ``W_l = pre_l @ K_l.T`` (L, N, N)."""
    KT = np.swapaxes(K, 1, 2)
    return KT if pre is None else np.matmul(pre, KT)


def forward(W, end, states, start=0):
    """The final state (N,) from ``|0...0>``, each layer's output in ``states`` (L, N);
    with ``start`` the outputs of the layers before it are in ``states`` already."""
    L = W.shape[0]
    if L == 0:
        psi = np.zeros(states.shape[1], dtype=complex)
        psi[0] = 1
        return psi if end is None else end[0].copy()
    if start == 0:
        states[0] = W[0, 0]                 # the first layer from |0>: row 0
    for b in range(max(start, 1), L):
        np.dot(states[b - 1], W[b], out=states[b])      # dot: less overhead than matmul
    return states[-1].copy() if end is None else states[-1] @ end


def backward(W, end, lam, first, lams):
    """The bra at each layer's output from ``first`` on, into ``lams`` (L, N), from
    ``lam = O psi`` (N,) at the final state: ``lam_{l-1} = conj(W_l) lam_l``."""
    L = W.shape[0]
    real = W.dtype.kind == "f"
    if end is None:
        lams[-1] = lam
    else:
        np.dot(end if real else np.conj(end), lam, out=lams[-1])
    if L - 1 > first:
        Wc = W[first + 1:] if real else np.conj(W[first + 1:])
        for b in range(L - 1, first, -1):
            np.dot(Wc[b - first - 1], lams[b], out=lams[b - 1])
    return lams


def derivatives(states, lams, gather):
    """dE/dphi of the gathered columns from the kept kets and bras (L, N): ``gather`` is
    (layers (T,), flat indices (T, N) into the kets, phases (T, N)); ``Re conj(a) b`` is the
    dot product of the float views."""
    layers, idx, phases = gather
    moved = np.take(states.reshape(-1), idx)
    moved *= phases
    bras = np.take(lams, layers, axis=0)
    T = layers.size
    return np.einsum("tk,tk->t", bras.view(np.float64).reshape(T, -1),
                     moved.view(np.float64).reshape(T, -1))


def gather_for(comp, first):
    """Memoised on a compiled `qgradlib.engine.sides.Sides` of Pauli rotations, per
    ``first``: the columns from that layer on (None when that is every column) and what
    `derivatives` gathers for them (layers, flat indices into the kept states, phases)."""
    key = ("whole", first)
    hit = comp.picks.get(key)
    if hit is None:
        sel = np.flatnonzero(comp.layer >= first)
        tab = comp.monomial[0][sel]
        N = comp.monomial[1].shape[1]
        layers = comp.layer[sel]
        hit = comp.picks.setdefault(key, (None if sel.size == comp.n_columns else sel, (
            layers, layers[:, None] * N + comp.monomial[1][tab], comp.monomial[2][tab])))
    return hit


@dataclass(frozen=True, eq=False)
class RoundTrip:
    """What `round_trip` reads for one observable on a circuit of Pauli rotations with
    every qubit on one side: the layers' `expansion`, the run after the last layer, the
    observable's matrix and each gate's ``-2i G`` as a whole-register matrix, all real when
    all of them are (an RY and CZ circuit measured in Z and X: a real state throughout,
    real products at a quarter of the arithmetic)."""

    expansion: tuple          # (B, picks, N) of `expansion`, B real (L, 2**k, N**2) or the
                              # float view of complex terms
    observable: np.ndarray    # (N, N) at the last layer's output: ``conj(R) O R.T`` with the
                              # run R after it (row form) folded in
    slopes: np.ndarray        # (L - first, n N, N): layer l's n matrices -2i G (zeros on a
                              # qubit without a gate) stacked, from layer ``first`` on
    where: object             # (T,) each column's entry in the (L - first) x n products,
                              # None when they are in order
    sel: object               # the columns differentiated, None for every column
    n_columns: int
    first: int                # the earliest layer differentiated (the backward pass stops there)


def round_trip_for(comp, observable, first):
    """The `RoundTrip` of a compiled `qgradlib.engine.sides.Sides` with every qubit on one
    side and ``observable`` (N, N), differentiating the columns of layers from ``first``
    on; None when the layers have no expansion or no column is differentiated."""
    if comp.whole is None or comp.whole[2] is None or comp.monomial is None \
            or first >= comp.n_layers:
        return None
    _, end, (B, picks, N) = comp.whole
    n, L = comp.n, comp.n_layers
    table, flips, phases = comp.monomial
    # -2i G psi = phases * psi[flips]: the matrix with phases[i] at (i, flips[i])
    mono = np.zeros((len(flips), N, N), dtype=complex)
    mono[np.arange(len(flips))[:, None], np.arange(N), flips] = phases
    slots = comp.slots_b[first:]                               # (L - first, n)
    slopes = np.zeros((L - first, n, N, N), dtype=complex)
    has = slots < comp.n_columns
    slopes[has] = mono[table[slots[has]]]
    sel = np.flatnonzero(comp.layer >= first)
    where = (comp.layer[sel] - first) * n + comp.qubit[sel]
    if end is not None:
        # <psi R|O|psi R> of the last layer's output psi: two products fewer a call
        observable = np.conj(end) @ observable @ end.T
    terms = B.view(complex)
    if not (np.any(terms.imag) or np.any(observable.imag) or np.any(slopes.imag)):
        B = np.ascontiguousarray(terms.real)
        observable = observable.real
        slopes = slopes.real
    slopes = np.ascontiguousarray(slopes).reshape(L - first, n * N, N)
    observable = np.ascontiguousarray(observable)
    if np.array_equal(where, np.arange((L - first) * n)):
        where = None
    for a in (B, observable, slopes, where):
        if a is not None:
            a.flags.writeable = False
    return RoundTrip((B, picks, N), observable, slopes, where,
                     None if sel.size == comp.n_columns else sel, comp.n_columns, first)


def round_trip(trip, phi):
    """``(value, dE/dphi (G,))`` of a `RoundTrip`'s observable at gate angles ``phi`` (G,):
    the forward pass, ``O psi``, the backward pass and every layer's ``Re lam^H (-2i G) psi``
    in one call, nothing kept.

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> from qgradlib.engine import sides
    >>> c = qg.Circuit(3).rx(0).ry(2).cnot(0, 1).ry(1)
    >>> Z0 = np.kron(np.diag([1.0, -1.0]), np.eye(4))          # Z on qubit 0 (leftmost)
    >>> value, d = round_trip(round_trip_for(sides.compiled(c), Z0, 0), [0.3, -0.5, 0.9])
    >>> bool(np.isclose(value, np.cos(0.3)))                    # <Z0> after RX(0.3)
    True
    >>> bool(np.allclose(d, [-np.sin(0.3), 0.0, 0.0]))
    True
    """
    W = expanded(trip.expansion, half_angles(phi))
    kets = np.empty((2,) + W.shape[:2], dtype=W.dtype)
    psi = forward(W, None, kets[0])
    lam = trip.observable @ psi
    value = float(np.vdot(psi, lam).real)
    lams = backward(W, None, lam, trip.first, kets[1])[trip.first:, :, None]
    L, N = trip.slopes.shape[0], W.shape[1]
    moved = np.matmul(trip.slopes, kets[0, trip.first:, :, None]).reshape(L, -1, N)
    if W.dtype.kind == "f":
        d = np.matmul(moved, lams).reshape(-1)
    else:
        d = np.matmul(moved, np.conj(lams)).real.reshape(-1)
    if trip.where is not None:
        d = np.take(d, trip.where)
    if trip.sel is None:
        return value, d
    grad = np.zeros(trip.n_columns)
    grad[trip.sel] = d
    return value, grad
