"""Statevector kernels on batches of states, shape (B, 2**n), and circuit runs.

Gates act on reshaped views (see `qgradlib.engine.kernels`); no full-size matrix is built.
`run` compiles the circuit once (`qgradlib.engine.program`, with optional gate fusion). A
small batch alternates between two state buffers; a large one (at least `IN_PLACE`
amplitudes) is updated in place, each kernel holding only a piece-sized temporary
(`qgradlib.engine.kernels.in_place`), so the run holds one batch of states and a little.

States are complex128, or complex64 with ``dtype=np.complex64`` (the ``precision="single"``
option of the user-facing functions): every kernel then works in single precision.

Fusion is on by default and switched per call (``run(..., fuse=False)``; the user-facing
functions take ``fuse=`` and carry it in their `Spec`). It never changes a result by more than
rounding (~1e-14).

Operations whose object's ``kind`` is not a gate kind (fixed, generator, hamiltonian,
function) are not gates: a noise channel (``kind = "channel"``), for instance. They take no
column of ``phi`` (unless they say ``parametric``), and `run` hands the states to the
object's ``apply_states(psi, n, qubits) -> psi`` method, or raises ValueError pointing to the
density-matrix path when it has none.
"""
from __future__ import annotations

import numpy as np

from .threads import limited
from . import kernels, scratch, sides, small
from .memory import guard, guard_states
from .program import program, step_matrix

__all__ = ["zero_states", "apply_matrix", "apply_diagonal", "apply_gate", "run", "run_states",
           "IN_PLACE"]

# a batch of at least this many amplitudes runs in place (one state a row, not two); below
# it the two alternating buffers are cheaper than cutting the state into pieces
IN_PLACE = 2 ** 20


def zero_states(n_qubits: int, batch: int = 1, dtype=np.complex128) -> np.ndarray:
    """``batch`` copies of ``|0...0>``, shape (batch, 2**n), of ``dtype`` (complex128 or
    complex64).

    Examples
    --------
    >>> zero_states(2, 1).tolist()
    [[(1+0j), 0j, 0j, 0j]]
    >>> zero_states(2, 1, np.complex64).dtype.name
    'complex64'
    """
    dtype = np.dtype(dtype)
    nbytes = batch * (2 ** n_qubits) * dtype.itemsize
    guard(nbytes, f"a batch of {batch} state(s) of {n_qubits} qubits")
    psi = np.zeros((batch, 2 ** n_qubits), dtype=dtype)
    psi[:, 0] = 1.0
    return psi


def apply_matrix(psi: np.ndarray, n: int, mat: np.ndarray, qubits, out=None) -> np.ndarray:
    """Apply a (d, d) or per-row (B, d, d) matrix to ``qubits``; returns a new array (or ``out``).

    ``out`` (same shape as ``psi``, not overlapping it) receives the result when given.

    Examples
    --------
    >>> import numpy as np
    >>> X = np.array([[0, 1], [1, 0]])
    >>> apply_matrix(zero_states(2), 2, X, (1,)).real.tolist()
    [[0.0, 1.0, 0.0, 0.0]]
    """
    mat = np.asarray(mat)
    if mat.dtype != complex:
        mat = mat.astype(complex)
    # the kernels work on reshaped and float views of C-ordered complex rows (complex64
    # states stay single precision)
    dtype = psi.dtype if getattr(psi, "dtype", None) == np.complex64 else np.dtype(complex)
    psi = np.ascontiguousarray(psi, dtype=dtype)
    if out is None:
        out = np.empty_like(psi)
    elif not (out.flags.c_contiguous and out.dtype == dtype and out.shape == psi.shape):
        raise ValueError(f"out must be a C-contiguous {dtype.name} array of shape {psi.shape}")
    return kernels.apply_dense(psi, n, mat, tuple(qubits), out)


