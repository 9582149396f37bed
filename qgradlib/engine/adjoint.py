"""Adjoint differentiation: one forward pass, one backward pass with bra and ket states.

With ``psi_k`` the state after gate k and ``lam_k = U_{k+1}^dag ... U_N^dag O psi_N``,
``dE/da_k = 2 Re <lam_k| dU_k/da |psi_{k-1}>``; for ``U = expm(-1j a G)`` this is
``2 Im <lam_k| G |psi_k>`` (Jones and Gacon, arXiv:2009.02823 (2020)). Exact, but a device
cannot run it.

The bra and ket rows are stacked in one array and undone together, one batched kernel call
per step. Gates between trainable ones are fused as in a forward run (each trainable gate
stays a step of its own). Memory: the stacked pair and one buffer of the same size, so about
four states for one row, whatever the circuit.

A block of trainable gates on disjoint qubits (a layer of rotations) commutes, so all its
derivatives are read from the same bra and ket. The register is cut into windows of four
qubits (`qgradlib.engine.overlaps`): a window's single-qubit gates are undone as one 16 x 16
product (real for RY, on the float view), its derivatives come from one overlap matrix read
in the same sweep, and the constant phases just before the block (a CZ ladder) that lie
inside a window join its product instead of taking passes of their own.
"""
from __future__ import annotations

import weakref
from functools import lru_cache

import numpy as np

from .threads import engine_threads
from . import kernels, overlaps, scratch, small
from .memory import guard_states
from .program import DIAG_WIDTH, program, step_matrix
from .statevector import _table, run

__all__ = ["adjoint_gradient", "adjoint_states", "hamiltonian_derivative", "lean_backward"]


def hamiltonian_derivative(gate, a: float) -> np.ndarray:
    """d/da expm(-1j (W + a P)) by the Daleckii-Krein formula (exact)."""
    from ..circuits.paulis import pauli_matrix

    P = pauli_matrix(gate.drive)
    ev, vec = np.linalg.eigh(gate.drift + a * P)
    mu = -1j * ev
    e = np.exp(mu)
    diff = mu[:, None] - mu[None, :]
    close = np.abs(diff) < 1e-12
    gamma = np.where(close, e[:, None], (e[:, None] - e[None, :]) / np.where(close, 1.0, diff))
    return vec @ (gamma * (vec.conj().T @ (-1j * P) @ vec)) @ vec.conj().T


def _function_derivative(gate, a, h=1e-6):
    return (gate._matrices(np.array([a + h]))[0] - gate._matrices(np.array([a - h]))[0]) / (2 * h)


def _tile(m, per_row):
    return np.concatenate([m, m]) if per_row else m


_STRUCTURE: "weakref.WeakKeyDictionary" = weakref.WeakKeyDictionary()


def _structure(g):
    """(cols, phases) of a generator with at most one nonzero a row (diagonal included)."""
    if g not in _STRUCTURE:
        _STRUCTURE[g] = kernels.monomial_structure(np.asarray(g.generator))
    return _STRUCTURE[g]


def _apply_generator(g, src, n, qubits, out):
    """out = G src, by the cheapest kernel for the generator's structure."""
    G = np.asarray(g.generator)
    if g.diagonal:
        np.copyto(out, src)
        return kernels.apply_diag(out, n, np.diag(G), qubits)
    if g not in _STRUCTURE:
        _STRUCTURE[g] = kernels.monomial_structure(G)
    structure = _STRUCTURE[g]
    if structure is not None:
        return kernels.apply_monomial(src, n, structure[0], structure[1], qubits, out)
    return kernels.apply_dense(src, n, G, qubits, out)


@lru_cache(maxsize=1024)
def _block_plan(n, qubits, P):
    """Float-view shape, block index pairs and einsum subscripts of `_block_dots`."""
    k = len(qubits)
    order = sorted(range(k), key=lambda i: qubits[i])
    sq = tuple(qubits[i] for i in order)
    shape, axes = kernels._view_shape(P, n, sq)
    shape = list(shape)
    shape[-1] *= 2
    ndim = len(shape)
    sub = "p" + "abcdefghijklmnoqrstuvwxyz"[:ndim - 1 - k]
    pairs = []
    for i in range(2 ** k):
        bi = kernels._bits(i, k)
        pairs.append((i, kernels._index(axes, ndim, [bi[j] for j in order])))
    return tuple(shape), tuple(pairs), f"{sub},{sub}->p"


