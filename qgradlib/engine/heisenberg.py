"""Final states of circuits that differ from one point in one angle each, by a carried-back
rest of the circuit.

The points of a first-order shift plan agree with the unshifted angles everywhere but in one
column. A row that deviates at parametric gate k (angle ``a'`` instead of ``a``) ends in

    psi' = T_k U_k(a') psi_k,        E = <psi'| H |psi'> = <phi'_k| H_k |phi'_k>,

where ``psi_k`` is the unshifted state just before gate k, ``T_k`` the whole unshifted rest of
the circuit after gate k as one dense (N, N) matrix and ``H_k = T_k^dagger H T_k`` the
observable carried back to just after the gate (the Heisenberg picture), ``phi'_k = U_k(a')
psi_k``. Nothing depends on the gate's spectrum, so multi-frequency gates are as exact as
Pauli rotations. One forward pass keeps the unshifted state before each parametric gate and
one backward pass carries ``T`` (``T_{k-1} = T_k U_k(a) C_k`` with ``C_k`` the dense run of
fixed gates before gate k); the rows of a block of columns then come out in one vectorised
step. Carrying ``T`` rather than the K observables ``H_k`` costs one (N, N) product a gate
whatever K, and gives the rows' final states, which the engine's own readout measures.

On N = 2**n <= 32 amplitudes one (N, N) product costs about as much as N rows through one
gate, far less than the branches of a long circuit's shifted rows (about half the rows are
alive at any gate). A device would still run every circuit: the ledger counted them before
the engine.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import kernels, small
from .branch import _reference

__all__ = ["MAX_QUBITS", "COST_QUBITS", "deviations", "worthwhile", "peak_bytes", "layout_bytes",
           "one_column_states"]

# at or below this many qubits carrying the rest of the circuit is always the cheaper way
MAX_QUBITS = 5
# up to this many qubits it is taken when the rows' branches would cost more (`worthwhile`)
COST_QUBITS = 8
# bytes of the rest-of-circuit matrices (N, N) held at once in the backward pass
_BLOCK_BYTES = 2 ** 23
# rows whose column-wise most common angles are tried first as the reference, then about
# this many rows spread over the batch
_SAMPLE = 8
_SPREAD = 64


@dataclass(frozen=True, eq=False)
class _Layout:
    """A small circuit laid out for the carried rest of the circuit: dense runs of fixed gates
    ``runs`` (G + 1, N, N) (run 0 before the first parametric gate, run k + 1 after gate k),
    and per (gate, qubits) pair the columns it holds (``kinds``; ``kind_of`` per column)."""

    n: int
    runs: np.ndarray
    kinds: tuple        # (gate, qubits) per kind
    kind_of: np.ndarray


def deviations(phi):
    """``(reference, column)`` when every row of ``phi`` (P, G) equals one reference point
    but in at most one column; ``column[p]`` is that column (G for the reference itself).
    None when no such point is found.

    The reference is the column-wise most common angle
    (as in `qgradlib.engine.branch.divergence`) of the first few rows, or failing that of rows
    spread over the batch: a shift plan's rows agree with it but for one column each, so a
    few rows settle it and the check of every row is one comparison pass. (A batch whose
    samples mislead returns None: the general engine then runs it, as exactly.)

    Examples
    --------
    >>> import numpy as np
    >>> ref, col = deviations(np.array([[0.0, 1.0], [0.5, 1.0], [0.0, 2.0], [0.0, 1.0]]))
    >>> ref.tolist(), col.tolist()
    ([0.0, 1.0], [2, 0, 1, 2])
    >>> deviations(np.array([[0.0, 1.0], [0.5, 2.0], [0.0, 1.0]])) is None
    True
    """
    P, G = phi.shape
    # a first guess from three rows: where the first two agree, their angle, else the third
    # row's (a shift plan's first two rows differ in one column, which the third has unmoved)
    guess = np.where(phi[0] == phi[1], phi[0], phi[2]) if P >= 3 else None
    for sample in (None, phi[:_SAMPLE], phi[::max(1, P // _SPREAD)]):
        if sample is None:
            if guess is None:
                continue
            ref = guess
        else:
            ref = _reference(sample, None)[0]
            if np.any(np.count_nonzero(sample != ref, axis=1) > 1):
                continue              # not even the sample fits: no pass over every row
        diff = phi != ref
        count = np.count_nonzero(diff, axis=1)
        if np.all(count <= 1):
            return ref, np.where(count == 1, np.argmax(diff, axis=1), G)
    return None


def worthwhile(n_qubits: int, column, n_columns: int) -> bool:
    """Whether carrying the rest of the circuit as an (N, N) matrix is cheaper than running
    the rows as branches of one trunk (`qgradlib.engine.branch.run_branched`).

    At or below `MAX_QUBITS` qubits always; up to `COST_QUBITS` when the rows' average number
    alive over the circuit (each from its ``column`` on) exceeds N, the row-equivalents of one
    (N, N) product a gate; never above.

    Examples
    --------
    >>> import numpy as np
    >>> worthwhile(4, np.array([0, 1]), 2)
    True
    >>> worthwhile(7, np.repeat(np.arange(100), 2), 100)   # 101 rows alive on average, N = 128
    False
    >>> worthwhile(7, np.repeat(np.arange(100), 4), 100)   # 201
    True
    """
    if n_qubits <= MAX_QUBITS:
        return True
    if n_qubits > COST_QUBITS or n_columns == 0:
        return False
    column = np.asarray(column)
    alive = 1.0 + float(np.sum(n_columns - column)) / n_columns
    return alive > 2 ** n_qubits


def peak_bytes(n_qubits: int, rows: int, n_columns: int) -> int:
    """Bytes `one_column_states` holds at its peak besides the circuit's memoised runs
    (`layout_bytes`): the rows' states, the reference's states, its gate matrices twice
    over while they are multiplied, and three blocks of rest-of-circuit matrices and operands
    (the memory guard's estimate: change it with the function).

    Examples
    --------
    >>> peak_bytes(4, 3282, 1641) / 2 ** 20       # MiB: the deep narrow benchmark circuit
    38.8...
    """
    N = 2 ** n_qubits
    return 16 * (rows * N + 3 * (n_columns + 1) * N + 2 * n_columns * N * N) + 3 * _BLOCK_BYTES


def layout_bytes(n_qubits: int, n_columns: int) -> int:
    """Bytes of the dense runs of fixed gates memoised on the circuit: (G + 1) of (N, N)."""
    return 16 * (n_columns + 1) * 4 ** n_qubits


def _layout(circuit) -> _Layout:
    """The memoised `_Layout` of a `qgradlib.engine.small.eligible` circuit (rebuilt when it
    grows). The runs are the compiled constant steps of `qgradlib.engine.small`, made dense."""
    hit = circuit.__dict__.get("_memo_heisenberg")
    if hit is not None and hit[0] == len(circuit):
        return hit[1]
    comp = small.compiled(circuit)
    n = comp.n
    N = 2 ** n
    G = comp.n_columns
    runs = np.empty((G + 1, N, N), dtype=complex)
    run = np.eye(N, dtype=complex)
    k = 0
    for s in small.gate_steps(comp):
        if s[0] in (small._DIAG, small._ONE, small._OTHER):
            runs[k] = run
            run = np.eye(N, dtype=complex)
            k += 1
        else:
            run = _constant_matrix(s, n) @ run
    runs[k] = run
    kinds, kind_of = {}, np.empty(G, dtype=np.intp)
    for c, op in enumerate(circuit.parametric_operations):
        key = (id(op.gate), tuple(op.qubits))
        if key not in kinds:
            kinds[key] = (len(kinds), op.gate, tuple(op.qubits))
        kind_of[c] = kinds[key][0]
    lay = _Layout(n, runs, tuple(v[1:] for v in kinds.values()), kind_of)
    circuit.__dict__["_memo_heisenberg"] = (len(circuit), lay)
    return lay


def _constant_matrix(s, n):
    """The dense (N, N) matrix of one constant step of `qgradlib.engine.small`, by applying
    it to the basis with the loop's own code (row i of the result is the step on e_i)."""
    N = 2 ** n
    res, _ = small._constant(s, np.eye(N, dtype=complex), np.empty((N, N), dtype=complex), n)
    return res.T.copy()


def _embedded(mats, qubits, n):
    """Local matrices (B, d, d) on ``qubits`` as whole-register matrices (B, N, N)."""
    mats, sq = kernels.sort_qubits(mats, qubits)
    return kernels.widen(mats, list(sq), n)


def _unitaries(lay, columns, angles):
    """Whole-register matrices (B, N, N) of the parametric gates at ``columns`` and ``angles``,
    one vectorised call per (gate, qubits) kind."""
    N = 2 ** lay.n
    out = np.empty((columns.size, N, N), dtype=complex)
    kind = lay.kind_of[columns]
    for j in np.unique(kind):
        at = np.flatnonzero(kind == j)
        gate, qubits = lay.kinds[j]
        out[at] = _embedded(gate._matrices(angles[at]), qubits, lay.n)
    return out


def one_column_states(circuit, phi, deviation=None) -> np.ndarray:
    """Final states (P, 2**n) of the rows of ``phi`` (P, G), each equal to one reference point
    but in at most one column, from one forward and one backward pass of the reference.

    ``circuit`` is `qgradlib.engine.small.eligible` (fixed and generator gates, no noise); the
    states start in ``|0...0>`` and are complex128. ``deviation`` is `deviations` of ``phi``
    when already known (else worked out here; ValueError when no reference fits). The states
    agree with running each row (`qgradlib.engine.statevector.run`) to rounding.

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> from qgradlib.engine.statevector import run
    >>> c = qg.Circuit(2).h(0).ry(1).cnot(0, 1).rx(0)
    >>> rows = np.array([[0.3, 0.4], [0.3 + np.pi / 2, 0.4], [0.3, 0.4 - np.pi / 2]])
    >>> bool(np.allclose(one_column_states(c, rows), run(c, rows)))
    True
    """
    phi = np.asarray(phi, dtype=float)
    if phi.ndim != 2 or phi.shape[1] != len(circuit.parametric_operations):
        raise ValueError(f"phi must have shape (P, {len(circuit.parametric_operations)}); got {phi.shape}")
    if deviation is None:
        deviation = deviations(phi)
        if deviation is None:
            raise ValueError("phi: every row must equal one reference row but in at most one column")
    ref, column = deviation
    lay = _layout(circuit)
    n, (P, G) = lay.n, phi.shape
    N = 2 ** n
    out = np.empty((P, N), dtype=complex)
    # M_k = U_k(a) C_k: the run of fixed gates before gate k, then the gate
    M = np.matmul(_unitaries(lay, np.arange(G), ref), lay.runs[:G])
    x = np.empty((G + 1, N), dtype=complex)         # x_k: the state just before run C_k
    x[0] = 0
    x[0, 0] = 1
    for k in range(G):
        np.dot(M[k], x[k], out=x[k + 1])
    is_ref = column == G
    out[is_ref] = lay.runs[G] @ x[G]
    rows = np.flatnonzero(~is_ref)
    if rows.size == 0:
        return out
    cols = column[rows]
    order = np.argsort(cols, kind="stable")
    rows, cols = rows[order], cols[order]
    needed = np.unique(cols)
    # psi_k: the state just before each needed gate
    before = np.matmul(lay.runs[needed], x[needed][:, :, None])[:, :, 0]
    span = max(1, _BLOCK_BYTES // (N * N * 16))
    T = lay.runs[G].copy()
    top = G - 1                   # T is the rest after gate ``top``
    # backward, a block of needed columns at a time from the last: the rest of the circuit
    # after each needed gate, then the block's rows, ``span`` at once
    for hi in range(needed.size, 0, -span):
        lo = max(0, hi - span)
        block = needed[lo:hi]
        held = np.empty((block.size, N, N), dtype=complex)
        for j in range(block.size - 1, -1, -1):
            k = block[j]
            for t in range(top, k, -1):
                T = T @ M[t]
            held[j] = T
            top = k
        first, end = np.searchsorted(cols, [block[0], block[-1] + 1])
        for r0 in range(first, end, span):
            r = slice(r0, min(end, r0 + span))
            at = np.searchsorted(block, cols[r])
            shifted = np.matmul(_unitaries(lay, cols[r], phi[rows[r], cols[r]]),
                                before[lo + at][:, :, None])
            out[rows[r]] = np.matmul(held[at], shifted)[:, :, 0]
    return out