def apply_diagonal(psi: np.ndarray, n: int, diag: np.ndarray, qubits) -> np.ndarray:
    """Multiply by a (d,) or per-row (B, d) diagonal on ``qubits``, in place; returns psi.

    Examples
    --------
    >>> import numpy as np
    >>> from qgradlib.engine import apply_diagonal
    >>> psi = np.full((1, 4), 0.5, dtype=complex)
    >>> apply_diagonal(psi, 2, np.array([1.0, -1.0]), (1,)).real.tolist()   # Z on qubit 1
    [[0.5, -0.5, 0.5, -0.5]]
    """
    if psi.flags.c_contiguous and psi.dtype in (np.complex128, np.complex64):
        return kernels.apply_diag(psi, n, np.asarray(diag), tuple(qubits))
    # strided or non-complex input: work on a C-ordered complex copy and write it back
    if not np.iscomplexobj(psi) and np.any(np.imag(diag)):
        raise TypeError(f"psi has dtype {psi.dtype}: complex phases need a complex array (in place)")
    work = np.array(psi, dtype=complex, order="C")
    kernels.apply_diag(work, n, np.asarray(diag, dtype=complex), tuple(qubits))
    psi[...] = work if np.iscomplexobj(psi) else work.real
    return psi


def apply_gate(psi, n, gate, qubits, angles=None, out=None):
    """Apply ``gate`` (angles: None, or per-row array of shape (B,) or (1,)).

    Diagonal gates act in place (``psi`` is returned); others return a new array or ``out``.

    Examples
    --------
    >>> import numpy as np
    >>> from qgradlib import gates
    >>> from qgradlib.engine import apply_gate, zero_states
    >>> psi = apply_gate(zero_states(2, 1), 2, gates.H, (0,))
    >>> psi = apply_gate(psi, 2, gates.CNOT, (0, 1))
    >>> np.round(psi.real, 4).tolist()              # a Bell pair
    [[0.7071, 0.0, 0.0, 0.7071]]
    """
    if not gate.parametric:
        if gate.diagonal:
            return apply_diagonal(psi, n, np.diag(gate.unitary), qubits)
        return apply_matrix(psi, n, gate.unitary, qubits, out=out)
    a = np.asarray(angles, dtype=float).reshape(-1)
    shared = a.size == 1 or np.all(a == a[0])
    if shared:
        a = a[:1]
    if gate.diagonal:
        dv = gate.diagonal_values(a)
        return apply_diagonal(psi, n, dv[0] if shared else dv, qubits)
    mats = gate._matrices(a)
    return apply_matrix(psi, n, mats[0] if shared else mats, qubits, out=out)


def _table(prog, phi, shared):
    """Matrices (or diagonals) of every varying factor, one vectorised call per gate."""
    table = []
    for gate, d_only, cols in prog.groups:
        sh = shared[cols]
        if np.all(sh):
            a = phi[0, cols]
            vals = gate.diagonal_values(a) if d_only else gate._matrices(a)
            table.append((vals[:, None], sh))
            continue
        flat = phi[:, cols].T.reshape(-1)
        vals = gate.diagonal_values(flat) if d_only else gate._matrices(flat)
        table.append((vals.reshape((len(cols), phi.shape[0]) + vals.shape[1:]), sh))
    return table


def _solo(step, cur, other, n, phi, inserts, shared):
    """A gate that is never fused: Hamiltonian or function gates, wide gates, kept columns.
    Returns ``(state, spare)``; with ``other is cur`` the gate is applied in place."""
    from ..circuits.gates import hamiltonian_matrices

    g = step.op.gate
    qs = tuple(step.op.qubits)
    if not g.parametric:
        if g.diagonal:
            return kernels.apply_diag(cur, n, np.diag(g.unitary), qs), other
        return kernels.apply_dense(cur, n, np.asarray(g.unitary), qs, other), cur
    col = step.column
    a = phi[:, col]
    if g.kind == "hamiltonian" and inserts is not None and any(col in row for row in inserts):
        mats = np.concatenate([hamiltonian_matrices(g, a[b:b + 1], row.get(col, ()))
                               for b, row in enumerate(inserts)])
        return kernels.apply_dense(cur, n, mats, qs, other), cur
    aa = a[:1] if shared[col] else a
    if g.diagonal:
        d = g.diagonal_values(aa)
        return kernels.apply_diag(cur, n, d[0] if shared[col] else d, qs), other
    m = g._matrices(aa)
    return kernels.apply_dense(cur, n, m[0] if shared[col] else m, qs, other), cur


def _external(step, cur, n):
    obj = step.op.gate
    fn = getattr(obj, "apply_states", None)
    if fn is None:
        name = getattr(obj, "name", type(obj).__name__)
        raise ValueError(f"operation {name!r} on qubits {tuple(step.op.qubits)} is not a gate (kind "
                         f"{getattr(obj, 'kind', None)!r}) and has no apply_states(psi, n, qubits) "
                         "method: the statevector engine cannot apply it; a circuit with noise "
                         "channels has no pure state and runs on the density-matrix path")
    return np.ascontiguousarray(fn(cur, n, tuple(step.op.qubits)), dtype=cur.dtype)


