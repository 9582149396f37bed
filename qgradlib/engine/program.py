"""A circuit compiled into kernel steps, with optional gate fusion.

A step is one kernel call: a diagonal phase multiply, a monomial copy (permutation with
phases) or a dense product, on one or two qubits, holding one or more gates (its factors).
Fusion merges, where it pays:

- runs of single-qubit gates on one qubit (one 2x2 matrix);
- single-qubit gates into a neighbouring two-qubit gate, before or after it;
- consecutive gates on the same pair of qubits.

Gates only move past gates on other qubits, so the product is the same unitary. A merge is
taken when the merged kernel is cheaper than the kernels it replaces (diagonal < monomial <
dense, in passes over the state), or always on small states, where the cost is the Python
call per kernel. Hamiltonian and function gates, gates on more than two qubits, columns that
carry inserted rotations, columns the caller keeps apart (the adjoint method's trainable
columns) and operations that are not gates are never fused.

Compiled programs are memoised per circuit (weakly: they go with the circuit) and depend on
nothing else, so the cache is not state a caller can observe except through speed.
"""
from __future__ import annotations

import weakref
from collections import OrderedDict
from dataclasses import dataclass, field

import numpy as np

from .kernels import MAX_SPAN, monomial_structure, sort_qubits, widen

__all__ = ["Step", "Program", "program", "derive", "cache_info", "is_gate", "SMALL_N"]

# at or below this many qubits a kernel costs less than its Python call: every merge pays
SMALL_N = 10
# widest diagonal step (qubits): its phases are a vector of 2**DIAG_WIDTH entries
DIAG_WIDTH = 10
_COST = {"diag": 1, "mono": 2, "dense": 3}


GATE_KINDS = ("fixed", "generator", "hamiltonian", "function")


def is_gate(obj) -> bool:
    """True for objects the statevector engine applies itself: those whose ``kind`` is a
    gate kind (qgradlib `Gate`). Anything else (a noise channel, ``kind = "channel"``) is not."""
    return getattr(obj, "kind", None) in GATE_KINDS


@dataclass
class Factor:
    gate: object
    op: object             # the circuit operation
    qubits: tuple          # in the gate's own order
    column: int | None     # phi column of a parametric gate, None for a fixed gate
    const: bool            # angle baked in at compile time (fixed gate or fixed angle)
    angle: float | None = None
    embed: object = None   # flat indices placing the factor in its step (-1: zero), or None
    slot: tuple = None     # (group, position) of its values in a run's table
    cached: object = None  # the value of a constant factor


@dataclass
class Step:
    """One kernel call on ``qubits`` (ascending)."""

    kind: str                        # diag | mono | dense | solo | external
    qubits: tuple
    factors: list = field(default_factory=list)
    op: object = None                # the operation, for solo and external steps
    column: int | None = None        # solo parametric steps: its column
    matrix: object = None            # constant matrix / diagonal, when no factor varies
    mono: object = None              # (cols,) structure of a monomial step
    real: bool | None = None

    @property
    def varies(self):
        return any(not f.const for f in self.factors)


@dataclass
class Program:
    n: int
    steps: list
    const_columns: tuple             # columns whose angle was baked in (checked at run time)
    const_angles: np.ndarray
    groups: list = field(default_factory=list)   # (gate, diagonal?, columns) of varying factors
    n_columns: int = 0                           # parametric operations (columns of phi)

    def __post_init__(self):
        # whether a step hands the state to an operation of the user's (which may keep it)
        self.external = any(s.kind == "external" for s in self.steps)


_KLASS: "weakref.WeakKeyDictionary" = weakref.WeakKeyDictionary()


def _klass(gate):
    """The kernel class of a gate, memoised per gate (gates are immutable)."""
    hit = _KLASS.get(gate)
    if hit is None:
        hit = _KLASS[gate] = _klass_of(gate)
    return hit


def _klass_of(gate):
    if gate.kind in ("hamiltonian", "function") or gate.n_qubits > 2:
        return "solo"
    if gate.diagonal:
        return "diag"
    if gate.kind == "fixed" and monomial_structure(gate.unitary) is not None:
        return "mono"
    return "dense"


