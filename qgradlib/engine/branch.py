"""Runs of many angle rows that share prefixes: one trunk, branches where rows diverge.

The shifted circuits of a gradient agree with the unshifted one on every gate before the
shifted gate. Taking the column-wise most common row as a reference (for a shift plan: the
unshifted angles), each row diverges from it at its first differing column. The reference
state is carried through the circuit; just before a column where rows diverge, those rows
branch off as copies of the reference state, and from there on every active row is updated
by the same kernel calls, in one batch. The rows' states come out exactly as separate runs
would give them (up to rounding): only the order of the work changes.

Rows of many data points share no reference (their feature angles differ from the first
gate on), but each data point's shifted rows still share its prefix: `run_prefix_tree` then
follows every distinct prefix of angles, a tree instead of one trunk.

A device would still run every circuit: the ledger counts them before this point.
"""
from __future__ import annotations

from collections import Counter

import numpy as np

from .threads import limited
from . import kernels
from .program import program, step_matrix
from .statevector import _external, _solo, _table, zero_states

__all__ = ["divergence", "run_branched", "branched_states", "prefix_tree", "run_prefix_tree"]


def _reference(phi, inserts):
    """Column-wise most common angle (and insert tuple) of the rows."""
    P, G = phi.shape
    # per column, the value of the longest run of equal values after sorting (the smallest
    # such value on ties), for all columns at once
    s = np.sort(phi, axis=0)
    rows = np.arange(P)[:, None]
    start = np.maximum.accumulate(np.where(np.vstack([np.ones((1, G), bool), s[1:] != s[:-1]]),
                                           rows, 0), axis=0)
    ref = s[np.argmax(rows - start, axis=0), np.arange(G)]
    ref_ins = {}
    if inserts is not None:
        cols = {c for row in inserts for c in row}
        for c in cols:
            common, _ = Counter(tuple(row.get(c, ())) for row in inserts).most_common(1)[0]
            if common:
                ref_ins[c] = common
    return ref, ref_ins


def divergence(phi, inserts=None):
    """``(reference, reference_inserts, first)``: ``first[p]`` is the first column where row p
    differs from the reference (G when it is the reference).

    Examples
    --------
    >>> import numpy as np
    >>> divergence(np.array([[0.0, 1.0], [0.0, 2.0], [0.5, 1.0]]))[2].tolist()
    [2, 1, 0]
    """
    P, G = phi.shape
    ref, ref_ins = _reference(phi, inserts)
    diff = phi != ref
    first = np.where(diff.any(axis=1), np.argmax(diff, axis=1), G)
    if inserts is not None:
        for p, row in enumerate(inserts):
            for c in set(row) | set(ref_ins):
                if tuple(row.get(c, ())) != tuple(ref_ins.get(c, ())) and c < first[p]:
                    first[p] = c
    return ref, ref_ins, first


def branched_states(rows: int) -> int:
    """States alive at the peak of `run_branched` on ``rows`` rows: the reference and the
    branches in two alternating buffers (``rows + 1`` rows each) and the ``rows`` results
    gathered at the end. The memory guard's estimate: change it with `run_branched`."""
    return 2 * (rows + 1) + rows