def _run_small(circuit, phi, psi, out):
    """`run` on few qubits (`qgradlib.engine.small`), with the same checks and guard."""
    B, n = phi.shape[0], circuit.n_qubits
    if phi.shape[1] != len(circuit.parametric_operations):
        raise ValueError(f"phi must have one column per parametric operation: shape (B, "
                         f"{len(circuit.parametric_operations)}); got {phi.shape}")
    if out is not None and (out.shape != (B, 2 ** n) or out.dtype != complex):
        raise ValueError(f"out must be a complex array of shape {(B, 2 ** n)}; got {out.shape} {out.dtype}")
    if psi is not None and np.shape(psi) != (B, 2 ** n):
        raise ValueError(f"psi must have shape {(B, 2 ** n)}; got {np.shape(psi)}")
    guard_states(n, run_states(circuit, B) - B * (out is not None), f"a run of {B} row(s)")
    if psi is None and sides.as_rows(circuit, B):
        # a few rows of a layered circuit: one layered run each costs less than the gate
        # loop over all of them (`qgradlib.engine.sides.ROWS`)
        res = out if out is not None else np.empty((B, 2 ** n), dtype=complex)
        for b in range(B):
            res[b] = sides.run(circuit, phi[b])[0]
        return res
    return small.run(circuit, phi, psi, out)


def run_states(circuit, rows: int = 1) -> float:
    """States that `run` keeps alive at its peak on ``rows`` rows: two alternating buffers a
    row, or, for a batch run in place (`IN_PLACE`), one a row and the pieces of the widest
    in-place kernel (`qgradlib.engine.kernels.in_place_scratch`). The result is one of them;
    initial states ``psi``, when given, are the caller's on top. In states of the run's own
    dtype. A few rows of a layered circuit (`qgradlib.engine.sides.as_rows`) may run one at
    a time as layers instead: then the larger of the two estimates
    (`qgradlib.engine.sides.working_states` beside the rows' results). The memory guard's
    estimate (`qgradlib.engine.memory`): change it with `run`.

    Examples
    --------
    >>> import qgradlib as qg
    >>> run_states(qg.Circuit(4).h(0).cz(0, 1)), run_states(qg.Circuit(24).h(0)) < 1.05
    (2.0, True)
    >>> run_states(qg.Circuit(2).ry(0).ry(1))   # one layer: its 4 x 4 matrix (4 states), output, result
    6.0
    """
    n = circuit.n_qubits
    N = 2 ** n
    if small.eligible(circuit) and sides.as_rows(circuit, rows):
        # the rows' results beside one layered run (whose own result is in its count)
        layered = rows + sides.working_states(sides.compiled(circuit)) - 1
        loop = 2.0 * rows if rows * N < IN_PLACE else _in_place(circuit, rows)
        return max(layered, loop)
    if rows * N < IN_PLACE:
        return 2.0 * rows
    return _in_place(circuit, rows)


def _in_place(circuit, rows):
    """`run_states` of a batch run in place."""
    n = circuit.n_qubits
    N = 2 ** n
    ops = len(circuit)
    memo = circuit.__dict__.setdefault("_memo_run_scratch", {})
    hit = memo.get(rows)
    if hit is None or hit[0] != ops:
        sets = {tuple(sorted(op.qubits)) for op in circuit.operations}
        amps = max((kernels.in_place_scratch(n, q, rows) for q in sets), default=0)
        hit = memo[rows] = (ops, rows + amps / N)
    return hit[1]


