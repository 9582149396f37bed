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

import weakref
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
    # per column, the first buffer row whose angle differs from the reference's: the first
    # ``a`` rows share a column's angle exactly when ``a <= first_diff[column]``; found once
    # here, since comparing all active rows at every step grows as rows x columns x steps
    differs = rows_phi != rows_phi[:1]
    first_diff = np.where(differs.any(axis=0), np.argmax(differs, axis=0), M)
    del differs
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
            ins = None if rows_ins is None else rows_ins[:a]
            if _solo_runs(s, cur, other, n, rows_phi, a, ins, first_diff):
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


# a kept gate whose angle takes at most this many runs of equal values over the active rows
# is applied run by run, with one matrix each, instead of one matrix per row
RUNS = 8


def _solo_runs(s, cur, other, n, rows_phi, a, ins, first_diff):
    """Apply kept step ``s`` to the first ``a`` rows of ``cur``; True when the result is in
    ``other``. Rows sorted by branch point hold a column's angle in a few runs (the rows that
    branched at this gate, the rest): each run is one kernel call with one matrix."""
    col = s.column
    same = col is None or a <= first_diff[col]
    cuts = None
    if not same and ins is None:
        v = rows_phi[:a, col]
        cuts = np.flatnonzero(v[1:] != v[:-1]) + 1
    if cuts is None or cuts.size >= RUNS:
        res, _ = _solo(s, cur[:a], other[:a], n, rows_phi[:a], ins, {col: same})
        return np.shares_memory(res, other)
    bounds = [0, *cuts.tolist(), a]
    moved = False
    for lo, hi in zip(bounds[:-1], bounds[1:]):
        res, _ = _solo(s, cur[lo:hi], other[lo:hi], n, rows_phi[lo:hi], None, {col: True})
        moved = np.shares_memory(res, other)
    return moved


def _split(node, values, count, tag=None, reps=None):
    """Rows at prefix ``node`` (P,) split by their next angle ``values`` (P,) (and ``tag``,
    0 or 1, which parts rows of equal angle).

    A prefix's first child keeps its buffer row and the others are appended after ``count``,
    so the trunk is copied only where rows diverge; a prefix of one row cannot split, so only
    rows that share their prefix are looked at. Returns ``(parents of the appended rows, a
    representative row for every buffer row, new count, new node of every row, main)``:
    ``main`` is, for a row left alone in its child, the angle of the child with most rows of
    its prefix (NaN for the others).
    """
    P = node.shape[0]
    if reps is None:
        reps = np.zeros(count, dtype=np.int64)
    sizes = np.bincount(node, minlength=count)
    live = np.flatnonzero(sizes[node] > 1)
    main = np.full(P, np.nan)
    if live.size == 0:
        return np.zeros(0, dtype=np.int64), reps, count, node, main
    vals, code = np.unique(values[live], return_inverse=True)
    code = code.reshape(-1)
    width = vals.size
    if tag is not None:
        code = code * 2 + tag[live]
        width *= 2
    key = node[live] * width + code
    uniq, first, inv, counts = np.unique(key, return_index=True, return_inverse=True,
                                         return_counts=True)
    inv = inv.reshape(-1)
    parent = uniq // width
    stays = np.ones(uniq.size, dtype=bool)
    stays[1:] = parent[1:] != parent[:-1]
    where = np.empty(uniq.size, dtype=np.int64)
    where[stays] = parent[stays]
    extra = np.flatnonzero(~stays)
    where[extra] = count + np.arange(extra.size)
    new_reps = np.empty(count + extra.size, dtype=np.int64)
    new_reps[:count] = reps
    new_reps[where] = live[first]
    new_node = node.copy()
    new_node[live] = where[inv]
    # the child with most rows of every prefix (the first such on ties)
    order = np.lexsort((-counts, parent))
    head = np.ones(order.size, dtype=bool)
    head[1:] = parent[order][1:] != parent[order][:-1]
    best = np.empty(int(parent.max()) + 1, dtype=np.int64)
    best[parent[order][head]] = (uniq[order][head] % width) // (2 if tag is not None else 1)
    alone = counts[inv] == 1
    main[live[alone]] = vals[best[node[live[alone]]]]
    return parent[extra], new_reps, count + extra.size, new_node, main


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
        _, _, count, node, _ = _split(node, phi[:, j], count)
    return node