def _block_dots(lam, psi, n, cols, phases, qubits):
    """``2 Im <lam|G|psi>`` per row for a generator with one nonzero a row, all of them
    imaginary (Y-type: RY, RYY, ...): then only ``Re <a|b>`` of blocks is needed, a plain
    dot product of float views. One read of each state, nothing written."""
    shape, pairs, expr = _block_plan(n, tuple(qubits), lam.shape[0])
    fl = kernels.real_dtype(lam.dtype)
    lf = lam.view(fl).reshape(shape)
    pf = psi.view(fl).reshape(shape)
    index = dict(pairs)
    total = np.zeros(lam.shape[0])
    for i, idx in pairs:
        # Im(g <a|b>) = Im(g) Re<a|b> for imaginary g (single-precision dots summed in float64)
        total += complex(phases[i]).imag * np.einsum(expr, lf[idx], pf[index[int(cols[i])]],
                                                     dtype=np.float64)
    return 2 * total


def _dots_apply(st, n, qubits):
    """Whether `_block_dots` applies: imaginary nonzeros, no zero rows, long strides."""
    if st is None:
        return False
    cols, phases = st
    return (np.all(cols >= 0) and not np.any(np.real(phases))
            and 2 ** (n - max(qubits) - 1) >= kernels.TAIL_STRIDE)


def _row_dots(a, b):
    """<a_p|b_p> for every row, without temporaries."""
    if a.shape[0] <= 16:
        return np.array([np.vdot(x, y) for x, y in zip(a, b)])
    return np.einsum("bi,bi->b", a.conj(), b)


def _undo_step(s, both, buf, n, phi, shared, table, P):
    """Apply the step's inverse to every stacked row; returns (current, spare)."""
    if s.kind == "external":
        raise ValueError(f"the adjoint method cannot undo operation {getattr(s.op.gate, 'name', s.op.gate)!r}: "
                         "it is not a gate; a circuit with noise channels has no pure state and runs "
                         "on the density-matrix path (use gradient='shift' or 'difference')")
    if s.kind == "solo":
        g = s.op.gate
        qs = tuple(s.op.qubits)
        if not g.parametric:
            if g.diagonal:
                return kernels.apply_diag(both, n, np.conj(np.diag(g.unitary)), qs), buf
            return kernels.apply_dense(both, n, np.conj(g.unitary).T, qs, buf), both
        a = phi[:, s.column]
        sh = bool(shared[s.column])
        aa = a[:1] if sh else a
        if g.kind == "generator":
            # U(a)^dagger = U(-a)
            if g.diagonal:
                d = g.diagonal_values(-aa)
                return kernels.apply_diag(both, n, d[0] if sh else _tile(d, True), qs), buf
            m = g._matrices(-aa)
            return kernels.apply_dense(both, n, m[0] if sh else _tile(m, True), qs, buf), both
        m = np.conj(np.swapaxes(g._matrices(aa), -1, -2))
        return kernels.apply_dense(both, n, m[0] if sh else _tile(m, True), qs, buf), both
    m = s.matrix if s.matrix is not None else step_matrix(s, table, P)
    if s.kind == "diag":
        per_row = m.ndim == 2
        return kernels.apply_diag(both, n, _tile(np.conj(m), per_row), s.qubits), buf
    if s.kind == "mono":
        cols = s.mono
        d = cols.size
        inv = np.empty(d, dtype=np.intp)
        inv[cols] = np.arange(d)
        ph = np.conj(m[np.arange(d), cols])
        inv_ph = np.empty(d, dtype=complex)
        inv_ph[cols] = ph
        return kernels.apply_monomial(both, n, inv, inv_ph, s.qubits, buf), both
    per_row = m.ndim == 3
    mh = _tile(np.conj(np.swapaxes(m, -1, -2)), per_row)
    return kernels.apply_dense(both, n, mh, s.qubits, buf, real=s.real), both


# a batch of at least this many amplitudes (rows x 2**n) takes the general backward pass even
# on few qubits: its fused runs cost less than the lean loop's gate-by-gate steps there
LEAN_AMPLITUDES = 2 ** 14
# and above this many qubits the general pass, whatever the batch: at 12 its window products
# and overlaps (qgradlib.engine.overlaps) beat the lean loop's gate-by-gate steps
LEAN_QUBITS = 11


def lean_backward(circuit, rows: int, dtype=np.complex128, fuse=True) -> bool:
    """Whether the backward pass of ``rows`` rows runs in the lean loop of
    `qgradlib.engine.small` (few qubits, few amplitudes, double precision, fusion on)."""
    return (fuse and np.dtype(dtype) == np.complex128 and circuit.n_qubits <= LEAN_QUBITS
            and small.eligible(circuit) and rows * 2 ** circuit.n_qubits < LEAN_AMPLITUDES)


def adjoint_states(rows: int, observable_scratch: float = 0.0) -> float:
    """States alive at the peak of `adjoint_gradient` on ``rows`` rows: the stacked bra and
    ket rows and their spare buffer (4 a row; the forward run inside needs only 3), plus what
    applying the observable needs beyond its own scratch buffer (``observable_scratch`` a
    row, see `qgradlib.engine.measure.observable_scratch`). The memory guard's estimate:
    change it with `adjoint_gradient`."""
    return rows * (4 + observable_scratch)