@limited
def run_branched(circuit, phi, inserts=None, *, fuse=None, min_saving=0.2, dtype=np.complex128):
    """Final states (P, 2**n) of the rows of ``phi``, in their order, by branching from a
    shared trunk; None when branching would save less than ``min_saving`` of the work.

    Parameters (``dtype`` included) are those of `qgradlib.engine.statevector.run`. The work
    counted is kernel steps: one trunk through the whole circuit plus each row from its
    branch point on.

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> from qgradlib.engine.statevector import run
    >>> c = qg.Circuit(2).ry(0).ry(1).cz(0, 1).ry(0).ry(1)
    >>> base = np.array([0.1, 0.2, 0.3, 0.4])
    >>> rows = base + np.vstack([np.zeros(4), np.eye(4)[2:], -np.eye(4)[2:]]) * np.pi / 2
    >>> bool(np.allclose(run_branched(c, rows, min_saving=0.0), run(c, rows)))
    True
    """
    phi = np.asarray(phi, dtype=float)
    P, G = phi.shape
    if P < 2 or G == 0:
        return None
    fuse = True if fuse is None else bool(fuse)
    ref, ref_ins, first = divergence(phi, inserts)
    # every column where some row differs stays a step of its own: fusion may move a fused
    # gate across others, but never a kept one, so circuit order = step order for these
    solo = set(np.flatnonzero(np.any(phi != ref, axis=0)).tolist())
    if inserts is not None:
        for row in inserts:
            solo.update(row.keys())
    prog = program(circuit, fuse, frozenset(solo), bake_fixed_angles=False)
    steps = prog.steps
    S = len(steps)
    step_of = np.full(G, S)
    for i, s in enumerate(steps):
        if s.kind == "solo" and s.column is not None:
            step_of[s.column] = i
    # a row branches off before the first *step* that touches any column where it differs
    # (a program derived from the fused one may order its kept steps unlike their columns)
    start = np.min(np.where(phi != ref, step_of, S), axis=1)
    if inserts is not None:
        for p, row in enumerate(inserts):
            for c in set(row) | set(ref_ins):
                if tuple(row.get(c, ())) != tuple(ref_ins.get(c, ())):
                    start[p] = min(start[p], step_of[c])
    is_ref = first == G
    plain = P * S
    branched = S + float(np.sum(S - start[~is_ref]))
    if branched > (1.0 - min_saving) * plain:
        return None
    n = circuit.n_qubits
    order = np.argsort(start, kind="stable")
    order = order[~is_ref[order]]
    # buffer row 0 is the reference; rows 1.. follow ``order``
    rows_phi = np.vstack([ref[None], phi[order]])
    rows_ins = None
    if inserts is not None:
        rows_ins = [dict(ref_ins)] + [inserts[p] for p in order]
    M = rows_phi.shape[0]
    cur = zero_states(n, M, dtype)
    other = np.empty_like(cur)
    starts = start[order]
    full_shared = np.all(rows_phi == rows_phi[:1], axis=0)
    table = _table(prog, rows_phi, full_shared)
    active = 1
    nxt = 0
    for i, s in enumerate(steps):
        lo = active
        while nxt < starts.size and starts[nxt] == i:
            nxt += 1
        active = 1 + nxt
        if active > lo:
            cur[lo:active] = cur[0]
        a = active
        if s.kind == "external":
            cur[:a] = _external(s, cur[:a], n)
            continue
        if s.kind == "solo":
            sub = rows_phi[:a]
            shared = np.all(sub == sub[:1], axis=0)
            ins = None if rows_ins is None else rows_ins[:a]
            res, _ = _solo(s, cur[:a], other[:a], n, sub, ins, shared)
            if np.shares_memory(res, other):
                cur, other = other, cur
            continue
        if s.matrix is not None:
            m = s.matrix
        else:
            sub_table = [(v if v.shape[1] == 1 else v[:, :a], sh) for v, sh in table]
            m = step_matrix(s, sub_table, a)
        cur, other = _fused_step(s, m, cur, other, a, n)
    out = np.empty((P, 2 ** n), dtype=cur.dtype)
    out[order] = cur[1:active]
    out[is_ref] = cur[0]
    return out


def _split(node, values, count):
    """Rows at prefix ``node`` (P,) split by their next angle ``values`` (P,).

    A prefix's first child keeps its buffer row and the others are appended after ``count``,
    so the trunk is copied only where rows diverge. Returns ``(parents of the appended
    rows, a representative row for every buffer row, new count, new node of every row)``.
    """
    vals, code = np.unique(values, return_inverse=True)
    key = node * vals.size + code.reshape(-1)
    uniq, first, inv = np.unique(key, return_index=True, return_inverse=True)
    parent = uniq // vals.size
    stays = np.ones(uniq.size, dtype=bool)
    stays[1:] = parent[1:] != parent[:-1]
    where = np.empty(uniq.size, dtype=np.int64)
    where[stays] = parent[stays]
    extra = np.flatnonzero(~stays)
    where[extra] = count + np.arange(extra.size)
    reps = np.empty(count + extra.size, dtype=np.int64)
    reps[where] = first
    return parent[extra], reps, count + extra.size, where[inv.reshape(-1)]


