"""The state as a matrix: a layer of one-qubit gates as one left and one right product.

On up to `SIDE_QUBITS` qubits the cost of the adjoint method is Python calls, not arithmetic:
a gate at a time is several NumPy calls forward and several more backward. Seen as a matrix
``Psi`` (2**a, 2**b), rows the first ``a = n // 2`` qubits and columns the others, a *layer*
(one-qubit parametric gates on distinct qubits, no fixed gate between them) acts as

    Psi -> K_A Psi K_B^T,     K_A, K_B the Kronecker products of its gates on each side,

two small matrix products whatever the number of gates. The factors of every layer are built
at once, one broadcast product a qubit (`qgradlib.engine.small.krons`). Runs of fixed gates between layers are the
constant steps of `qgradlib.engine.small`.

The forward run keeps the state at every layer's output (``keep=True``), so the backward pass
carries the bra alone: at each layer's output it keeps ``Lam`` too, then undoes the layer by
two products. The derivatives of all gates come at the end from overlap matrices of the kept
pairs, ``S_A = conj(Lam) Psi^T`` and ``S_B = Lam^H Psi`` (one batched product a side for all
layers), reduced to each qubit's 2 x 2 overlap by one product with a 0/1 partial-trace matrix
(on sides of `EINSUM_QUBITS` or more by one einsum a qubit):

    dE/dphi_t = 2 Im sum_ij G_t[i, j] R_t[i, j],   R_t the overlap on gate t's qubit,

which is ``2 Im <lam|G_t|psi>`` at the gate's output (the gates of a layer commute). For Pauli
rotations on a small register the same derivatives are one gather instead
(`qgradlib.engine.whole.derivatives`, up to `GATHER_ENTRIES`), and with every qubit on one
side the run and the backward pass are `qgradlib.engine.whole`'s chain of whole-register
matrices. Products stay at or below 64 x 64 x 64 up to 12 qubits, which OpenBLAS runs on the
calling thread.
Values and derivatives equal those of the gate-at-a-time loop to rounding.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from . import small, whole

__all__ = ["SIDE_QUBITS", "ROWS", "ROW_BYTES", "Sides", "eligible", "compiled", "run", "gradient",
           "born_finals", "as_rows", "kept_states", "working_states", "factor_states"]

# at or below this many qubits circuits of one-qubit parametric gates may run as layers
SIDE_QUBITS = 12
# sides of at most this many qubits get their factors of Pauli rotations as cosine-sine
# coefficients times fixed Kronecker terms (three calls); on 4-qubit sides the Kronecker
# build of `small.krons` costs the same, on 5 more
TERM_QUBITS = 3
# at or below this many qubits every qubit is on the column side: a layer is one product
# with its whole-register matrix (16 x 16 at most), one call instead of two
ONE_SIDE_QUBITS = 4
# bytes the kept states of one run may take (above, the gate-at-a-time loop runs instead)
KEEP_BYTES = 2 ** 25
# batches of up to this many rows run one row at a time as layers
# (`qgradlib.engine.statevector.run`): a layered run costs about the same NumPy calls on any
# register up to 12 qubits, and the gate-at-a-time loop over a batch of 4 rows took 4 to 7
# times one layered run here (ring and layered circuits of 4 to 10 qubits, 3 to 50 layers;
# of 8 rows 4 to 11 times)
ROWS = 4
# ... as long as the layered run's factors and working states take at most this many bytes
# (the gate loop holds two states a row whatever the circuit's length)
ROW_BYTES = 2 ** 22

# up to this many gathered amplitudes (columns x 2**n) the derivatives of Pauli rotations
# are one gather (`qgradlib.engine.whole.derivatives`: a few calls); above, the overlap
# matrices' products cost less than the gather
GATHER_ENTRIES = 2 ** 14
# on sides of this many qubits or more each qubit's 2 x 2 overlap is its partial trace by
# einsum, one call a qubit; on smaller sides one product with the 0/1 partial-trace matrix
# costs less (three layers here: 12 against 26 us on 4-qubit sides, 34 against 28 on 5,
# 216 against 43 on 6)
EINSUM_QUBITS = 5

_LAYER = -1


@dataclass(frozen=True, eq=False)
class Sides:
    """A circuit compiled into layers and constant steps (see the module docstring)."""

    n: int
    a: int                    # qubits of the row side
    steps: tuple              # (_LAYER, layer) or a constant step of `qgradlib.engine.small`
    groups: tuple             # (gate, columns (k,) intp) of every parametric gate type
    n_columns: int
    slots_a: np.ndarray       # (L, a): the column on each row-side qubit, n_columns if none
    slots_b: np.ndarray       # (L, n - a)
    has_a: tuple              # per layer: a gate on the row side?
    has_b: tuple
    layer: np.ndarray         # (G,) the layer of every column
    qubit: np.ndarray         # (G,) its qubit
    generators: np.ndarray    # (G, 2, 2)
    pauli: np.ndarray         # (G + 1, 2, 2) ``-2i G`` when every G squares to I/4, else None
    monomial: tuple           # (table (G,), flips (T, N), phases (T, N)): ``-2i G psi =
                              # phases * psi[flips]`` when every such G is monomial, else None
    traces_a: np.ndarray      # (4a, D_A**2): per row-side qubit its 2 x 2 partial trace
    traces_b: np.ndarray      # (None on sides of `EINSUM_QUBITS` or more: `_reduce`)
    layer_steps: tuple        # per layer the index of its step in ``steps``
    whole: tuple = None       # with every qubit on one side: `qgradlib.engine.whole.parts`
    slots_both: np.ndarray = None   # (2L, a): slots_a above slots_b when the sides are equal
    terms: tuple = None       # equal sides of Pauli rotations on up to `TERM_QUBITS` qubits:
                              # `qgradlib.engine.whole.expansion` of both sides' factors
    picks: dict = field(default_factory=dict)   # memo: what `gradient`, `born_finals` gather
    pool: list = field(default_factory=list)    # workspaces of `born_finals`, kept for reuse

    @property
    def n_layers(self) -> int:
        return len(self.has_a)


def eligible(circuit) -> bool:
    """Whether ``circuit`` runs as layers: a `qgradlib.engine.small` circuit of at most
    `SIDE_QUBITS` qubits whose parametric gates all act on one qubit."""
    if circuit.n_qubits > SIDE_QUBITS or not small.eligible(circuit):
        return False
    return small.memoised(circuit, "_memo_sides_ok", lambda c: all(
        len(op.qubits) == 1 for op in c.parametric_operations))


def compiled(circuit) -> Sides:
    """The memoised `Sides` form of an `eligible` circuit (recompiled when it grows)."""
    return small.memoised(circuit, "_memo_sides", _compile)


def as_rows(circuit, rows: int) -> bool:
    """Whether ``rows`` rows of ``circuit`` run one at a time as layers
    (`qgradlib.engine.statevector.run`): an `eligible` circuit, at most `ROWS` rows, and the
    run's `working_states` within `ROW_BYTES`."""
    if rows > ROWS or not eligible(circuit):
        return False
    comp = compiled(circuit)
    return working_states(comp) * 16 * 2 ** comp.n <= ROW_BYTES