def adjoint_gradient(circuit, phi, apply_observable=None, columns=None, *, observable_into=None,
                     psi=None, observed=None, fuse=None, observable_scratch=0.0,
                     dtype=np.complex128) -> np.ndarray:
    """dE/dphi for every row of ``phi`` (P, G), where ``E = <psi|O|psi>``.

    Parameters
    ----------
    circuit : Circuit
    phi : ndarray, shape (P, G)
    apply_observable : callable, optional
        ``apply_observable(psi) -> O psi`` row-wise (the observable may differ by row).
    columns : iterable of int, optional
        Columns to differentiate (default all); the others are left at zero.
    observable_into : callable, optional
        ``observable_into(psi, out, scratch)`` writing ``O psi`` into ``out`` without
        allocating (``scratch`` may be overwritten); preferred over ``apply_observable``.
    psi : ndarray, shape (P, 2**n), optional
        The final states of a forward run at ``phi``, when the caller already has them; pass
        the last reference (they are released once copied, and the memory guard counts so).
    observed : ndarray, shape (P, 2**n), optional
        ``O psi`` of those states, when the caller has it too (then no observable is
        applied here; pass the last reference, as for ``psi``).
    fuse : bool, optional
        Fusion of the gates between trainable ones (on by default).
    observable_scratch : float
        States a row that applying the observable allocates (for the memory guard).
    dtype : {numpy.complex128, numpy.complex64}
        Amplitude dtype of the bra and ket states (complex64: single precision; the
        derivatives are still the exact adjoint rule, returned as float64).

    Returns
    -------
    ndarray, shape (P, G)

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> from qgradlib.engine.measure import apply_observable
    >>> c = qg.Circuit(1).ry(0)
    >>> Z = qg.Observable({"Z": 1.0})
    >>> g = adjoint_gradient(c, np.array([[0.4]]), lambda psi: apply_observable(psi, 1, Z))
    >>> bool(np.isclose(g[0, 0], -np.sin(0.4)))
    True
    """
    phi = np.asarray(phi, dtype=float)
    P, G = phi.shape
    n = circuit.n_qubits
    N = 2 ** n
    want = frozenset(range(G)) if columns is None else frozenset(int(c) for c in columns)
    fuse = True if fuse is None else bool(fuse)
    # states handed in are released once copied (the caller passes its last reference)
    if observed is not None:
        if psi is None:
            raise ValueError("observed (O psi) needs the states psi it was computed from")
        if np.shape(observed) != np.shape(psi):
            raise ValueError(f"observed must have the shape of psi {np.shape(psi)}; got {np.shape(observed)}")
        observable_into = apply_observable = None
        observable_scratch = 0.0
    elif observable_into is None and apply_observable is None:
        raise ValueError("adjoint_gradient needs the observable: apply_observable, observable_into "
                         "or observed")
    handed = (P if psi is not None else 0) + (P if observed is not None else 0)
    dtype = np.dtype(dtype)
    guard_states(n, adjoint_states(P, observable_scratch) - handed, f"the adjoint method on {P} row(s)",
                 dtype.itemsize)
    # the stacked rows and their spare buffer never leave this call: borrowed warm (scratch)
    both = scratch.take((2 * P, N), dtype)
    if psi is None:
        run(circuit, phi, out=both[:P], fuse=fuse, keep=want, dtype=dtype)
    else:
        both[:P] = psi
    if observed is not None:
        both[P:] = observed
    del psi, observed  # the caller's copies can go now: at most four states from here on
    # (the BLAS limit starts here, not in a wrapper, whose arguments would keep psi alive)
    with engine_threads(n):
        if lean_backward(circuit, P, dtype, fuse):
            # few qubits: the lean loop of qgradlib.engine.small (same layout, same memory;
            # double precision only)
            grad = small.backward(circuit, both, phi, want, observable_into, apply_observable)
            scratch.give(both)
            return grad
        prog = program(circuit, fuse, want)
        if prog.const_columns and not np.all(phi[:, list(prog.const_columns)] == prog.const_angles):
            prog = program(circuit, fuse, want, bake_fixed_angles=False)
        buf = scratch.take(both.shape, dtype)
        grad = _backward(prog, both, buf, phi, n, P, G, want, observable_into, apply_observable)
        scratch.give(both, buf)
        return grad


