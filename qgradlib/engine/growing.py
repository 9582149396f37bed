"""Rows that differ from one point in one angle each, as a batch that grows gate by gate.

The points of a first-order shift plan agree with the unshifted angles ``a`` everywhere but in
one column. On a few qubits (`qgradlib.engine.small`) such rows run as one batch whose rows
are born where they leave the reference: row 0 carries the reference state, and a row that
deviates at gate k is made from it just before gate k and from there on follows the
reference's angles. Gate j then acts on the reference and the rows born before j only, one
kernel call on a leading slice of a preallocated buffer: half the work of the full batch,
with no bookkeeping per row. The steps are laid out once per pattern of moved columns (a
training loop repeats it) as products on fixed views of two buffers, which are kept for the
next call up to `_POOL_BYTES` each; a one-qubit gate on a narrow stride acts on the float
view of the amplitudes as one real block matrix (`qgradlib.engine.small._real_blocks`).

Pauli rotations (generators that square to ``w**2 I``) need one born row per column, not one
per shifted point: ``U(a + d) = cos(d w) U(a) + sin(d w) U(a + pi / (2 w))``, so every point
shifted at that gate ends in ``cos(d w)`` times the reference's final state plus ``sin(d w)``
times the final state of the one row born with the angle ``a + pi / (2 w)`` (both shifts of a
two-term rule from one row). The identity is exact; the states agree with separate runs to
rounding. A device would still run every circuit: the ledger counted them before the engine.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import kernels, sides, small
from .branch import _scale
from .heisenberg import deviations
from .measure import apply_observables, expectations, observable_pieces

__all__ = ["run_grown", "grown_values"]


def run_grown(circuit, phi):
    """Final states (P, 2**n) of the rows of ``phi`` (P, G) of a `small.eligible` circuit,
    started from ``|0...0>``, by the growing batch; None unless the rows differ from one
    reference in one column each (`qgradlib.engine.heisenberg.deviations`).

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> from qgradlib.engine.statevector import run
    >>> c = qg.Circuit(2).ry(0).rx(1).cz(0, 1).ry(0).ry(1)
    >>> base = np.array([0.1, 0.2, 0.3, 0.4])
    >>> rows = base + np.vstack([np.eye(4), -np.eye(4)]) * np.pi / 2
    >>> bool(np.allclose(run_grown(c, rows), run(c, rows, fuse=False), rtol=0, atol=1e-14))
    True
    """
    return _grown(circuit, phi, _combined)


def grown_values(circuit, phi, observables):
    """Exact expectation values (P, K) of ``observables`` at the rows of ``phi`` (P, G), by
    the growing batch without forming every row's state; None where `run_grown` is None.

    A point is ``cb psi_0 + cr psi_r`` (the reference's final state and its born row's), so
    its value is ``cb**2 E(psi_0) + cr**2 E(psi_r) + 2 cb cr Re <psi_0|O|psi_r>``: the values
    of the born rows and one overlap each with ``O psi_0``, half the rows' readout.

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> from qgradlib.engine.measure import expectations
    >>> c = qg.Circuit(2).ry(0).rx(1).cz(0, 1).ry(0).ry(1)
    >>> rows = np.array([0.1, 0.2, 0.3, 0.4]) + np.vstack([np.eye(4), -np.eye(4)]) * np.pi / 2
    >>> H = [qg.Observable({"ZZ": 1.0, "XI": 0.5}), qg.Observable({"YY": -0.3})]
    >>> bool(np.allclose(grown_values(c, rows, H), expectations(run_grown(c, rows), 2, H),
    ...                  rtol=0, atol=1e-14))
    True
    """
    n = circuit.n_qubits
    return _grown(circuit, phi, lambda final, plan, cb, cr: _values(final, plan, cb, cr, n,
                                                                    observables))


def _grown(circuit, phi, combine):
    """``combine(final, plan, cb, cr)`` of the growing batch's final states (row 0 the
    reference, 1 + i born row i), or None unless the rows differ from one reference in one
    column each."""
    phi = np.asarray(phi, dtype=float)
    dev = deviations(phi)
    if dev is None:
        return None
    ref, col = dev
    col = np.where(col == phi.shape[1], -1, col)        # -1: the reference itself
    plan = _schedule(circuit, col)
    # the born rows' angles: a quarter period on from the reference (twin columns), or the
    # point's own angle
    born_angle = np.where(plan.own, phi[plan.point, plan.column], ref[plan.column] + plan.quarter)
    # each point: cos(d w) x the reference's final state + sin(d w) x its born row's (twin
    # columns), its born row's (others), the reference's (the reference itself)
    dw = (phi[plan.moved, plan.at] - ref[plan.at]) * plan.w
    cb = np.ones(col.size)
    cr = np.zeros(col.size)
    cb[plan.moved] = np.where(plan.paired, np.cos(dw), 0.0)
    cr[plan.moved] = np.where(plan.paired, np.sin(dw), 1.0)
    if sides.eligible(circuit):
        # layers of one-qubit gates: the born rows as a batch of two products a layer
        final = sides.born_finals(circuit, ref, plan.column, born_angle)
        return combine(final, plan, cb, cr)
    return _grow(small.compiled(circuit), ref, plan, born_angle, cb, cr, combine)


@dataclass(frozen=True, eq=False)
class _Schedule:
    """Which rows are born where, for one pattern of moved columns (the angles aside)."""

    moved: np.ndarray     # the points that leave the reference
    at: np.ndarray        # ... their columns
    paired: np.ndarray    # ... whether their column is a twin column
    w: np.ndarray         # ... its generator's scale there (0 where not paired)
    row: np.ndarray       # (P,) every point's born row in the buffer (0: the reference)
    column: np.ndarray    # per born row, in buffer order: its column,
    own: np.ndarray       # ... whether it is one point's own row (else a twin column's),
    point: np.ndarray     # ... that point (0 for twin rows),
    quarter: np.ndarray   # ... pi / (2 w) for twin rows (0 for own rows)
    start: np.ndarray     # (G + 1,) rows born at column c: 1 + start[c] : 1 + start[c + 1]
    programs: dict        # the `_Program` of this schedule on the circuit's compiled form


def _schedule(circuit, col):
    """The memoised `_Schedule` of the moved columns ``col`` (a training loop's plans repeat)."""
    memo = circuit.__dict__.setdefault("_memo_grown", {})
    key = (len(circuit), col.tobytes())
    hit = memo.get(key)
    if hit is not None:
        return hit
    G = len(circuit.parametric_operations)
    scales = _column_scales(circuit)
    moved = np.flatnonzero(col >= 0)
    at = col[moved]
    cols, counts = np.unique(at, return_counts=True)
    twin = ~np.isnan(scales[cols]) & (counts > 1)
    paired = twin[np.searchsorted(cols, at)]
    own = moved[~paired]
    tw = cols[twin]
    # born rows: one per twin column, one per other moved point; in the buffer in the order
    # of their columns, which is the order of the gates
    column = np.concatenate([tw, col[own]])
    is_own = np.concatenate([np.zeros(tw.size, dtype=bool), np.ones(own.size, dtype=bool)])
    point = np.concatenate([np.zeros(tw.size, dtype=np.intp), own])
    quarter = np.concatenate([np.pi / (2 * scales[tw]), np.zeros(own.size)])
    order = np.argsort(column, kind="stable")
    slot = np.empty(order.size, dtype=np.intp)
    slot[order] = np.arange(order.size)
    row = np.zeros(col.size, dtype=np.intp)
    twin_slot = np.zeros(G, dtype=np.intp)
    twin_slot[tw] = slot[:tw.size]
    row[moved[paired]] = 1 + twin_slot[at[paired]]
    row[own] = 1 + slot[tw.size:]
    column = column[order]
    hit = _Schedule(moved, at, paired, np.where(paired, scales[at], 0.0), row, column,
                    is_own[order], point[order], quarter[order],
                    np.searchsorted(column, np.arange(G + 1)), {})
    # a rotosolve sweep meets one pattern per parameter; schedules run by
    # `qgradlib.engine.sides` hold a few index arrays, those of the gate-by-gate batch
    # (below) also their programs' workspaces
    if len(memo) > (1024 if sides.eligible(circuit) else 16):
        memo.clear()
    memo[key] = hit
    return hit


def _column_scales(circuit):
    """Per column the generator's scale ``w`` where it squares to ``w**2 I`` (NaN where not),
    memoised per circuit (columns only grow)."""
    pops = circuit.parametric_operations
    hit = circuit.__dict__.get("_memo_scales")
    if hit is None or hit[0] != len(pops):
        hit = (len(pops), np.array([_scale(op.gate) for op in pops], dtype=float))
        circuit.__dict__["_memo_scales"] = hit
    return hit[1]


def _grow(comp, ref, plan, born_angle, cb, cr, combine):
    """``combine(final, plan, cb, cr)`` of the final states of the buffer whose row 0
    carries the reference and row 1 + i is born just before the gate of column
    ``plan.column[i]`` with angle ``born_angle[i]`` there."""
    prog = _program(comp, plan)
    n = comp.n
    tables = _tables(comp, prog, ref, born_angle)
    # a workspace of this program's buffers and their views, taken from its pool (another
    # thread running the same program takes another)
    try:
        work = prog.pool.pop()
    except IndexError:
        work = _workspace(comp, prog)
    cur0 = work[0]
    cur0[0] = 0
    cur0[0, 0] = 1
    for op in work[2]:
        kind = op[0]
        if kind == _MATMUL:             # one real (or complex) product: (operand, input, output)
            np.matmul(*_operands(tables, op), out=op[4])
        elif kind == _CONST:
            small._constant(op[1], op[2], op[3], n)
        else:                           # a step kept general: born rows, then the alive rows
            _, s, code, x, y, a, nb, key, k, bkey, bk = op
            if nb:
                bm = tables[bkey][bk] if nb == 1 else tables[bkey][bk:bk + nb]
                _born(code, s, x, y, a, nb, bm, n)
            small._apply(code, s, x[:a], y[:a], tables[key][k], n)
    out = combine(work[1], plan, cb, cr)
    if work[1].nbytes <= _POOL_BYTES:
        prog.pool.append(work)
    return out


def _combined(final, plan, cb, cr):
    """Every point's final state ``cb * final[0] + cr * final[plan.row]``."""
    out = np.multiply.outer(cb, final[0])
    out += cr[:, None] * final[plan.row]
    return out


def _values(final, plan, cb, cr, n, observables):
    """Every point's values (P, K) from the final states' values and their overlaps with
    ``O_k psi_0`` (see `grown_values`)."""
    K = len(observables)
    E = expectations(final, n, observables)                               # (R + 1, K)
    pieces = observable_pieces(n, observables[0]) if K == 1 else None
    if pieces is not None:
        # one observable on few qubits: O psi_0 from its phase vectors
        psi0 = final[0]
        lam = sum(ph * (psi0 if f is None else psi0[f]) for f, ph in pieces)[None]
    else:
        lam = apply_observables(np.repeat(final[:1], K, axis=0), n, observables, np.eye(K))
    cross = (final.conj() @ lam.T).real                                   # Re <psi_r|O_k psi_0>
    r = plan.row
    return ((cb * cb)[:, None] * E[0] + (cr * cr)[:, None] * E[r]
            + (2 * cb * cr)[:, None] * cross[r])


# workspaces up to this size (each of its two buffers) are kept for the next call
_POOL_BYTES = 2 ** 18


_MATMUL, _CONST, _GENERAL = range(3)


def _operands(tables, op):
    """``(first, second)`` factors of a `_MATMUL` op: ``op[1]`` names the table and row of
    the matrix, ``op[2]`` whether it multiplies from the left (``m @ x``) or the right."""
    key, k = op[1]
    m = tables[key][k]
    return (m, op[3]) if op[2] else (op[3], m)


@dataclass(frozen=True, eq=False)
class _Program:
    """The steps of a growing batch for one circuit and one `_Schedule`: the born rows'
    positions in the gate groups, the real blocks to build, and a pool of workspaces."""

    born_groups: tuple    # per gate group: indices of the born rows of its gates
    blocks: tuple         # (group, stride R, positions in the group) of the real blocks
    plan: _Schedule
    pool: list


def _program(comp, plan):
    """The memoised `_Program` of ``plan`` on ``comp`` (kept on the schedule)."""
    hit = plan.programs.get(id(comp))
    if hit is not None and hit.plan is plan:
        return hit
    born_groups = tuple(np.flatnonzero(np.isin(plan.column, gcols)) for _, gcols, _ in comp.groups)
    narrow = {}
    for s in small.gate_steps(comp):
        if s[0] == small._ONE and s[5] <= small._BLOCK_R:
            narrow.setdefault((s[1], s[5]), []).append(s[2])
    # per group: the positions of its narrow steps, their strides, and each stride's rows
    blocks = []
    for gi in sorted({gi for gi, _ in narrow}):
        Rs = sorted(R for g2, R in narrow if g2 == gi)
        pos = np.concatenate([narrow[(gi, R)] for R in Rs])
        sizes = np.cumsum([0] + [len(narrow[(gi, R)]) for R in Rs])
        blocks.append((gi, Rs, pos, [slice(a, b) for a, b in zip(sizes[:-1], sizes[1:])]))
    blocks = tuple(blocks)
    prog = _Program(born_groups, blocks, plan, [])
    plan.programs.clear()
    plan.programs[id(comp)] = prog
    return prog


def _tables(comp, prog, ref, angle):
    """The angle-dependent operands: per gate group ``("main", gi)`` the reference's
    matrices (diagonals), ``("born", gi)`` the born rows' at their angles (one vectorised
    call per group), ``("real", gi)`` the real parts, ``("block", gi, R)`` the real blocks
    of the narrow one-qubit steps (`qgradlib.engine.small._real_blocks`)."""
    tables = {}
    for gi, (g, gcols, diag) in enumerate(comp.groups):
        idx = prog.born_groups[gi]
        vals = (g.diagonal_values if diag else g._matrices)(
            np.concatenate([ref[gcols], angle[idx]]) if idx.size else ref[gcols])
        tables[("main", gi)] = vals[:gcols.size]
        tables[("born", gi)] = vals[gcols.size:]
        if not diag:
            tables[("real", gi)] = np.ascontiguousarray(vals[:gcols.size].real)
    for gi, Rs, pos, at in prog.blocks:
        parts = small._block_parts(tables[("main", gi)][pos])
        for R, sl in zip(Rs, at):
            tables[("block", gi, R)] = small._real_blocks(parts[sl], R)
    return tables


def _workspace(comp, prog):
    """``(first buffer, buffer of the final states, ops)``: two buffers (1 + born rows,
    2**n) and every step as an op on views of them, worked out once."""
    plan = prog.plan
    n = comp.n
    N = 2 ** n
    A = np.empty((1 + plan.column.size, N), dtype=complex)
    B = np.empty_like(A)
    x, y = A, B
    start = plan.start
    # where each born row sits among its group's born rows
    born_pos = np.zeros(plan.column.size, dtype=np.intp)
    for idx in prog.born_groups:
        born_pos[idx] = np.arange(idx.size)
    ops = []
    a = 1
    for s in small.gate_steps(comp):
        code = s[0]
        if code < small._ONE:
            ops.append((_CONST, s, x[:a], y[:a]))
            if code != small._CONST_DIAG:
                x, y = y, x
            continue
        gi, pos, c = s[1], s[2], s[3]
        lo, hi = start[c], start[c + 1]
        nb = int(hi - lo)
        bk = int(born_pos[lo]) if nb else 0
        if code == small._ONE and nb <= 1:
            L, R = s[4], s[5]
            if nb:
                # the born row: its matrix on the reference's state, into the output buffer
                ops.append((_MATMUL, (("born", gi), bk), True, x[0].reshape(L, 2, R), y[a].reshape(L, 2, R)))
            f, o = x[:a].view(float), y[:a].view(float)
            if R <= small._BLOCK_R:
                k = next(pos_list[sl] for g2, Rs, pos_list, ats in prog.blocks if g2 == gi
                         for R2, sl in zip(Rs, ats) if R2 == R).tolist().index(pos)
                ops.append((_MATMUL, (("block", gi, R), k), False, f.reshape(-1, 4 * R), o.reshape(-1, 4 * R)))
            elif not np.any(np.asarray(s[7]).real):
                # a generator with imaginary entries only: real matrices at every angle
                ops.append((_MATMUL, (("real", gi), pos), True, f.reshape(a * L, 2, 2 * R),
                            o.reshape(a * L, 2, 2 * R)))
            else:
                ops.append((_MATMUL, (("main", gi), pos), True, x[:a].reshape(a, L, 2, R),
                            y[:a].reshape(a, L, 2, R)))
            x, y = y, x
        else:
            ops.append((_GENERAL, s, code, x, y, a, nb, ("main", gi), pos, ("born", gi), bk))
            if code != small._DIAG:
                x, y = y, x
        a += nb
    return A, x, tuple(ops)



def _born(code, s, cur, other, a, nb, m, n):
    """Rows ``a:a+nb`` of the buffer the step writes: ``m`` (shared, or one a row) applied to
    the reference's state (row 0 of ``cur``) before the step."""
    if code == small._DIAG:             # in place, so in the current buffer
        dest = cur[a:a + nb]
        dest[...] = cur[0]
        small._diag(dest, m, s[4], s[5], s[6])
        return
    src = cur[:1] if nb == 1 else np.repeat(cur[:1], nb, axis=0)
    dest = other[a:a + nb]
    if code == small._ONE:
        small._one(src, dest, m, s[4], s[5], s[6])
    else:
        kernels.apply_dense(src, n, m, s[4], dest)