def working_states(comp: Sides) -> float:
    """States of the register that `run` without ``keep`` holds at its peak, its result
    included: every layer's factors (`factor_states`) and three working states, or with
    every qubit on one side the chain, each layer's output and the result. The memory
    guard's estimate (`qgradlib.engine.statevector.run_states`): change it with `run`."""
    if comp.whole is not None:
        return factor_states(comp) + comp.n_layers + 1.0
    return factor_states(comp) + 3.0


def kept_states(comp: Sides) -> float:
    """States a kept run and its gradient hold at once: the bra and the ket at every layer's
    output, every layer's factors (`factor_states`) and four working states."""
    return 2 * comp.n_layers + 4 + factor_states(comp)


def factor_states(comp: Sides) -> float:
    """Every layer's factors in states of the register, as built: the chain (L, N, N) with
    every qubit on one side (and the Kronecker factors it is made from when there is no
    expansion), else (L, D_A, D_A) and (L, D_B, D_B); a Kronecker build (`small.krons`)
    holds the inputs of its last product beside it too, a quarter of its size."""
    N = 2 ** comp.n
    L = comp.n_layers
    if comp.whole is not None:
        return float(L * N) * (1.0 if comp.whole[2] is not None else 2.25)
    DA, DB = 2 ** comp.a, 2 ** (comp.n - comp.a)
    f = L * (DA * DA + DB * DB) / N
    return f if comp.terms is not None else 1.25 * f