def _backward(prog, both, buf, phi, n, P, G, want, observable_into, apply_observable):
    """The backward pass from the stacked final states (rows :P) into (P, G) derivatives;
    ``buf`` is a spare buffer like ``both`` (both are overwritten). With no observable given,
    rows P: of ``both`` already hold ``O psi``."""
    if observable_into is not None:
        observable_into(both[:P], both[P:], buf[:P])
    elif apply_observable is not None:
        both[P:] = apply_observable(both[:P])
    # (neither: rows P: hold O psi already)
    shared = np.all(phi == phi[:1], axis=0) if P > 1 else np.ones(G, dtype=bool)
    table = _table(prog, phi, shared)
    grad = np.zeros((P, G))
    steps = prog.steps
    # the earliest trainable step: nothing before it needs undoing
    first = next((k for k, s in enumerate(steps) if _trainable(s, want)), len(steps))
    i = len(steps) - 1
    while i >= first:
        s = steps[i]
        if not _trainable(s, want):
            both, buf = _undo_step(s, both, buf, n, phi, shared, table, P)
            i -= 1
            continue
        if _single(s, want):
            run = [s]
            j = i - 1
            while j >= 0 and _single(steps[j], want):
                run.append(steps[j])
                j -= 1
            qs = [b.op.qubits[0] for b in run]
            if len(set(qs)) < len(qs):
                both, buf = _undo_run(run, both, buf, n, phi, shared, P, grad, then_undo=j >= first)
                i = j
                continue
        # a block of trainable gates on disjoint qubits commutes: every derivative in it can
        # be taken at the block's end, and the block undone with single-qubit pairs fused
        block = [s]
        used = set(s.qubits)
        j = i - 1
        while j >= 0 and _trainable(steps[j], want) and not used & set(steps[j].qubits):
            block.append(steps[j])
            used |= set(steps[j].qubits)
            j -= 1
        phases = [b for b in block if b.op.gate.kind == "generator" and b.op.gate.diagonal]
        if len(phases) < 2 or len({q for b in phases for q in b.op.qubits}) > DIAG_WIDTH:
            phases = []
        rest = [b for b in block if b not in phases]
        if j < first:
            # the last block: its derivatives, and no undo (no derivative is left to need it)
            for b in _window_derivatives(rest, both, n, P, grad):
                _derivative(b, both, buf, n, phi, P, grad)
            if phases:
                _phase_derivatives(phases, both, buf, n, P, grad)
            break
        # constant diagonal steps right before the block (CZ ladders): their phases go into
        # the block's window products where they fit, instead of passes of their own
        after = []
        while j >= 0 and _constant_diagonal(steps[j]):
            after.append(steps[j])
            j -= 1
        plan = _undo_plan(rest, phi, shared, n, after)
        for b in _window_derivatives(rest, both, n, P, grad, skip=plan["fused"]):
            _derivative(b, both, buf, n, phi, P, grad)
        if phases:
            _phase_derivatives(phases, both, buf, n, P, grad)
            _undo_phases(phases, both, n, phi, shared, P)
        both, buf = _undo_block(rest, both, buf, n, phi, shared, table, P, plan, grad)
        i = j
    return grad


def _single(s, want):
    """A trainable single-qubit generator gate (a step of its own)."""
    return _trainable(s, want) and s.op.gate.kind == "generator" and len(s.op.qubits) == 1


def _undo_run(run, both, buf, n, phi, shared, P, grad, then_undo=True):
    """A run of trainable single-qubit gates (``run`` latest first; a qubit may carry several,
    RY then RZ): each qubit's gates fuse into one 2 x 2 matrix, and every derivative is taken
    at the run's end, ``2 Im <lam|A G A^dag|psi>`` with ``A`` the qubit's gates after it (the
    other qubits' gates commute with both), from one 2 x 2 overlap matrix a qubit."""
    by_qubit: dict = {}
    for b in run:
        by_qubit.setdefault(b.op.qubits[0], []).append(b)
    S = _qubit_overlaps(sorted(by_qubit), both, buf, n, P)
    undo = {}
    for q, gates in by_qubit.items():
        A = np.eye(2, dtype=both.dtype)
        for b in gates:                     # latest first
            g = b.op.gate
            sh = bool(shared[b.column])
            U = g._matrices(phi[:1, b.column] if sh else phi[:, b.column])
            U = U[0] if sh else U
            Ah = np.conj(np.swapaxes(A, -1, -2))
            M = A @ np.asarray(g.generator, dtype=both.dtype) @ Ah
            grad[:, b.column] = 2 * np.imag(np.einsum("pij,pij->p" if M.ndim == 3 else "ij,pij->p",
                                                      M, S[q]))
            A = A @ U
        undo[q] = np.conj(np.swapaxes(A, -1, -2))
    if not then_undo:                  # the last trainable gates: no derivative needs the undo
        return both, buf
    return _undo_qubits(undo, both, buf, n, P)