def run_prefix_tree(circuit, phi, *, fuse=None, min_saving=0.2, dtype=np.complex128):
    """Final states (P, 2**n) of the rows of ``phi`` through a tree of shared angle prefixes;
    None when it would save less than ``min_saving`` of the work.

    Where `run_branched` follows one reference row, this follows every distinct prefix: the
    rows of a shift plan over a data set share, data point by data point, every gate before
    their shifted one, though no two data points share a first angle. All prefixes alive at a
    step are updated by one kernel call, as one batch; the states come out as separate runs
    would give them (up to rounding). The plan is abandoned as soon as its work is sure to
    exceed the limit (a batch of unrelated rows: at the first varying column).

    The circuit runs fused, as in a forward run: rows split just before the step that holds
    a column where they differ, and a step whose angles vary gets one matrix per buffer row.
    A row that differs from another row (its twin) only in the angle of a gate whose generator
    squares to ``w**2 I`` (Pauli rotations) is not run at all: ``U(a + d) = cos(d w) U(a) -
    i sin(d w) / w U(a) G``, so its state is ``cos(d w)`` times the twin's plus ``-i sin(d w)
    / w`` times the state of one extra branch that carries ``G`` at that gate and follows the
    twin's angles, shared by every row derived from that twin there (both shifts of a
    two-term rule): one branch instead of two.

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
    # -0.0 and 0.0 are one angle (and must be one bit pattern for the twins' hashes)
    phi = np.ascontiguousarray(phi, dtype=float) + 0.0
    P, G = phi.shape
    if P < 2 or G == 0:
        return None
    fuse = True if fuse is None else bool(fuse)
    prog = program(circuit, fuse)
    if prog.const_columns and not np.all(phi[:, list(prog.const_columns)] == prog.const_angles):
        prog = program(circuit, fuse, bake_fixed_angles=False)
    steps = prog.steps
    limit = (1.0 - min_saving) * P * len(steps)
    # the whole tree first (cheap for unrelated rows: once every row is alone, no row splits)
    tree = _tree(steps, phi, None, np.inf)
    derived, twin, col, extra = _twins(phi, tree[4], tree[5], _generator_scales(steps, G))
    fork = None
    if not derived.size and tree[6] > limit:
        return None
    if derived.size:
        every = np.vstack([phi, extra])
        real = np.ones(every.shape[0], dtype=bool)
        real[derived] = False
        real_idx = np.flatnonzero(real)
        pairs, virt = np.unique(twin * G + col, return_inverse=True)
        virt = virt.reshape(-1)
        rows_phi = np.vstack([every[real_idx], every[pairs // G]])
        fork = np.concatenate([np.full(real_idx.size, -1), pairs % G])
        tree = _tree(steps, rows_phi, fork, limit)
        if tree is None:
            return None
    else:
        rows_phi = phi
    splits, varying, node, count = tree[:4]
    n = circuit.n_qubits
    cur = zero_states(n, count, dtype)
    other = np.empty_like(cur)
    table = _table(prog, phi[:1], np.ones(G, dtype=bool))
    shared = np.all(rows_phi == rows_phi[:1], axis=0)
    a, reps = 1, np.zeros(1, dtype=np.int64)
    for i, s in enumerate(steps):
        if i in splits:
            done, reps = splits[i]
            for parents, lo, hi in done:
                cur[lo:hi] = cur[parents]
            a = done[-1][2]
        if s.kind == "external":
            cur[:a] = _external(s, cur[:a], n)
            continue
        if s.kind == "solo":
            res, _ = _solo(s, cur[:a], other[:a], n, rows_phi[reps], None, shared)
            if np.shares_memory(res, other):
                cur, other = other, cur
            continue
        if s.matrix is not None:
            m = s.matrix
        elif i in varying:
            m = _row_matrices(s, table, rows_phi, reps, varying[i], None if fork is None else fork[reps])
        else:
            m = step_matrix(s, table, a)
        cur, other = _fused_step(s, m, cur, other, a, n)
    if fork is None:
        return cur[node]
    out = np.empty((P, cur.shape[1]), dtype=cur.dtype)
    asked = real_idx < P
    out[real_idx[asked]] = cur[node[:real_idx.size][asked]]
    ext = np.full(every.shape[0], -1, dtype=np.int64)
    ext[real_idx] = np.arange(real_idx.size)
    w = np.array([_scale(circuit.parametric_operations[c].gate) for c in range(G)])[col]
    d = (phi[derived, col] - every[twin, col]) * w
    _combine(out, derived, cur, node[ext[twin]], np.cos(d), node[real_idx.size + virt],
             -1j * np.sin(d) / w)
    return out


def _combine(out, rows, cur, base, cb, branch, cr):
    """``out[rows] = cb * cur[base] + cr * cur[branch]`` a cache-sized block at a time, with
    the rows written in place where they run consecutively (a shift plan's rows mostly do)."""
    step = max(1, 2 ** 20 // max(cur[:1].nbytes, 1))
    buf = np.empty((min(step, rows.size), cur.shape[1]), dtype=out.dtype)
    for lo in range(0, rows.size, step):
        hi = min(lo + step, rows.size)
        r = rows[lo:hi]
        run = r[-1] - r[0] == hi - lo - 1
        dst = out[r[0]:r[-1] + 1] if run else np.empty((hi - lo, cur.shape[1]), dtype=out.dtype)
        np.take(cur, base[lo:hi], axis=0, out=dst)
        dst *= cb[lo:hi, None]
        tmp = buf[:hi - lo]
        np.take(cur, branch[lo:hi], axis=0, out=tmp)
        tmp *= cr[lo:hi, None]
        dst += tmp
        if not run:
            out[r] = dst


def _tree(steps, phi, fork, limit):
    """The prefix tree of ``phi``'s rows over ``steps``: ``(splits, varying columns, node of
    every row, buffer rows, the column where each row was left alone outside its prefix's
    main child (-1: never), the main child's angle there, the work in buffer-row steps)``; None once its work exceeds ``limit``. Rows with ``fork`` c
    part from rows of equal angles at column c."""
    P, G = phi.shape
    S = len(steps)
    shared = np.all(phi == phi[:1], axis=0)
    forked = set() if fork is None else set(fork[fork >= 0].tolist())
    splits, varying, node, count, work = {}, {}, np.zeros(P, dtype=np.int64), 1, 0
    reps = np.zeros(1, dtype=np.int64)
    leave = np.full(P, -1, dtype=np.int64)
    leave_at = np.full(P, np.nan)
    for i, s in enumerate(steps):
        cols = [s.column] if s.kind == "solo" and s.column is not None else \
            [f.column for f in s.factors if not f.const]
        cols = [c for c in dict.fromkeys(cols) if not shared[c] or c in forked]
        if cols:
            varying[i] = cols
            done = []
            for c in cols:
                tag = None if c not in forked else (fork == c).astype(np.int64)
                parents, reps, new, node, main = _split(node, phi[:, c], count, tag, reps)
                done.append((parents, count, new))
                count = new
                off = (leave < 0) & ~np.isnan(main)
                leave[off] = c
                leave_at[off] = main[off]
            splits[i] = (done, reps)
        work += count
        if work + count * (S - 1 - i) > limit:
            return None
    return splits, varying, node, count, leave, leave_at, work


def _twins(phi, leave, leave_at, scales):
    """``(derived rows, their twins, the column, extra rows)``: rows equal to another row but
    in one column, of a gate with a scale in ``scales`` (NaN: none). A twin never derived
    itself; where three or more rows share a twin that is not among the rows (the unshifted
    point of a shift plan), it is made an extra row ``P + k``, run but not returned."""
    P, G = phi.shape
    cand = np.flatnonzero((leave >= 0) & ~np.isnan(scales[np.maximum(leave, 0)]))
    empty = np.zeros(0, dtype=np.int64)
    if cand.size == 0:
        return empty, empty, empty, np.zeros((0, G))
    # exact integer hashes of the rows' bit patterns (wrapping arithmetic): a twin's hash is
    # the row's with one column's bits replaced; every match is checked angle by angle
    bits = phi.view(np.uint64)
    mult = np.random.default_rng(20201).integers(0, 2 ** 64 - 1, size=G, dtype=np.uint64,
                                                  endpoint=True) | np.uint64(1)
    c = leave[cand]
    with np.errstate(over="ignore"):
        h = (bits * mult).sum(axis=1, dtype=np.uint64)
        want = h[cand] + (np.asarray(leave_at[cand]).view(np.uint64) - bits[cand, c]) * mult[c]
    order = np.argsort(h, kind="stable")
    pos = np.minimum(np.searchsorted(h[order], want), P - 1)
    t = order[pos]
    found = (h[t] == want) & _one_off(phi[t], phi[cand], c)
    extra = np.zeros((0, G))
    missing = np.flatnonzero(~found)
    if missing.size:
        keys, first, inv, counts = np.unique(want[missing], return_index=True,
                                             return_inverse=True, return_counts=True)
        inv = inv.reshape(-1)
        made = counts >= 3
        if np.any(made):
            rows = cand[missing[first[made]]]
            extra = phi[rows].copy()
            extra[np.arange(rows.size), c[missing[first[made]]]] = leave_at[rows]
            number = np.cumsum(made) - 1
            use = made[inv]
            m = missing[use]
            t[m] = P + number[inv[use]]
            found[m] = _one_off(extra[number[inv[use]]], phi[cand[m]], c[m])
    if extra.shape[0]:
        # rows whose prefix's main child had no twin for them (the two shifts of a point's
        # last gate, alone in their prefix) find it among the made rows, by hashes with
        # one column left out
        E = extra.shape[0]
        eb = extra.view(np.uint64)
        with np.errstate(over="ignore"):
            he = (eb * mult).sum(axis=1, dtype=np.uint64)
            masked = (he[:, None] - eb * mult) * np.uint64(3) + np.arange(G, dtype=np.uint64)
            look = np.flatnonzero(~found | (t < P))
            key = (h[cand[look]] - bits[cand[look], c[look]] * mult[c[look]]) * np.uint64(3) \
                + c[look].astype(np.uint64)
        flat = masked.reshape(-1)
        order = np.argsort(flat, kind="stable")
        pos = np.minimum(np.searchsorted(flat[order], key), flat.size - 1)
        hit = order[pos] // G
        good = (flat[order[pos]] == key) & _one_off(extra[hit], phi[cand[look]], c[look])
        t[look[good]] = P + hit[good]
        found[look[good]] = True
    ok = found
    # a twin must run itself: a derived row that is another's twin runs after all
    while True:
        serving = np.zeros(P + extra.shape[0], dtype=bool)
        serving[t[ok]] = True
        bad = ok & serving[cand]
        if not np.any(bad):
            break
        ok &= ~bad
    return cand[ok], t[ok], c[ok], extra


def _one_off(a, b, col):
    """Rows of ``a`` and ``b`` that differ in column ``col`` of each row and nowhere else."""
    diff = a != b
    return (diff.sum(axis=1) == 1) & diff[np.arange(col.size), col]


_SCALE: "weakref.WeakKeyDictionary" = weakref.WeakKeyDictionary()


def _scale(gate):
    """``w`` where the gate's generator squares to ``w**2 I`` (two eigenvalues, +-w), else NaN."""
    hit = _SCALE.get(gate)
    if hit is None:
        hit = np.nan
        if gate.kind == "generator":
            g = np.asarray(gate.generator)
            g2 = g @ g
            w2 = float(g2[0, 0].real)
            if w2 > 0 and np.allclose(g2, w2 * np.eye(g.shape[0]), rtol=0, atol=1e-14 * w2):
                hit = float(np.sqrt(w2))
        _SCALE[gate] = hit
    return hit


def _generator_scales(steps, G):
    """Per column, `_scale` of its gate where it is a factor of a fused step (NaN otherwise)."""
    out = np.full(G, np.nan)
    for s in steps:
        for f in s.factors:
            if f.column is not None and not f.const:
                out[f.column] = _scale(f.gate)
    return out


def _row_matrices(s, table, rows_phi, reps, cols, fork):
    """Per-row matrices (a, d, d) (or diagonals (a, d)) of fused step ``s`` for the buffer
    rows represented by ``reps`` (rows of ``rows_phi``), whose columns ``cols`` vary; a buffer
    row with ``fork`` c gets ``U G`` at column c. Computed once for each distinct combination
    of the step's angles and fork (the prefixes of one data point mostly share them)."""
    sub = rows_phi[reps[:, None], cols]
    tag = np.full(reps.size, -1, dtype=np.int64) if fork is None else \
        np.where(np.isin(fork, cols), fork, -1)
    uniq, inv = _distinct(sub, tag)
    if uniq is not None:
        sub, tag = sub[uniq], tag[uniq]
    d_only = s.kind == "diag"
    values = {}
    for k, c in enumerate(cols):
        f = next(f for f in s.factors if f.column == c)
        g = f.gate
        v = g.diagonal_values(sub[:, k]) if d_only else g._matrices(sub[:, k])
        at = np.flatnonzero(tag == c)
        if at.size:
            gen = np.asarray(g.generator)
            v = np.array(v)
            v[at] = v[at] * np.diag(gen) if d_only else v[at] @ gen
        values[c] = v
    m = step_matrix(s, table, sub.shape[0], values)
    return m if uniq is None else m[inv]


def _distinct(sub, tag):
    """``(first row of each distinct (angles, tag) row, index of every row into them)``, or
    ``(None, None)`` when most rows are distinct anyway. Rows are told apart by an exact
    integer hash of their bit patterns, and every row is checked against its match."""
    a, k = sub.shape
    mult = np.random.default_rng(20202).integers(0, 2 ** 64 - 1, size=k + 1, dtype=np.uint64,
                                                  endpoint=True) | np.uint64(1)
    with np.errstate(over="ignore"):
        h = (np.ascontiguousarray(sub + 0.0).view(np.uint64) * mult[:k]).sum(axis=1, dtype=np.uint64)
        h += tag.astype(np.uint64) * mult[k]
    _, first, inv = np.unique(h, return_index=True, return_inverse=True)
    inv = inv.reshape(-1)
    if 2 * first.size > a or not (np.array_equal(sub[first][inv], sub)
                                  and np.array_equal(tag[first][inv], tag)):
        return None, None
    return first, inv


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