def _compile(circuit):
    n = circuit.n_qubits
    a = n // 2 if n > ONE_SIDE_QUBITS else 0
    steps, pending, groups = [], [], {}
    layers = []                     # per layer {qubit: column}
    open_layer = None
    layer_of, qubit_of, gens = [], [], []
    col = 0
    pops = iter(circuit.parametric_operations)
    # the constant steps of `qgradlib.engine.small`'s compiled form (the same runs of fixed
    # gates between parametric ones), compiled once for both
    for st in small.gate_steps(small.compiled(circuit)):
        if st[0] < small._ONE:
            pending.append(_constant(st, a))
            continue
        op = next(pops)
        g = op.gate
        q = op.qubits[0]
        if pending or open_layer is None or q in open_layer:
            steps.extend(pending)
            pending = []
            open_layer = {}
            layers.append(open_layer)
            steps.append((_LAYER, len(layers) - 1))
        open_layer[q] = col
        groups.setdefault(id(g), (g, []))[1].append(col)
        layer_of.append(len(layers) - 1)
        qubit_of.append(q)
        gens.append(np.asarray(g.generator, dtype=complex))
        col += 1
    steps.extend(pending)
    slots = np.full((len(layers), n), col, dtype=np.intp)
    for i, lay in enumerate(layers):
        for q, c in lay.items():
            slots[i, q] = c
    pauli = _pauli(gens)
    layer_steps = tuple(i for i, st in enumerate(steps) if st[0] == _LAYER)
    both = np.concatenate([slots[:, :a], slots[:, a:]]) if 2 * a == n and a else None
    return Sides(n, a, tuple(steps),
                 tuple((g, np.array(cols, dtype=np.intp)) for g, cols in groups.values()), col,
                 slots[:, :a].copy(), slots[:, a:].copy(),
                 tuple(bool(any(q < a for q in lay)) for lay in layers),
                 tuple(bool(any(q >= a for q in lay)) for lay in layers),
                 np.array(layer_of, dtype=np.intp), np.array(qubit_of, dtype=np.intp),
                 np.array(gens).reshape(-1, 2, 2), pauli, _monomial(pauli, qubit_of, n),
                 _traces(a) if a < EINSUM_QUBITS else None,
                 _traces(n - a) if n - a < EINSUM_QUBITS else None, layer_steps,
                 whole.parts(steps, layer_steps, slots, pauli, n) if a == 0 else None,
                 both, whole.expansion(both, pauli, None, a)
                 if both is not None and pauli is not None and a <= TERM_QUBITS else None)


def _constant(s, a):
    """A constant step of `qgradlib.engine.small`; a diagonal gets its conjugate and itself
    as (D_A, D_B) matrices beside it (for the backward pass and the kept run)."""
    if s[0] == small._CONST_DIAG:
        return s + (np.conj(s[1]).reshape(2 ** a, -1), s[1].reshape(2 ** a, -1))
    return s


def _monomial(pauli, qubits, n):
    """Tables of ``-2i G`` on its qubit as a permutation with phases, one per distinct
    (qubit, matrix), when every generator is a Pauli rotation's (``pauli``, from `_pauli`)
    with one entry a row; else None."""
    if pauli is None or not qubits:
        return None
    nz = np.abs(pauli[:-1]) > 1e-14
    if not np.all(nz.sum(axis=2) == 1):
        return None
    idx = np.arange(2 ** n)
    keys, flips, phases, table = {}, [], [], []
    for k, q in enumerate(qubits):
        key = (q, pauli[k].tobytes())
        if key not in keys:
            M = pauli[k]
            bit = (idx >> (n - 1 - q)) & 1
            col = np.argmax(nz[k], axis=1)              # the source bit of each output bit
            flips.append(np.where(col[bit] != bit, idx ^ (1 << (n - 1 - q)), idx))
            phases.append(M[bit, col[bit]])
            keys[key] = len(keys)
        table.append(keys[key])
    return (np.array(table, dtype=np.intp), np.array(flips), np.array(phases))