def _qubit_overlaps(qubits, both, buf, n, P):
    """``{q: S}`` with ``S[p, i, j] = sum conj(lam[p, .. i ..]) psi[p, .. j ..]`` over the other
    qubits, so that ``<lam|M|psi> = sum_ij M_ij S_ij`` for any M on qubit q. Qubits in the
    last few come from one overlap matrix of that window; the others from slab products of
    the conjugated bra (written into the spare buffer)."""
    out = {}
    lam, psi = both[P:], both[:P]
    tail = [q for q in qubits if n > _TAIL and q >= n - _TAIL]
    if tail:
        T = _tail_overlaps(both, n, P).reshape((P,) + (2,) * (2 * _TAIL))
        for q in tail:
            k = q - (n - _TAIL)
            keep = "ijk"[k], "lmn"[k]
            rows = "ijk"[:k] + "x" + "ijk"[k + 1:]
            cols = "lmn"[:k] + "y" + "lmn"[k + 1:]
            # trace out the other window qubits: equal row and column letters
            for a, b in zip("ijk", "lmn"):
                if a != keep[0]:
                    cols = cols.replace(b, a)
            out[q] = np.einsum(f"p{rows}{cols}->pxy", T)
    rest = [q for q in qubits if q not in out]
    if rest:
        cl = buf[:P]
        np.conjugate(lam, out=cl)
        for q in rest:
            L, R = 2 ** q, 2 ** (n - q - 1)
            a = cl.reshape(P, L, 2, R)
            b = psi.reshape(P, L, 2, R)
            out[q] = np.matmul(a, np.swapaxes(b, -1, -2)).sum(axis=1)
    return out


def _phase_derivatives(block, both, buf, n, P, grad):
    """Derivatives of commuting diagonal generator gates (RZ, RZZ, ...) from one product:
    ``2 Im <lam|G|psi> = 2 sum_x G(x) Im(conj(lam_x) psi_x)``, and ``G`` acts on a few qubits,
    so each gate needs only the marginal of ``v = Im(conj(lam) psi)`` on its qubits. ``v``
    and its scratch live in the spare buffer (nothing allocated at full size)."""
    N = 2 ** n
    flat = buf.reshape(-1).view(np.float64)
    v = flat[:P * N].reshape(P, N)
    tmp = flat[P * N:2 * P * N].reshape(P, N)
    lam = both[P:].view(np.float64).reshape(P, N, 2)
    psi = both[:P].view(np.float64).reshape(P, N, 2)
    np.multiply(lam[..., 0], psi[..., 1], out=v)
    np.multiply(lam[..., 1], psi[..., 0], out=tmp)
    v -= tmp
    cube = v.reshape((P,) + (2,) * n)
    for b in block:
        g = b.op.gate
        d, sq = kernels.sort_qubits(np.real(np.diag(np.asarray(g.generator))), b.op.qubits, diag=True)
        others = tuple(1 + q for q in range(n) if q not in sq)
        marginal = cube.sum(axis=others).reshape(P, -1)
        grad[:, b.column] = 2 * marginal @ d


def _undo_phases(block, both, n, phi, shared, P):
    """Undo commuting diagonal gates as one phase multiply over their qubits, in place."""
    union = tuple(sorted({q for b in block for q in b.op.qubits}))
    per_row = not all(shared[b.column] for b in block)
    total = np.ones(((P,) if per_row else ()) + (2,) * len(union), dtype=both.dtype)
    for b in block:
        a = phi[:, b.column] if per_row else phi[:1, b.column]
        d = b.op.gate.diagonal_values(-a)
        d, sq = kernels.sort_qubits(d, b.op.qubits, diag=True)
        shape = [2 if q in sq else 1 for q in union]
        total = total * d.reshape(((P,) if per_row else ()) + tuple(shape))
    total = total.reshape(((P,) if per_row else ()) + (-1,))
    kernels.apply_diag(both, n, _tile(total, True) if per_row else total, union)


_TAIL = 3   # qubits of the window whose overlap matrix serves all derivatives inside it


def _tail_overlaps(both, n, P):
    """``S[p, i, j] = sum_r conj(lam[p, r, i]) psi[p, r, j]`` over the last ``_TAIL`` qubits:
    one BLAS product per row (conjugate transpose in BLAS, no copy), after which
    ``<lam|G|psi> = sum_ij G_ij S_ij`` for any G inside that window."""
    return overlaps.tail_overlap(both[P:], both[:P], n, _TAIL)


def _window_plan(s, n):
    """``(lo, w, kind, Gw)`` of a trainable step whose derivative an overlap matrix of its
    window can give: kind "real" (a generator with purely imaginary entries, read from
    ``Re S``) or "tail" (any generator, in the last window, from the complex S); None when
    neither applies. ``Gw`` is the generator laid out on the window (memoised on the step)."""
    hit = s.__dict__.get("_memo_window")
    if hit is not None and hit[0] == n:
        return hit[1]
    plan = None
    g = s.op.gate
    if g.kind == "generator" and not g.diagonal:
        qs = tuple(s.op.qubits)
        lo, w = overlaps.window_of(n, max(qs))
        if min(qs) >= lo:
            G, sq = kernels.sort_qubits(np.asarray(g.generator, dtype=complex), qs)
            Gw = kernels.widen(G, [q - lo for q in sq], w)
            if lo + w == n and w > 1:
                plan = (lo, w, "tail", Gw)
            elif not np.any(np.real(G)) and 2 ** (n - lo - w) >= overlaps.MIN_STRIDE:
                plan = (lo, w, "real", np.ascontiguousarray(np.imag(Gw)))
    s.__dict__["_memo_window"] = (n, plan)
    return plan