@limited
def run(circuit, phi: np.ndarray, inserts=None, psi=None, *, fuse=None, keep=frozenset(),
        out=None, dtype=np.complex128) -> np.ndarray:
    """Final states for gate angles ``phi`` of shape (B, G); returns (B, 2**n).

    Parameters
    ----------
    circuit : Circuit
    phi : ndarray, shape (B, G)
        One row of gate angles per state (the columns of ``circuit.parametric_operations``).
    inserts : list of dict, optional
        One entry a row: {column: ((r, t), ...)} split points of Hamiltonian gates, used by
        the stochastic shift rule. Those columns are never fused.
    psi : ndarray, shape (B, 2**n), optional
        Initial states (default ``|0...0>``); not modified.
    fuse : bool, optional
        Gate fusion on (default) or off.
    keep : set of int
        Columns not to fuse with their neighbours.
    out : ndarray, shape (B, 2**n), optional
        Where to leave the final states (it is also used as one of the two buffers, or as
        the only one in place).
    dtype : {numpy.complex128, numpy.complex64}
        Amplitude dtype of the states (complex64: single precision throughout).

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> c = qg.Circuit(1).ry(0)
    >>> run(c, np.array([[np.pi]])).real.round(12).tolist()
    [[0.0, 1.0]]
    >>> run(c, np.array([[np.pi]]), dtype=np.complex64).dtype.name
    'complex64'
    """
    phi = np.asarray(phi, dtype=float)
    if phi.ndim != 2:
        raise ValueError(f"phi must have shape (B, G); got {phi.shape}")
    B = phi.shape[0]
    n = circuit.n_qubits
    fuse = True if fuse is None else bool(fuse)
    dtype = np.dtype(dtype)
    if dtype not in (np.complex128, np.complex64):
        raise ValueError(f"dtype must be complex128 or complex64; got {dtype}")
    if fuse and dtype == np.complex128 and small.eligible(circuit, inserts):
        # the lean small-state loop is double precision; single precision takes the kernels
        return _run_small(circuit, phi, psi, out)
    solo = set(keep)
    if inserts is not None:
        for row in inserts:
            solo.update(row.keys())
    prog = program(circuit, fuse, frozenset(solo))
    if phi.shape[1] != prog.n_columns:
        raise ValueError(f"phi must have one column per parametric operation: shape (B, {prog.n_columns}); "
                         f"got {phi.shape}")
    if prog.const_columns and not np.all(phi[:, list(prog.const_columns)] == prog.const_angles):
        # a caller moved a fixed angle: do not use the baked-in matrices
        prog = program(circuit, fuse, frozenset(solo), bake_fixed_angles=False)
    shared = np.all(phi == phi[:1], axis=0) if B > 1 else np.ones(phi.shape[1], dtype=bool)
    N = 2 ** n
    if out is not None and (out.shape != (B, N) or out.dtype != dtype):
        raise ValueError(f"out must be a {dtype.name} array of shape {(B, N)}; got {out.shape} {out.dtype}")
    # the buffers are allocated here unless the caller gives one of them
    guard_states(n, run_states(circuit, B) - B * (out is not None), f"a run of {B} row(s)",
                 dtype.itemsize)
    if psi is None:
        cur = out if out is not None else zero_states(n, B, dtype)
        if out is not None:
            cur[...] = 0
            cur[:, 0] = 1
    else:
        if np.shape(psi) != (B, N):
            raise ValueError(f"psi must have shape {(B, N)}; got {np.shape(psi)}")
        cur = np.array(psi, dtype=dtype) if out is None else out
        if out is not None:
            cur[...] = psi
    owned = cur is not out               # run's own first buffer (not the caller's)
    # in place, `other` is `cur` itself: every kernel then writes into the state it reads
    in_place = B * N >= IN_PLACE
    other = cur if in_place else None
    borrowed = None
    table = _table(prog, phi, shared)
    for s in prog.steps:
        if s.kind == "external":
            cur = _external(s, cur, n)
            if in_place:
                other = cur
            continue
        if s.kind != "diag" and other is None:
            # the spare buffer never leaves the run: borrowed warm (scratch), unless an
            # operation of the user's may see (and so keep) it
            other = np.empty_like(cur) if prog.external else scratch.take(cur.shape, cur.dtype)
            borrowed = None if prog.external else other
        if s.kind == "solo":
            cur, other = _solo(s, cur, other, n, phi, inserts, shared)
            continue
        m = s.matrix if s.matrix is not None else step_matrix(s, table, B)
        if s.kind == "diag":
            kernels.apply_diag(cur, n, m, s.qubits)
        elif s.kind == "mono":
            kernels.apply_monomial(cur, n, s.mono, m[np.arange(m.shape[-1]), s.mono], s.qubits, other)
            cur, other = other, cur
        else:
            kernels.apply_dense(cur, n, m, s.qubits, other, real=s.real)
            cur, other = other, cur
    result = cur if out is None else out
    if out is not None and cur is not out:
        out[...] = cur
    if borrowed is not None:
        # the buffer not handed out goes back: the borrowed one, or (when the states ended
        # in it) the run's first buffer
        scratch.give(borrowed if borrowed is not result else other if owned and other is not result else None)
    return result