def _pauli(gens):
    """``-2i G`` of every generator (and a zero for the identity slot) when all of them
    square to I/4 (Pauli rotations: ``expm(-1j a G) = cos(a/2) I - 2i sin(a/2) G``), else None."""
    g = np.array(gens, dtype=complex).reshape(-1, 2, 2)
    if not np.all(np.abs(g @ g - np.eye(2) / 4) <= 1e-15):
        return None
    out = np.zeros((g.shape[0] + 1, 2, 2), dtype=complex)
    out[:-1] = -2j * g
    return out


_TRACES = {}


def _traces(k):
    """(4k, D*D) 0/1 matrix (memoised: it depends on k alone): row (p, i, j) sums the entries (x i y, x j y) of a (D, D) matrix,
    D = 2**k, over the other qubits x, y (the partial trace onto qubit p)."""
    hit = _TRACES.get(k)
    if hit is not None:
        return hit
    D = 2 ** k
    bits = (np.arange(D)[:, None] >> (k - 1 - np.arange(k))) & 1          # (D, k), qubit 0 first
    same = bits[:, None, :] == bits[None, :, :]                           # (D, D, k)
    out = np.zeros((k, 2, 2, D, D))
    for p in range(k):
        others = np.delete(same, p, axis=2).all(axis=2)
        for i in range(2):
            for j in range(2):
                out[p, i, j] = others & (bits[:, None, p] == i) & (bits[None, :, p] == j)
    out = np.ascontiguousarray(out.reshape(4 * k, D * D))
    out.flags.writeable = False
    return _TRACES.setdefault(k, out)


@dataclass(frozen=True, eq=False)
class Kept:
    """What a kept run leaves for `gradient`: each layer's factors and output state."""

    left: np.ndarray          # (L, D_A, D_A)
    right: np.ndarray         # (L, D_B, D_B)
    states: np.ndarray        # (L, D_A, D_B)
    chain: np.ndarray = None  # with every qubit on one side: `qgradlib.engine.whole.chain`


def _factors(comp, phi):
    """Per layer its row-side and column-side factors at gate angles ``phi`` (G,)."""
    if comp.terms is not None:
        # both sides' factors in row form (K.T) from their fixed terms; K a transposed view
        K = np.swapaxes(whole.expanded(comp.terms, whole.half_angles(phi)), 1, 2)
        return K[:comp.n_layers], K[comp.n_layers:]
    if comp.pauli is not None:
        # every gate cos(a/2) I - 2i sin(a/2) G, the identity slot at a = 0
        t = whole.half_angles(phi)
        m = t[:, 0, None, None] * _EYE2 + t[:, 1, None, None] * comp.pauli
    else:
        m = np.empty((comp.n_columns + 1, 2, 2), dtype=complex)
        m[-1] = _EYE2
        for g, cols in comp.groups:
            m[cols] = g._matrices(phi[cols])
    if 2 * comp.a == comp.n:
        # sides of one size: the factors of both in one Kronecker build
        both = small.krons(m[comp.slots_both])
        return both[:comp.n_layers], both[comp.n_layers:]
    left = small.krons(m[comp.slots_a]) if comp.a else np.ones((comp.n_layers, 1, 1), dtype=complex)
    return left, small.krons(m[comp.slots_b])


_EYE2 = np.eye(2, dtype=complex)