def _window_derivatives(block, both, n, P, grad, skip=()):
    """Derivatives of the block's gates that share a window with another, from one overlap
    matrix a window (`qgradlib.engine.overlaps`); returns the gates left to `_derivative`.
    The block's gates commute, so all are read from the same bra and ket. Gates in the
    windows ``skip`` are left out (their undo reads them, `_undo_block`)."""
    by_window: dict = {}
    left = []
    for b in block:
        plan = _window_plan(b, n)
        if plan is None:
            left.append(b)
        elif plan[:2] not in skip:
            by_window.setdefault(plan[:3], []).append((b, plan[3]))
    lam, psi = both[P:], both[:P]
    for (lo, w, kind), members in by_window.items():
        if len(members) < 2:
            left.extend(b for b, _ in members)   # one gate: its own dot products read less
            continue
        if kind == "tail":
            S = overlaps.tail_overlap(lam, psi, n, w)
            for b, Gw in members:
                # <lam|G|psi> = sum_ij G_ij S_ij
                grad[:, b.column] = 2 * np.imag(np.einsum("ij,pij->p", Gw, S))
        else:
            S = overlaps.real_overlap(lam, psi, n, lo, w)
            for b, Gi in members:
                # Im sum_ij G_ij S_ij = sum_ij Im(G_ij) Re(S_ij) for purely imaginary G
                grad[:, b.column] = 2 * np.einsum("ij,pij->p", Gi, S)
    return left


def _trainable(s, want):
    return s.kind == "solo" and s.column is not None and s.column in want


def _derivative(s, both, buf, n, phi, P, grad):
    g = s.op.gate
    col = s.column
    qs = tuple(s.op.qubits)
    mu = buf[:P]
    if g.kind == "generator":
        st = _structure(g)
        if _dots_apply(st, n, qs):
            grad[:, col] = _block_dots(both[P:], both[:P], n, st[0], st[1], qs)
        else:
            _apply_generator(g, both[:P], n, qs, mu)
            grad[:, col] = 2 * np.imag(_row_dots(both[P:], mu))
        return
    if g.kind == "function":
        from ..rules.shift_rules import warn_approximate
        warn_approximate(g)      # the matrix derivative is a finite difference here too
    deriv = hamiltonian_derivative if g.kind == "hamiltonian" else _function_derivative
    a = phi[:, col]
    # <lam_k| dU |psi_{k-1}> with psi_{k-1} = U^dag psi_k: apply dU U^dag to psi_k
    U = g._matrices(a)
    X = np.stack([deriv(g, x) for x in a]) @ np.conj(np.swapaxes(U, -1, -2))
    kernels.apply_dense(both[:P], n, X, qs, mu)
    grad[:, col] = 2 * np.real(_row_dots(both[P:], mu))


def _inverses(block, phi, shared):
    """U(a)^dagger = U(-a) of the block's single-qubit dense generator gates, one vectorised
    call per gate type: {id(step): (2, 2) shared or (P, 2, 2)}."""
    by_gate = {}
    for b in block:
        by_gate.setdefault(id(b.op.gate), (b.op.gate, []))[1].append(b)
    out = {}
    complex_ids = set()
    for gate, members in by_gate.values():
        cols = [b.column for b in members]
        if np.all(shared[cols]):
            mats = gate._matrices(-phi[0, cols])
            for b, m in zip(members, mats):
                out[id(b)] = m
            imag = np.any(mats.imag != 0, axis=(1, 2))
        else:
            mats = gate._matrices(-phi[:, cols].T.reshape(-1)).reshape((len(cols), phi.shape[0], 2, 2))
            for j, b in enumerate(members):
                out[id(b)] = mats[j, 0] if shared[b.column] else mats[j]
            imag = np.any(mats.imag != 0, axis=(1, 2, 3))
        # which are complex, tested once a gate type (a test a matrix costs more than it saves)
        complex_ids.update(id(b) for b, c in zip(members, imag) if c)
    return out, complex_ids


def _constant_diagonal(s):
    """A fused diagonal step whose phases do not depend on the angles."""
    return s.kind == "diag" and s.matrix is not None and not s.varies