def _merged(k1, k2, all_const):
    if k1 == k2 == "diag":
        return "diag"
    if k1 in ("diag", "mono") and k2 in ("diag", "mono"):
        return "mono" if all_const else "dense"
    return "dense"


def _span_ok(qubits):
    return max(qubits) - min(qubits) + 1 <= MAX_SPAN


def _pays(n, kinds, result, qubits):
    if result == "dense" and not _span_ok(qubits):
        return n <= SMALL_N
    if n <= SMALL_N:
        return True
    return _COST[result] < sum(_COST[k] for k in kinds)


def compile_program(circuit, fuse: bool, solo_columns=frozenset(), bake_fixed_angles=True):
    """Compile ``circuit`` into a `Program` (see the module notes)."""
    n = circuit.n_qubits
    steps: list = []
    last: dict = {}
    col = 0
    const_cols, const_angles = [], []
    for op in circuit.operations:
        g = op.gate
        if not is_gate(g):
            if getattr(g, "parametric", False):
                col += 1     # it owns a column of phi (Circuit counts it), though not ours to apply
            steps.append(Step("external", tuple(op.qubits), op=op))
            for q in op.qubits:
                last[q] = len(steps) - 1
            continue
        column = None
        if g.parametric:
            column = col
            col += 1
        klass = _klass(g)
        if klass == "solo" or (column is not None and column in solo_columns):
            steps.append(Step("solo", tuple(op.qubits), op=op, column=column))
            for q in op.qubits:
                last[q] = len(steps) - 1
            continue
        const = column is None or (bake_fixed_angles and op.param is None and op.input is None)
        if column is not None and const:
            const_cols.append(column)
            const_angles.append(op.angle)
        f = Factor(g, op, tuple(op.qubits), column, const, op.angle if column is not None else None)
        qs = tuple(op.qubits)
        placed = None
        if fuse:
            owners = {last.get(q) for q in qs}
            if len(owners) == 1 and None not in owners:
                idx = owners.pop()
                s = steps[idx]
                if s.kind in _COST and set(qs) <= set(s.qubits):
                    allc = not s.varies and const
                    res = _merged(s.kind, klass, allc)
                    if (res == "diag" or len(s.qubits) <= 2) and _pays(n, (s.kind, klass), res, s.qubits):
                        s.kind = res
                        s.factors.append(f)
                        placed = idx
            if placed is None and len(qs) == 2:
                absorb = []
                for q in qs:
                    i = last.get(q)
                    if i is not None and steps[i] is not None and steps[i].kind in _COST \
                            and steps[i].qubits == (q,):
                        absorb.append(i)
                if absorb:
                    kinds = [steps[i].kind for i in absorb] + [klass]
                    allc = const and all(not steps[i].varies for i in absorb)
                    res = klass
                    for k in kinds[:-1]:
                        res = _merged(res, k, allc)
                    if _pays(n, kinds, res, qs):
                        factors = [x for i in sorted(absorb) for x in steps[i].factors] + [f]
                        for i in absorb:
                            steps[i] = None
                        steps.append(Step(res, tuple(sorted(qs)), factors))
                        placed = len(steps) - 1
            if placed is None and klass == "diag":
                # diagonal gates commute: join the latest step on these qubits if it is diagonal
                owners = [last[q] for q in qs if q in last]
                if owners:
                    idx = max(owners)
                    s = steps[idx]
                    union = tuple(sorted(set(s.qubits) | set(qs)))
                    if s.kind == "diag" and len(union) <= DIAG_WIDTH:
                        s.qubits = union
                        s.factors.append(f)
                        placed = idx
        if placed is None:
            steps.append(Step(klass, tuple(sorted(qs)), [f]))
            placed = len(steps) - 1
        for q in qs:
            last[q] = placed
    steps = [s for s in steps if s is not None]
    groups: dict = {}
    for s in steps:
        d_only = s.kind == "diag"
        for f in s.factors:
            f.embed = _embedding(f, s)
            if f.const:
                f.cached = _factor_value(f, None, d_only)
            else:
                gi, cols = groups.setdefault((id(f.gate), d_only), (len(groups), []))
                f.slot = (gi, len(cols))
                cols.append(f.column)
        _finish(s)
    glist = [None] * len(groups)
    gates = {id(f.gate): f.gate for s in steps for f in s.factors}
    for (gid, d_only), (gi, cols) in groups.items():
        glist[gi] = (gates[gid], d_only, np.array(cols, dtype=np.intp))
    return Program(n, steps, tuple(const_cols), np.array(const_angles, dtype=float), glist, col)