def run(circuit, phi, keep=False, resume=None):
    """The final state (2**n,) of an `eligible` circuit at gate angles ``phi`` (G,), and with
    ``keep`` the `Kept` record `gradient` needs (else None).

    ``resume`` (with ``keep``) is an earlier kept run's record ``(angles as bytes, psi,
    kept)``: the layers before the first whose angles differ are that run's kept states,
    copied, and the run starts there (a rotosolve sweep moves one angle at a time).

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> c = qg.Circuit(3).ry(0).ry(2).cz(0, 1).rx(1)
    >>> phi = np.array([0.3, -0.5, 0.9])
    >>> psi, _ = run(c, phi)
    >>> bool(np.allclose(psi, qg.state(c, phi, fuse=False)))
    True
    """
    comp = compiled(circuit)
    n, a = comp.n, comp.a
    DA, DB = 2 ** a, 2 ** (n - a)
    start = _unchanged_layers(comp, phi, resume) if keep and resume is not None else 0
    if comp.whole is not None:
        # every qubit on one side: a chain of whole-register matrices
        pre, end, B = comp.whole
        if B is not None:
            KA = KB = None                  # built by `born_finals` if it needs them
            W = whole.expanded(B, whole.half_angles(phi))
        else:
            KA, KB = _factors(comp, phi)
            W = whole.chain(KB, pre)
        flat = np.empty((comp.n_layers, DB), dtype=complex)
        if start:
            flat[:start] = resume[2].states[:start].reshape(start, DB)
        psi = whole.forward(W, end, flat, start)
        if not keep:
            return psi, None
        kept = Kept(KA, KB, flat.reshape(-1, 1, DB), W)
        comp.picks["kept"] = (np.asarray(phi, dtype=float).tobytes(), psi, kept)
        return psi, kept
    KA, KB = _factors(comp, phi)
    states = np.empty((comp.n_layers, DA, DB), dtype=complex) if keep else None
    x, y, t = (np.empty((DA, DB), dtype=complex) for _ in range(3))
    x[...] = 0
    x[0, 0] = 1
    cur = x
    first_step = 0
    if start:
        # the unchanged layers' outputs as they were; on from the last of them
        states[:start] = resume[2].states[:start]
        cur = states[start - 1]
        first_step = comp.layer_steps[start - 1] + 1
    for s in comp.steps[first_step:]:
        if s[0] == _LAYER:
            b = s[1]
            out = states[b] if keep else (y if cur is x else x)
            _layer(cur, KA[b], KB[b].T, comp.has_a[b], comp.has_b[b], t, out)
        elif s[0] == small._CONST_DIAG:
            out = y if cur is x else x
            np.multiply(cur, s[3], out=out)         # never in place: cur may be kept
        else:
            out = y if cur is x else x
            small._constant(s, cur.reshape(1, -1), out.reshape(1, -1), n)
        cur = out
    psi = cur.reshape(-1)
    if not keep:
        return psi, None
    if comp.steps and comp.steps[-1][0] == _LAYER:
        psi = psi.copy()                    # not a view of the kept states
    kept = Kept(KA, KB, states)
    # the last kept run, for `born_finals` from the same angles (a shift plan's batch
    # right after the value it differentiates); both are only ever read
    comp.picks["kept"] = (np.asarray(phi, dtype=float).tobytes(), psi, kept)
    return psi, kept


def _unchanged_layers(comp, phi, record):
    """How many leading layers have the same angles in ``phi`` (G,) as in a kept run's
    ``record`` (all of them when no angle differs)."""
    moved = np.flatnonzero(np.frombuffer(record[0]) != phi)
    return int(comp.layer[moved].min()) if moved.size else comp.n_layers


def _layer(cur, left, right, has_left, has_right, tmp, out):
    """``out = left @ cur @ right`` (a side without gates skipped); ``out`` is not ``cur``."""
    if has_left and has_right:
        np.matmul(left, cur, out=tmp)
        np.matmul(tmp, right, out=out)
    elif has_left:
        np.matmul(left, cur, out=out)
    elif has_right:
        np.matmul(cur, right, out=out)
    else:
        np.copyto(out, cur)


def gradient(circuit, kept: Kept, lam, first: int = 0) -> np.ndarray:
    """dE/dphi (G,) from a kept run and ``lam = O psi`` (2**n,) at its final state.

    Columns of layers before ``first`` are left zero (the pass stops there).

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> from scipy.linalg import expm
    >>> c = qg.Circuit(2).ry(0).ry(1).cz(0, 1).ry(0)
    >>> phi = np.array([0.3, -0.5, 0.9])
    >>> psi, kept = run(c, phi, keep=True)
    >>> ZZ = np.diag([1.0, -1.0, -1.0, 1.0])
    >>> g = gradient(c, kept, ZZ @ psi)
    >>> E = lambda p: float(np.real(np.vdot(run(c, p)[0], ZZ @ run(c, p)[0])))
    >>> fd = [(E(phi + 1e-6 * e) - E(phi - 1e-6 * e)) / 2e-6 for e in np.eye(3)]
    >>> bool(np.allclose(g, fd, atol=1e-8))
    True
    """
    comp = compiled(circuit)
    n, a = comp.n, comp.a
    DA, DB = 2 ** a, 2 ** (n - a)
    L = comp.n_layers
    if L == 0 or first >= L:
        return np.zeros(comp.n_columns)
    if kept.chain is not None:
        lams = whole.backward(kept.chain, comp.whole[1], np.reshape(lam, -1), first,
                              np.empty((L, DB), dtype=complex)).reshape(L, 1, DB)
    else:
        lams = _undone(comp, kept, lam, first)
    # the gather: always with every qubit on one side, on two while it stays small
    if comp.monomial is not None and (kept.chain is not None
                                      or comp.n_columns * DA * DB <= GATHER_ENTRIES):
        sel, gather = whole.gather_for(comp, first)
        d = whole.derivatives(kept.states.reshape(L, -1), lams.reshape(L, -1), gather)
        if sel is None:
            return d                        # every column: no scatter into zeros
        grad = np.zeros(comp.n_columns)
        grad[sel] = d
        return grad
    return _overlap_derivatives(comp, kept.states, lams, first, np.zeros(comp.n_columns))