def _undo_plan(block, phi, shared, n, after):
    """How `_undo_block` undoes ``block`` and the constant diagonal steps ``after``: the
    single-qubit matrices, the windows undone as one product (and their realness), the
    phases moved into them, what is left, and the windows whose derivatives the undo reads
    (``fused``: {(lo, w): [(step, Im G on the window)]})."""
    pairable = {b.op.qubits[0]: b for b in block
                if len(b.op.qubits) == 1 and b.op.gate.kind == "generator" and not b.op.gate.diagonal}
    inv, complex_ids = _inverses(list(pairable.values()), phi, shared)
    mats = {q: inv[id(b)] for q, b in pairable.items()}
    left, phases = list(after), {}
    found, real = _undo_windows(mats, n, {q for q, b in pairable.items() if id(b) in complex_ids})
    if after and len(pairable) == len(block):
        # only single-qubit gates in the block: a phase inside a window of them may be
        # applied right after that window's product (nothing else there acts before it)
        phases, left = _absorb_phases(found, real, after, n)
    fused = {}
    for (lo, w), r in zip(found, real):
        members = [(b, _window_plan(b, n)) for q, b in pairable.items() if lo <= q < lo + w]
        if r and lo + w < n and all(pl is not None and pl[:3] == (lo, w, "real") for _, pl in members):
            fused[(lo, w)] = [(b, pl[3]) for b, pl in members]
    return {"pairable": pairable, "mats": mats, "found": found, "phases": phases, "left": left,
            "fused": fused}


def _undo_block(block, both, buf, n, phi, shared, table, P, plan, grad):
    """Undo a block of commuting trainable gates, then the constant diagonal steps after it
    (the ones just before the block in the circuit), as `_undo_plan` says; the derivatives
    of the fused windows' gates are read on the way (into ``grad``)."""
    pairable, mats, left = plan["pairable"], plan["mats"], plan["left"]
    found = []
    fused = plan["fused"]
    products = _window_matrices(mats, list(fused), both.dtype, plan["phases"]) if fused else {}
    for lo, w in plan["found"]:
        members = fused.get((lo, w))
        if members is None:
            found.append((lo, w))
            continue
        # the window's derivatives from its input (the other windows' products act on other
        # qubits and commute with its generators), in the same read as its product
        S = overlaps.real_overlap_and_apply(both, P, n, lo, w, products[(lo, w)].real, buf)
        both, buf = buf, both
        for b, Gi in members:
            grad[:, b.column] = 2 * np.einsum("ij,pij->p", Gi, S)
        for q in range(lo, lo + w):
            mats.pop(q, None)
    both, buf = _undo_qubits(mats, both, buf, n, P, plan["phases"], found)
    # the block's gates commute: the others may be undone after the single-qubit ones
    for b in block:
        if pairable.get(b.op.qubits[0]) is not b or len(b.op.qubits) != 1:
            both, buf = _undo_step(b, both, buf, n, phi, shared, table, P)
    for f in left:
        if isinstance(f, tuple):       # phases of several steps, merged (they commute)
            kernels.apply_diag(both, n, f[1], f[0])
        else:
            both, buf = _undo_step(f, both, buf, n, phi, shared, table, P)
    return both, buf


def _absorb_phases(found, real, after, n):
    """Move the factors of the constant diagonal steps ``after`` that lie inside a window of
    `_undo_windows` into that window's product. Returns ``({(lo, w): (D,) phases}, left)``
    (the phases undone: conjugated) with ``left`` what remains to apply after the windows:
    the steps untouched, or their other factors merged into ``(qubits, phases)`` diagonals."""
    # the same steps and windows come back on every backward pass: memoised on the latest step
    key = (n, tuple(map(id, after)), tuple(found), real)
    hit = after[0].__dict__.get("_memo_absorb")
    if hit is not None and hit[0] == key:
        return hit[1]
    out = _absorbed(after, n, found, dict(zip((lo for lo, _ in found), real)))
    after[0].__dict__["_memo_absorb"] = (key, out)
    return out


def _absorbed(after, n, found, real):
    windows = {}
    for lo, w in found:
        windows.update({q: (lo, w) for q in range(lo, lo + w)})
    absorbed = {}
    rest = []
    for s in after:
        for f in s.factors:
            d = np.conj(np.asarray(f.cached))
            d, sq = kernels.sort_qubits(d, f.qubits, diag=True)
            home = {windows.get(q) for q in sq}
            lo_w = home.pop() if len(home) == 1 else None
            # a complex phase would make a real window product complex (four times the
            # flops); the last window's product is complex anyway
            if lo_w is None or (np.any(np.imag(d)) and real[lo_w[0]] and lo_w[0] + lo_w[1] < n):
                rest.append((d, sq))
                continue
            lo, w = lo_w
            shape = [2 if lo + i in sq else 1 for i in range(w)]
            full = np.broadcast_to(d.reshape(shape), (2,) * w).reshape(-1)
            absorbed[lo_w] = absorbed.get(lo_w, 1) * full
    if not absorbed:
        return {}, list(after)
    # the other factors, merged into as few diagonals of at most DIAG_WIDTH qubits as go
    groups = []
    for d, sq in rest:
        if groups and len(set(groups[-1][0]) | set(sq)) <= DIAG_WIDTH:
            groups[-1][0].update(sq)
            groups[-1][1].append((d, sq))
        else:
            groups.append((set(sq), [(d, sq)]))
    left = []
    for qs, members in groups:
        union = tuple(sorted(qs))
        total = np.ones((2,) * len(union), dtype=complex)
        for d, sq in members:
            total = total * d.reshape([2 if q in sq else 1 for q in union])
        left.append((union, total.reshape(-1)))
    return absorbed, left