def prefix_tree(phi):
    """Buffer row of every row of ``phi`` (P, G) in a tree of its distinct angle prefixes.

    Rows with the same angles in columns 0..j share one buffer row up to column j.

    Examples
    --------
    >>> import numpy as np
    >>> prefix_tree(np.array([[0.0, 1.0], [0.0, 2.0], [0.5, 1.0], [0.5, 1.0]])).tolist()
    [0, 2, 1, 1]
    """
    node, count = np.zeros(phi.shape[0], dtype=np.int64), 1
    for j in np.flatnonzero(np.any(phi != phi[:1], axis=0)):
        _, _, count, node = _split(node, phi[:, j], count)
    return node


def run_prefix_tree(circuit, phi, *, fuse=None, min_saving=0.2, dtype=np.complex128):
    """Final states (P, 2**n) of the rows of ``phi`` through a tree of shared angle prefixes;
    None when it would save less than ``min_saving`` of the work.

    Where `run_branched` follows one reference row, this follows every distinct prefix: the
    rows of a shift plan over a data set share, data point by data point, every gate before
    their shifted one, though no two data points share a first angle. All prefixes alive at a
    gate are updated by one kernel call, as one batch; the states come out as separate runs
    would give them (up to rounding). The plan is abandoned as soon as its work is sure to
    exceed the limit (a batch of unrelated rows: at the first varying column).

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> from qgradlib.engine.statevector import run
    >>> c = qg.Circuit(2).ry(0).ry(1).cz(0, 1).ry(0).ry(1)
    >>> base = np.array([[0.1, 0.2, 0.3, 0.4], [0.5, 0.6, 0.7, 0.8]])
    >>> shifts = np.vstack([np.eye(4)[2:], -np.eye(4)[2:]]) * np.pi / 2
    >>> rows = (base[:, None, :] + shifts[None]).reshape(-1, 4)
    >>> bool(np.allclose(run_prefix_tree(c, rows, min_saving=0.0), run(c, rows)))
    True
    """
    phi = np.asarray(phi, dtype=float)
    P, G = phi.shape
    if P < 2 or G == 0:
        return None
    fuse = True if fuse is None else bool(fuse)
    shared = np.all(phi == phi[:1], axis=0)
    prog = program(circuit, fuse, frozenset(np.flatnonzero(~shared).tolist()),
                   bake_fixed_angles=False)
    steps = prog.steps
    S = len(steps)
    limit = (1.0 - min_saving) * P * S
    # the tree, step by step; each step's work is the prefixes alive at it (they only grow)
    splits, node, count, work = {}, np.zeros(P, dtype=np.int64), 1, 0
    for i, s in enumerate(steps):
        if s.kind == "solo" and s.column is not None and not shared[s.column]:
            parents, reps, count, node = _split(node, phi[:, s.column], count)
            splits[i] = (parents, reps, count)
        work += count
        if work + count * (S - 1 - i) > limit:
            return None
    n = circuit.n_qubits
    cur = zero_states(n, count, dtype)
    other = np.empty_like(cur)
    table = _table(prog, phi[:1], np.ones(G, dtype=bool))
    a, rows = 1, phi[:1]
    for i, s in enumerate(steps):
        if i in splits:
            parents, reps, new = splits[i]
            cur[a:new] = cur[parents]
            a, rows = new, phi[reps]
        if s.kind == "external":
            cur[:a] = _external(s, cur[:a], n)
            continue
        if s.kind == "solo":
            res, _ = _solo(s, cur[:a], other[:a], n, rows, None, shared)
            if np.shares_memory(res, other):
                cur, other = other, cur
            continue
        m = s.matrix if s.matrix is not None else step_matrix(s, table, a)
        cur, other = _fused_step(s, m, cur, other, a, n)
    return cur[node]


def _fused_step(s, m, cur, other, a, n):
    """Apply step ``s`` with matrix (or diagonal) ``m`` to the first ``a`` rows of ``cur``;
    returns ``(cur, other)``, swapped when the result landed in ``other``."""
    if s.kind == "diag":
        kernels.apply_diag(cur[:a], n, m, s.qubits)
        return cur, other
    if s.kind == "mono":
        kernels.apply_monomial(cur[:a], n, s.mono, m[np.arange(m.shape[-1]), s.mono],
                               s.qubits, other[:a])
    else:
        kernels.apply_dense(cur[:a], n, m, s.qubits, other[:a], real=s.real)
    return other, cur