def _undone(comp, kept, lam, first):
    """The bra (L, D_A, D_B) at each layer's output from ``first`` on, undoing the layers
    and constant steps from ``lam`` at the final state."""
    n, a = comp.n, comp.a
    DA, DB = 2 ** a, 2 ** (n - a)
    L = comp.n_layers
    # the undo factors of every layer at once: K_A^H on the left, conj(K_B) on the right
    KA, KB = np.conj(np.swapaxes(kept.left, 1, 2)), np.conj(kept.right)
    lams = np.empty((L, DA, DB), dtype=complex)
    x, y, t = (np.empty((DA, DB), dtype=complex) for _ in range(3))
    x[...] = np.reshape(lam, (DA, DB))      # the caller's array stays as it is
    cur = x
    for s in reversed(comp.steps):
        if s[0] == _LAYER:
            b = s[1]
            np.copyto(lams[b], cur)
            if b == first:
                break
            out = y if cur is x else x
            # undo: Psi = K_A^H Psi' conj(K_B)
            _layer(cur, KA[b], KB[b], comp.has_a[b], comp.has_b[b], t, out)
        elif s[0] == small._CONST_DIAG:
            cur *= s[2]                       # in place: cur is a working buffer here
            continue
        else:
            out = y if cur is x else x
            small._undo(s, cur.reshape(1, -1), out.reshape(1, -1), None, n)
        cur = out
    return lams


def _overlap_derivatives(comp, states, lams, first, grad):
    """``grad`` with the columns of layers from ``first`` on, from the kept kets and bras
    (L, D_A, D_B) at each layer's output by the overlap matrices (the module docstring)."""
    n, a = comp.n, comp.a
    L = comp.n_layers
    psis = states[first:]
    lc = lams[first:].conj()
    R = np.empty((L - first, n, 2, 2), dtype=complex)
    if a:
        SA = np.matmul(lc, np.swapaxes(psis, 1, 2))                    # (L, D_A, D_A)
        R[:, :a] = _reduce(SA, comp.traces_a, a)
    SB = np.matmul(np.swapaxes(lc, 1, 2), psis)                        # (L, D_B, D_B)
    R[:, a:] = _reduce(SB, comp.traces_b, n - a)
    pick = comp.picks.get(first)
    if pick is None:
        sel = np.flatnonzero(comp.layer >= first)
        pick = comp.picks.setdefault(first, (sel, (comp.layer[sel] - first) * n + comp.qubit[sel],
                                             comp.generators[sel]))
    sel, where, gens = pick
    grad[sel] = 2 * np.einsum("tij,tij->t", gens, R.reshape(-1, 2, 2)[where]).imag
    return grad


def _reduce(S, traces, k):
    """Per qubit of a side its 2 x 2 overlap (L, k, 2, 2) from the side's overlaps S (L, D, D):
    one real product of the 0/1 partial-trace matrix with the float view of S, or without
    that matrix (``traces`` None) the partial trace onto each qubit by einsum,
    ``R_p[i, j] = sum_xy S[x i y, x j y]``."""
    L = S.shape[0]
    if traces is None:
        out = np.empty((L, k, 2, 2), dtype=complex)
        for p in range(k):
            x, y = 2 ** p, 2 ** (k - p - 1)
            np.einsum("lxiyxjy->lij", S.reshape(L, x, 2, y, x, 2, y), out=out[:, p])
        return out
    f = S.reshape(L, -1).view(np.float64).reshape(L, -1, 2)             # (L, D*D, re/im)
    r = np.matmul(traces, f)                                            # (L, 4k, 2)
    return r.view(complex).reshape(L, k, 2, 2)