def _finish(s):
    """Constant matrix, realness and monomial pattern of a fusable step."""
    if s.kind in _COST and not s.varies:
        s.matrix = step_matrix(s, None, None)
        s.real = not np.any(np.imag(s.matrix))
    if s.kind == "mono":
        s.mono = _mono_structure(s)


def _mono_structure(step):
    """Column pattern of a monomial step (phases have unit modulus, so it is angle-free)."""
    d = 2 ** len(step.qubits)
    pattern = np.eye(d)
    for f in step.factors:
        if f.gate.kind == "fixed":
            m = np.abs(f.gate.unitary) > 0
        else:
            m = np.eye(2 ** f.gate.n_qubits)
        m, sq = sort_qubits(m.astype(float), f.qubits)
        pos = [step.qubits.index(q) for q in sq]
        pattern = widen(m, pos, len(step.qubits)) @ pattern
    return monomial_structure(pattern)[0]


def _embedding(f, step):
    """Indices that lay the factor's flattened matrix (or diagonal) out on the step's qubits."""
    k = len(f.qubits)
    w = len(step.qubits)
    if tuple(f.qubits) == step.qubits:
        return None
    d = 2 ** k
    if step.kind == "diag":
        code, sq = sort_qubits(np.arange(d, dtype=float), f.qubits, diag=True)
        pos = [step.qubits.index(q) for q in sq]
        shape = [2 if i in pos else 1 for i in range(w)]
        full = np.broadcast_to(code.reshape(shape), (2,) * w).reshape(-1)
        return full.astype(np.intp)
    code, sq = sort_qubits(np.arange(1, d * d + 1, dtype=float).reshape(d, d), f.qubits)
    pos = [step.qubits.index(q) for q in sq]
    full = widen(code, pos, w) if len(pos) < w else code
    return (np.rint(full.real).astype(np.intp) - 1)


def _factor_value(f, table, d_only, values=None):
    """The factor's matrix (or diagonal, with ``d_only``): (d, d) / (B, d, d) / (d,) / (B, d)."""
    if f.cached is not None:
        return f.cached
    g = f.gate
    if values is not None and f.column in values:
        return values[f.column]
    if not f.const:
        gi, j = f.slot
        vals, shared = table[gi]
        return vals[j, 0] if shared[j] else vals[j]
    if g.kind == "fixed":
        return np.diag(g.unitary) if d_only else g.unitary
    if f.const:
        a = np.array([f.angle])
        v = g.diagonal_values(a) if d_only else g._matrices(a)
        return v[0]
    raise AssertionError("varying factor without a table")


def step_matrix(step, table, B, values=None):
    """The step's matrix (dense/mono) or diagonal (diag) from its factors, in step order.

    ``values`` ({column: (U, d, d) or (U, d)}) overrides the table for those columns: the
    matrices of U rows of angles (a prefix tree's distinct angle combinations)."""
    d_only = step.kind == "diag"
    out = None
    for f in step.factors:
        v = _factor_value(f, table, d_only, values)
        if f.embed is not None:
            if d_only:
                v = v[..., f.embed]
            else:
                flat = v.reshape(v.shape[:-2] + (-1,))
                flat = np.concatenate([flat, np.zeros(flat.shape[:-1] + (1,), dtype=flat.dtype)], axis=-1)
                v = flat[..., f.embed]
        if out is None:
            out = v
        elif d_only:
            out = out * v
        else:
            out = np.matmul(v, out)
    return out


