"""Derivative plans of any order: merged tensor products of per-gate 1-D rules.

A plan lists distinct points (gate-angle displacements, plus split points for Hamiltonian
gates) and, for every multiset of columns ``(i, j, ...)``, the weights that turn the values
at those points into ``d_i d_j ... f`` in gate-angle space. Each column contributes the rule
of its own order from `qgradlib.rules.stencils` (one stencil for all orders, so lower orders'
points are reused); the products are merged after reducing each displaced coordinate modulo
its gate's period. `tensor` contracts a plan's values with the angle map on every index.
"""
from __future__ import annotations

from collections import Counter
from dataclasses import dataclass
from itertools import combinations_with_replacement, permutations, product

import numpy as np

from .plans import _spread, column_terms
from .stencils import duhamel_rule, gate_stencil

__all__ = ["Plan", "build_plan", "tensor"]

# Displaced angles are one point when they agree to this fraction of their gate's period
# (after reduction by it), or exactly where the gate has none: relative, so that a gate of
# frequency 1e10 (period 6e-10) keeps its distinct shifts apart.
_KEY_FRACTION = 2.0 ** -40


@dataclass(frozen=True, eq=False)
class Plan:
    """Distinct points and, per multiset of columns, (point indices, weights)."""

    deltas: np.ndarray        # (P, G) displacements of the distinct points
    inserts: list | None      # per point {column: ((r, t), ...)} or None
    purposes: list            # ledger label per point
    entries: dict             # multiset of columns -> (point indices, weights)

    @property
    def n_points(self):
        return self.deltas.shape[0]


def _reduce(x, period):
    """``(x reduced into [-period/2, period/2), key)``: equal keys are equal circuits."""
    if period is None:
        return x, float(x)
    r = x - period * np.round(x / period)                   # in [-period/2, period/2]
    tick = int(np.rint(r / period / _KEY_FRACTION))
    if tick >= 2 ** 39:                                      # +period/2 is -period/2
        return r - period, tick - 2 ** 40
    return r, tick


def _column_rules(circuit, phi, columns, max_order, *, shift, step, shots, splits, rng):
    """rules[c][k] = [(shift, cuts, weight), ...] for d^k/dphi_c^k, k = 0..max_order."""
    pops = circuit.parametric_operations
    rules = {}
    for c in columns:
        g = pops[c].gate
        if g.kind in ("generator", "function"):
            st = gate_stencil(g, max_order, shift=shift, step=step)
            rules[c] = [[(x, (), w) for x, w in st.rule(k)] for k in range(max_order + 1)]
            continue
        # Hamiltonian gate: first order from the package's stochastic rule, then Duhamel again
        first = [((t.split,), t.coefficient) for t in
                 column_terms(circuit, c, phi[c:c + 1], shots=shots, splits=splits, rng=rng)]
        spread = _spread(g, [phi[c]])
        rules[c] = [[(0.0, (), 1.0)]] + [
            [(0.0, cuts, w) for cuts, w in
             duhamel_rule(k, spread, first=first, shots=shots, splits=splits, rng=rng)]
            for k in range(1, max_order + 1)]
    return rules


def build_plan(circuit, phi, columns, orders, *, shift=None, step=None, shots=None,
                splits=1, rng=None) -> Plan:
    """Merge the tensor-product rules of every multiset of ``columns`` of the given orders."""
    pops = circuit.parametric_operations
    G = len(pops)
    rules = _column_rules(circuit, phi, columns, max(orders), shift=shift, step=step,
                          shots=shots, splits=splits, rng=rng)
    index, deltas, inserts, purposes, entries = {}, [], [], [], {}
    for k in orders:
        for ms in combinations_with_replacement(columns, k):
            counts = Counter(ms)
            factors = [rules[c][a] for c, a in sorted(counts.items())]
            cols = sorted(counts)
            acc = {}
            for combo in product(*factors):
                delta, cut, weight = {}, {}, 1.0
                for c, (x, cuts, w) in zip(cols, combo):
                    x, tick = _reduce(x, pops[c].gate.period)
                    if tick != 0:
                        delta[c] = (x, tick)
                    if cuts:
                        cut[c] = cuts
                    weight *= w
                key = (tuple((c, tick) for c, (_, tick) in sorted(delta.items())),
                       tuple((c, tuple((round(r, 12), round(t, 12)) for r, t in v))
                             for c, v in sorted(cut.items())))
                if key not in index:
                    index[key] = len(deltas)
                    row = np.zeros(G)
                    for c, (x, _) in delta.items():
                        row[c] = x
                    deltas.append(row)
                    inserts.append(cut)
                    touched = sorted(set(delta) | set(cut))
                    purposes.append("+".join(pops[c].gate.name for c in touched) or "value")
                p = index[key]
                acc[p] = acc.get(p, 0.0) + weight
            idx = np.array(sorted(acc), dtype=int)
            entries[ms] = (idx, np.array([acc[p] for p in idx]))
    D = np.array(deltas).reshape(len(deltas), G)
    return Plan(D, inserts if any(inserts) else None, purposes, entries)


def tensor(plan, vals, columns, A, k):
    """Order-k tensor in theta, shape (K,) + (m,)*k, from the plan's values (P, K)."""
    Gc, K = len(columns), vals.shape[1]
    pos = {c: i for i, c in enumerate(columns)}
    T = np.zeros((K,) + (Gc,) * k)
    for ms in combinations_with_replacement(columns, k):
        idx, w = plan.entries[ms]
        v = w @ vals[idx] if idx.size else np.zeros(K)
        for perm in set(permutations([pos[c] for c in ms])):
            T[(slice(None),) + perm] = v
    Ac = A[list(columns)] if Gc else np.zeros((0, A.shape[1]))
    for _ in range(k):
        # contract the first phi axis; the new theta axis goes last, so the order is kept
        T = np.tensordot(T, Ac, axes=([1], [0]))
    return T