def born_finals(circuit, ref, columns, angles, reference=None):
    """Final states (1 + R, 2**n): row 0 the reference's at gate angles ``ref`` (G,), row
    1 + r that of the reference with column ``columns[r]`` at angle ``angles[r]`` instead.

    Every such row leaves the reference at the output of its gate's layer: the gates of a
    layer commute, so it is born there as ``U(angle - ref) psi_layer`` from the kept state,
    and from there it runs with the rows born before it. The batch is laid out (D_A, rows,
    D_B), so that a layer is one product from the left on all alive rows and one broadcast
    product from the right. ``reference`` is ``run(circuit, ref, keep=True)`` when it is at
    hand.

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> c = qg.Circuit(3).ry(0).rx(1).cz(0, 1).ry(2).cnot(1, 2).rz(0)
    >>> ref = np.array([0.1, 0.2, 0.3, 0.4])
    >>> out = born_finals(c, ref, np.array([3, 0, 2]), np.array([1.0, -0.5, 2.0]))
    >>> rows = np.array([ref, [0.1, 0.2, 0.3, 1.0], [-0.5, 0.2, 0.3, 0.4], [0.1, 0.2, 2.0, 0.4]])
    >>> bool(np.allclose(out, [qg.state(c, r, fuse=False) for r in rows], rtol=0, atol=1e-14))
    True
    """
    comp = compiled(circuit)
    n, a = comp.n, comp.a
    DA, DB = 2 ** a, 2 ** (n - a)
    N = DA * DB
    if reference is None:
        hit = comp.picks.get("kept")
        if hit is not None and hit[0] == np.asarray(ref, dtype=float).tobytes():
            reference = hit[1:]
        else:
            # from the last kept run's layers that these angles leave as they were
            reference = run(circuit, ref, keep=True, resume=hit)
    psi0, kept = reference
    R = columns.size
    out = np.empty((1 + R, N), dtype=complex)
    out[0] = psi0
    if R == 0:
        return out
    order, src_layer, alive, gather = _births(comp, columns)
    cols = columns[order]
    work = _workspace(comp, R, N)
    x, y = work[0].reshape(DA, R, DB), work[1].reshape(DA, R, DB)
    x[...] = _born_rows(comp, kept, cols, src_layer, angles[order] - ref[cols], gather,
                        work[2:]).reshape(R, DA, DB).transpose(1, 0, 2)
    KA, KB = (kept.left, kept.right) if kept.right is not None else _factors(comp, ref)
    count = 0
    cur, other = x, y
    for s in comp.steps[comp.layer_steps[src_layer[0]]:]:
        if s[0] == _LAYER:
            b = s[1]
            if count:
                c3, o3 = cur[:, :count], other[:, :count]
                if comp.has_a[b]:
                    # from the left on all alive rows at once: a (D_A, count * D_B) view
                    np.matmul(KA[b], c3.reshape(DA, -1), out=o3.reshape(DA, -1))
                    c3, o3 = o3, c3
                    cur, other = other, cur
                if comp.has_b[b]:
                    np.matmul(c3, KB[b].T, out=o3)
                    cur, other = other, cur
            new = int(alive[b])
            if new > count:
                if cur is not x:
                    cur[:, count:new] = x[:, count:new]
                count = new
        elif s[0] == small._CONST_DIAG:
            cur[:, :count] *= s[3][:, None, :]
        else:
            # other constants act on rows: the alive rows there and back
            rows = np.ascontiguousarray(cur[:, :count].transpose(1, 0, 2)).reshape(count, N)
            res, _ = small._constant(s, rows, np.empty_like(rows), n)
            cur[:, :count] = res.reshape(count, DA, DB).transpose(1, 0, 2)
    out[1 + order] = cur.transpose(1, 0, 2).reshape(R, N)
    if sum(w[0].nbytes for w in comp.pool) * 4 + 4 * work[0].nbytes <= _POOL_BYTES:
        comp.pool.append(work)
    return out