def derive(base: Program, solo) -> Program:
    """``base`` with the factors of the ``solo`` columns taken out of their fused steps.

    A fused step is a product of its factors in order, so cutting it at a solo factor into
    (factors before, the solo gate, factors after), on the same qubits and at the same place,
    leaves the circuit's unitary unchanged. Every other step (with its cached matrices) and
    the table groups are shared with ``base``: a program per set of kept columns costs only
    the steps it cuts, not a compilation of the whole circuit.
    """
    steps = []
    for s in base.steps:
        if s.kind not in _COST or not any(f.column in solo for f in s.factors):
            steps.append(s)
            continue
        seg: list = []
        for f in s.factors:
            if f.column not in solo:
                seg.append(f)
                continue
            if seg:
                steps.append(_cut(s, seg))
                seg = []
            steps.append(Step("solo", tuple(f.op.qubits), op=f.op, column=f.column))
        if seg:
            steps.append(_cut(s, seg))
    return Program(base.n, steps, base.const_columns, base.const_angles, base.groups,
                   base.n_columns)


def _cut(parent, factors):
    kind = parent.kind
    if kind == "mono" and len(factors) == 1 and factors[0].gate.kind != "fixed":
        kind = "dense"
    step = Step(kind, parent.qubits, list(factors))
    _finish(step)
    return step


def nbytes(prog: Program, shared=None) -> int:
    """Bytes held by the program's steps (those not in ``shared``, a set of step ids)."""
    total = 0
    for s in prog.steps:
        if shared is not None and id(s) in shared:
            continue
        total += 256 + 128 * len(s.factors)
        for a in (s.matrix, s.mono):
            total += getattr(a, "nbytes", 0)
        for f in s.factors:
            total += getattr(f.embed, "nbytes", 0) + getattr(f.cached, "nbytes", 0)
    return total


# compiled programs of all circuits together are held to this many bytes (least recently
# used first out); a program a caller still runs is unaffected, only recompiled if asked again
CACHE_BYTES = 64 * 2 ** 20
# kept columns at most this fraction of all columns: derive from the fused program
DERIVE_FRACTION = 0.125


_LRU: "OrderedDict" = OrderedDict()   # (id(circuit), key) -> (weak circuit, bytes)
_HELD = [0]


def program(circuit, fuse: bool, solo_columns=frozenset(), bake_fixed_angles=True) -> Program:
    """The memoised program of ``circuit`` (recompiled when its operations change).

    A few kept columns (``solo_columns``) give a program derived from the fused one
    (`derive`); many give a compilation of their own. All programs together hold at most
    `CACHE_BYTES`.
    """
    # operations are only ever appended to a circuit: their count tells a stale program
    ops = len(circuit)
    solo = frozenset(solo_columns)
    key = (bool(fuse), solo, bool(bake_fixed_angles))
    # held by the circuit itself (circuits compare by content and are unhashable, so they
    # cannot key a dict); Circuit drops `_memo_*` attributes when copied or pickled
    per = circuit.__dict__.setdefault("_memo_programs", {})
    hit = None if per is None else per.get(key)
    if hit is not None and hit[0] == ops:
        _LRU.move_to_end((id(circuit), key), last=True)
        return hit[2]
    base = None
    if solo and len(solo) <= max(4, DERIVE_FRACTION * len(circuit.parametric_operations)):
        base = program(circuit, fuse, frozenset(), bake_fixed_angles)
        prog = derive(base, solo)
        size = nbytes(prog, {id(s) for s in base.steps})
    else:
        prog = compile_program(circuit, fuse, solo, bake_fixed_angles)
        size = nbytes(prog)
    if per is not None:
        _forget(circuit, key)
        per[key] = (ops, size, prog)
        lk = (id(circuit), key)
        _LRU[lk] = (weakref.ref(circuit, lambda _, lk=lk: _drop(lk)), size)
        _HELD[0] += size
        _evict()
    return prog


def _forget(circuit, key):
    _drop((id(circuit), key))


def _drop(lk):
    old = _LRU.pop(lk, None)
    if old is not None:
        _HELD[0] -= old[1]


def _evict():
    while _HELD[0] > CACHE_BYTES and len(_LRU) > 1:
        (cid, key), (ref, size) = _LRU.popitem(last=False)
        _HELD[0] -= size
        c = ref()
        per = None if c is None else c.__dict__.get("_memo_programs")
        if per is not None:
            per.pop(key, None)


def cache_info() -> dict:
    """Programs held and their bytes (live circuits only)."""
    live = [(k, v) for k, v in _LRU.items() if v[0]() is not None]
    return {"programs": len(live), "bytes": sum(v[1] for _, v in live), "limit": CACHE_BYTES}