_EYE = np.eye(2)


def _undo_windows(mats, n, complex_q=None):
    """``(windows, real)``: the windows ``(lo, w)`` undone as one product and whether each
    product is real; see `_window_choice`. ``complex_q``: the qubits whose matrices are
    complex (tested here when not given)."""
    if not mats:
        return [], ()
    if complex_q is None:
        complex_q = {q for q, m in mats.items() if np.any(m.imag != 0)}
    found = _window_choice(mats, n, complex_q)
    return found, tuple(not any(q in complex_q for q in range(lo, lo + w)) for lo, w in found)


def _window_choice(mats, n, complex_q):
    """Windows ``(lo, w)`` (`qgradlib.engine.overlaps.window_of`) whose single-qubit matrices
    are undone as one product: the last window when all four are shared (pair products are
    slow there), any other when at least two are, all shared and real (a real product of
    16 x 16 on the float view costs less than two pair passes; a complex one would not)."""
    out = []
    seen = set()
    for q in sorted(mats):
        lo, w = overlaps.window_of(n, q)
        if (lo, w) in seen or w < 2:
            continue
        seen.add((lo, w))
        inside = [mats[r] for r in range(lo, lo + w) if r in mats]
        if any(m.ndim != 2 for m in inside):
            continue
        if lo + w == n and n > 4:
            if len(inside) == w:
                out.append((lo, w))
        elif len(inside) >= 2 and not any(q in complex_q for q in range(lo, lo + w)):
            out.append((lo, w))
    return out


def _window_matrices(mats, windows, dtype, phases):
    """``{(lo, w): (D, D)}``: the Kronecker product of each window's single-qubit matrices
    (identity where a qubit has none), then ``diag(phases)`` where ``phases`` has an entry;
    one einsum for all windows of a width."""
    out = {}
    by_width: dict = {}
    for lo, w in windows:
        by_width.setdefault(w, []).append(lo)
    for w, starts in by_width.items():
        U = np.empty((w, len(starts), 2, 2), dtype=dtype)
        for k in range(w):
            for i, lo in enumerate(starts):
                U[k, i] = mats.get(lo + k, _EYE)
        rows, cols = "abcdefgh"[:w], "ijklmnop"[:w]
        expr = ",".join(f"z{r}{c}" for r, c in zip(rows, cols)) + f"->z{rows}{cols}"
        prods = np.einsum(expr, *U).reshape(len(starts), 2 ** w, 2 ** w)
        for i, lo in enumerate(starts):
            d = phases.get((lo, w)) if phases else None
            out[(lo, w)] = prods[i] if d is None else d[:, None] * prods[i]   # the phases act after
    return out


def _undo_qubits(mats, both, buf, n, P, phases=None, found=None):
    """Apply single-qubit matrices ``{qubit: (2, 2) or (P, 2, 2)}`` to every stacked row
    (they commute): the last four qubits as one 16 x 16 block where all are shared (pair
    products are slow there), neighbours as pairs, the rest one by one."""
    done = set()
    found = _undo_windows(mats, n)[0] if found is None else found
    products = _window_matrices(mats, found, both.dtype, phases)
    for lo, w in found:
        kernels.apply_dense(both, n, products[(lo, w)], tuple(range(lo, lo + w)), buf)
        both, buf = buf, both
        done.update(range(lo, lo + w))
    for q in sorted(mats):
        if q in done:
            continue
        if q + 1 in mats and q + 1 not in done:
            u0, u1 = mats[q], mats[q + 1]
            if u0.ndim == 2 and u1.ndim == 2:
                m = (u0[:, None, :, None] * u1[None, :, None, :]).reshape(4, 4)
            else:
                u0 = np.broadcast_to(u0, (P, 2, 2))
                u1 = np.broadcast_to(u1, (P, 2, 2))
                m = _tile(np.einsum("pij,pkl->pikjl", u0, u1).reshape(P, 4, 4), True)
            kernels.apply_dense(both, n, m, (q, q + 1), buf)
            done.update((q, q + 1))
        else:
            kernels.apply_dense(both, n, _tile(mats[q], mats[q].ndim == 3), (q,), buf)
            done.add(q)
        both, buf = buf, both
    return both, buf