# bytes of the workspaces one compiled circuit keeps for `born_finals`: fresh buffers of a
# few hundred KiB each call cost page faults on every call where the allocator gives the
# memory back between calls (measured 3x on the born rows of 10 qubits here)
_POOL_BYTES = 2 ** 25


def _workspace(comp, R, N):
    """Four (R, N) complex buffers: a kept workspace of that size (each thread takes its
    own), or new ones."""
    for i, w in enumerate(comp.pool):
        if w[0].shape == (R, N):
            try:
                return comp.pool.pop(i)
            except IndexError:          # another thread took it meanwhile
                break
    return tuple(np.empty((R, N), dtype=complex) for _ in range(4))


def _births(comp, columns):
    """Memoised per pattern of born columns: their order of birth, each one's layer, how
    many rows are alive after each layer, and for Pauli rotations with one entry a row the
    flat indices into the kept states and the phases of ``-2i G psi`` (`_born_rows`)."""
    key = ("born", columns.tobytes())
    hit = comp.picks.get(key)
    if hit is None:
        born_at = comp.layer[columns]
        order = np.argsort(born_at, kind="stable")
        alive = np.searchsorted(born_at[order], np.arange(comp.n_layers), side="right")
        gather = None
        if comp.monomial is not None:
            tab = comp.monomial[0][columns[order]]
            N = comp.monomial[1].shape[1]
            gather = (born_at[order][:, None] * N + comp.monomial[1][tab], comp.monomial[2][tab])
        hit = (order, born_at[order], alive, gather)
        _remember(comp, key, hit, 0 if gather is None else gather[0].nbytes + gather[1].nbytes)
    return hit


# bytes the memoised birth patterns of one compiled circuit may hold (a rotosolve sweep
# meets one pattern per parameter; a shift plan's pattern holds two arrays of rows x N)
_PICK_BYTES = 2 ** 25


def _remember(comp, key, value, nbytes):
    """Memoise ``value`` in ``comp.picks``, all patterns forgotten when they would exceed
    `_PICK_BYTES` (or 4096 entries)."""
    used = comp.picks.get("bytes", 0) + nbytes
    if used > _PICK_BYTES or len(comp.picks) > 4096:
        comp.picks.clear()
        used = nbytes
    comp.picks["bytes"] = used
    comp.picks[key] = value


def _born_rows(comp, kept, cols, layers, delta, gather, work):
    """``U_c(delta) psi_layer`` (R, N) for every born row, in the second of the two (R, N)
    buffers ``work``: its gate moved by ``delta`` on the kept output of its layer. Pauli rotations ``cos(d/2) psi + sin(d/2) (-2i G) psi``, the
    second term a permutation with phases (one gather for all rows); other gates one
    product a qubit."""
    N = kept.states[0].size
    src, moved = work
    np.take(kept.states.reshape(-1, N), layers, axis=0, out=src, mode="clip")
    if gather is not None:
        np.take(kept.states, gather[0], out=moved, mode="clip")
        moved *= gather[1]
        h = 0.5 * delta
        moved *= np.sin(h)[:, None]
        src *= np.cos(h)[:, None]
        moved += src
        return moved
    U = _born_matrices(comp, cols, delta)
    qs = comp.qubit[cols]
    out = moved
    for q in np.unique(qs):
        rows = np.flatnonzero(qs == q)
        out[rows] = np.matmul(U[rows, None], src[rows].reshape(rows.size, 2 ** q, 2, -1)).reshape(rows.size, N)
    return out


def _born_matrices(comp, columns, delta):
    """``U(delta)`` (R, 2, 2) of the gates of ``columns`` (generator gates: U(a + d) = U(d) U(a))."""
    if comp.pauli is not None:
        h = 0.5 * delta
        return np.cos(h)[:, None, None] * _EYE2 + np.sin(h)[:, None, None] * comp.pauli[columns]
    U = np.empty((columns.size, 2, 2), dtype=complex)
    for g, cols in comp.groups:
        sel = np.flatnonzero(np.isin(columns, cols))
        if sel.size:
            U[sel] = g._matrices(delta[sel])
    return U
