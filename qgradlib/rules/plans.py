"""Shift plans: first derivatives as weighted sums of evaluations at displaced points.

A point is a gate-angle vector ``phi`` plus, for Hamiltonian gates, the split points inserted
into their evolution. The derivative with respect to column ``j`` is
``sum_t c_t * f(point_t)``; every column's terms are listed once, shared by all rows.

- generator gates: the gate's `ShiftRule` (two-term, equidistant or general);
- Hamiltonian gates ``expm(-1j (W + a P))``: the stochastic rule of Banchi and Crooks,
  Quantum 5, 386 (2021). By Duhamel's formula
  ``d/da f = int_0^1 dr [f(P-rotation by +pi/4 inserted at r) - f(... by -pi/4)]``
  (the inserted ``expm(-1j t P)`` has the two-term rule with shifts +-pi/4 and weight 1).
  The integral is taken by Gauss-Legendre quadrature (exact to ~1e-12; piecewise between
  split points the evolution already carries, where the integrand has kinks) or, with shots, by
  sampling ``r`` uniformly (unbiased). Because the formula holds whatever splits the
  evolution already carries, it can be applied again for higher derivatives;
- gates known only by a matrix function: a central finite difference (approximate).
"""
from __future__ import annotations

from dataclasses import dataclass
from math import factorial

import numpy as np

from .shift_rules import warn_approximate
from .variance import least_variance_rule, rule_variance

__all__ = ["Term", "column_terms", "first_order_points", "distinct_points", "fixed_plan",
           "quadrature_nodes"]


@dataclass(frozen=True)
class Term:
    """One shifted evaluation in the derivative of a column."""

    column: int
    shift: float          # added to phi[column]
    split: tuple | None   # (r, t): insert expm(-1j t P) at fraction r (Hamiltonian gates)
    coefficient: float


def quadrature_nodes(spread: float, tol: float = 1e-12):
    """Gauss-Legendre nodes and weights on [0, 1] for integrands of frequency <= ``spread``.

    The error bound (n!)**4 / ((2n+1) ((2n)!)**3) * spread**(2n) of the n-point rule is
    brought below ``tol``.
    """
    n = 2
    while n < 80:
        bound = factorial(n) ** 4 / ((2 * n + 1) * factorial(2 * n) ** 3) * spread ** (2 * n)
        if bound < tol:
            break
        n += 1
    x, w = np.polynomial.legendre.leggauss(n)
    return (x + 1) / 2, w / 2


def _spread(gate, angles):
    P = gate.drive_matrix
    worst = 0.0
    for a in np.unique(np.asarray(angles, dtype=float)):
        ev = np.linalg.eigvalsh(gate.drift + a * P)
        worst = max(worst, ev[-1] - ev[0])
    # the integrand conjugates by expm(-1j r A) on both bra and ket: frequencies up to 2*spread
    return 2.0 * worst


def piecewise_quadrature(spread, breaks):
    """Gauss-Legendre on each piece of [0, 1] cut at ``breaks``.

    An evolution that already carries inserts (a derivative of a derivative) gives an
    integrand with a kink at each of them; one rule across a kink converges slowly, one rule
    per smooth piece is again exact.
    """
    edges = np.unique(np.concatenate([[0.0], np.asarray(breaks, dtype=float), [1.0]]))
    nodes, weights = [], []
    for lo, hi in zip(edges[:-1], edges[1:]):
        r, w = quadrature_nodes(spread * (hi - lo))
        nodes.append(lo + (hi - lo) * r)
        weights.append((hi - lo) * w)
    return np.concatenate(nodes), np.concatenate(weights)


def column_terms(circuit, column: int, angles, *, shift=None, step=None, shots=None,
                 splits=1, rng=None, breaks=(), least_variance=None) -> list:
    """The terms of d/dphi[column] (angles: that column's values over the rows).

    ``breaks`` are split fractions already inserted into this column's evolution in some
    row; the quadrature of the stochastic rule is cut there. ``least_variance`` (a shot split,
    "even" or "proportional") replaces a generator gate's rule by the candidate with the
    least variance bound for that split, where one is strictly better
    (`qgradlib.rules.variance`).
    """
    op = circuit.parametric_operations[column]
    g = op.gate
    if g.kind == "generator":
        rule = g.rule_with_shift(shift)
        if rule is None:       # a global phase: no expectation value depends on this angle
            return []
        if least_variance is not None and g.frequencies.size:
            _, best = least_variance_rule(g.frequencies, least_variance)
            if rule_variance(best, least_variance) < rule_variance(rule, least_variance) * (1 - 1e-9):
                rule = best
        return [Term(column, float(s), None, float(c)) for s, c in zip(rule.shifts, rule.coefficients)]
    if g.kind == "hamiltonian":
        if shots is None:
            r, w = piecewise_quadrature(_spread(g, angles), breaks)
        else:
            r = np.sort(rng.uniform(0.0, 1.0, size=int(splits)))
            w = np.full(r.size, 1.0 / r.size)
        out = []
        for ri, wi in zip(r, w):
            out.append(Term(column, 0.0, (float(ri), np.pi / 4), float(wi)))
            out.append(Term(column, 0.0, (float(ri), -np.pi / 4), -float(wi)))
        return out
    if g.kind == "function":
        warn_approximate(g)
        # with shots a tiny step would amplify the noise by 1/h: the same default as gradient="difference"
        h = step if step is not None else (1e-5 if shots is None else 0.1)
        return [Term(column, h, None, 1 / (2 * h)), Term(column, -h, None, -1 / (2 * h))]
    raise AssertionError(g.kind)


def first_order_points(circuit, phi, inserts, columns, **rule_options):
    """Displaced points for the gradient over ``columns`` of every row of ``phi`` (P, G).

    Returns ``(points (P*T, G), inserts (P*T,) or None, coefficients (G, T), purposes)``,
    ordered row-major: row p's T points are ``points[p*T:(p+1)*T]``. ``points`` stays an
    autograd box when ``phi`` is one, so the plan can itself be differentiated.
    """
    import autograd.numpy as anp

    from autograd.tracer import getval

    raw = np.asarray(getval(phi))
    P, G = raw.shape
    fixed = _fixed_plan(circuit, columns, inserts, rule_options)
    if fixed is not None:
        delta, coeff, names = fixed[:3]
        T = delta.shape[0]
        points = anp.reshape(phi[:, None, :] + delta[None, :, :], (P * T, G))
        return points, None, coeff, list(names) * P
    terms = []
    for j in columns:
        breaks = sorted({r for row in inserts for r, _ in row.get(j, ())}) if inserts else ()
        terms.extend(column_terms(circuit, j, raw[:, j], breaks=breaks, **rule_options))
    delta, coeff = _layout(terms, G)
    T = len(terms)
    points = anp.reshape(phi[:, None, :] + delta[None, :, :], (P * T, G))
    new_inserts = None
    if any(term.split is not None for term in terms) or inserts is not None:
        new_inserts = []
        for p in range(P):
            base = inserts[p] if inserts is not None else {}
            for term in terms:
                row = dict(base)
                if term.split is not None:
                    row[term.column] = tuple(sorted(row.get(term.column, ()) + (term.split,)))
                new_inserts.append(row)
    names = [circuit.parametric_operations[term.column].gate.name for term in terms] * P
    return points, new_inserts, coeff, names


def distinct_points(circuit, columns, **rule_options) -> bool:
    """Whether the points of `first_order_points` around one row are distinct circuits by
    construction: a plan that depends on no angle (generator gates, no inserts) whose
    shifts of each column differ from one another and from zero modulo the gate's period.

    Each point moves one column, so two of them coincide only where one column's shifts
    coincide, or where two shifts are whole periods. Callers may then skip looking for
    repeated points (the count of circuits is the number of points either way).

    Examples
    --------
    >>> import qgradlib as qg
    >>> distinct_points(qg.Circuit(1).ry(0).rx(0), (0, 1))
    True
    """
    if rule_options.get("least_variance") is not None:
        return False
    fixed = _fixed_plan(circuit, columns, None, rule_options)
    return fixed is not None and fixed[3]


def _distinct(delta, pops):
    """`distinct_points` of the displacements ``delta`` (T, G) of a fixed plan."""
    if delta.size == 0:
        return True
    if not np.all(np.count_nonzero(delta, axis=1) == 1):
        return False
    cols = np.argmax(delta != 0, axis=1)
    per = np.array([np.inf if pops[j].gate.period is None else pops[j].gate.period
                    for j in cols.tolist()])
    s = np.where(np.isinf(per), delta[np.arange(cols.size), cols], np.mod(delta[np.arange(cols.size), cols], per))
    # 1e-9 rad: far above the grid on which repeated points are recognised. Per column, in
    # order around its period: every shift away from zero, and from its neighbours
    order = np.lexsort((s, cols))
    c, s, per = cols[order], s[order], per[order]
    near_zero = np.minimum(np.abs(s), np.where(np.isinf(per), np.inf, per - s))
    same = c[1:] == c[:-1]
    gaps = np.where(same, s[1:] - s[:-1], np.inf)
    first = np.concatenate([[True], ~same])
    last = np.concatenate([~same, [True]])
    wrap = per[first] - (s[last] - s[first])      # the last shift of a column to its first
    return bool(np.all(near_zero > 1e-9) and np.all(gaps > 1e-9) and np.all(wrap > 1e-9))


def _layout(terms, G):
    """The displacements (T, G) and coefficients (G, T) of a list of terms."""
    T = len(terms)
    delta = np.zeros((T, G))
    coeff = np.zeros((G, T))
    for t, term in enumerate(terms):
        delta[t, term.column] = term.shift
        coeff[term.column, t] = term.coefficient
    return delta, coeff


def fixed_plan(circuit, columns, **rule_options):
    """``(delta (T, G), coeff (G, T), purposes)`` of the first-order plan over ``columns``
    when it depends on no angle (generator gates), memoised on the circuit; else None.

    The points around gate angles ``phi`` (1, G) are ``phi + delta``, and the gradient is
    ``coeff @`` their values: what `first_order_points` lays out, without laying it out.

    Examples
    --------
    >>> import qgradlib as qg
    >>> delta, coeff, purposes = fixed_plan(qg.Circuit(1).ry(0), (0,))
    >>> delta.ravel().tolist(), coeff.tolist(), purposes     # the two-term rule
    ([1.5707963267948966, -1.5707963267948966], [[0.5, -0.5]], ('RY', 'RY'))
    """
    hit = _fixed_plan(circuit, columns, None, rule_options)
    return None if hit is None else hit[:3]


def _fixed_plan(circuit, columns, inserts, options):
    """``(delta, coeff, names, distinct)`` of a plan that depends on no angle, memoised on
    the circuit (``distinct``: `distinct_points`).

    Generator gates' rules depend on the gate and the ``shift`` option only (not on the
    angles, the shots or the random generator), so a gradient in a training loop lays out
    the same plan every step. None where some column is not a generator gate, or with
    inserted rotations.
    """
    if inserts is not None or options.get("least_variance") is not None:
        return None
    pops = circuit.parametric_operations
    columns = tuple(int(j) for j in columns)
    shift = options.get("shift")
    memo = circuit.__dict__.setdefault("_memo_plans", {})
    key = (len(pops), columns, shift)
    hit = memo.get(key)
    if hit is not None:
        return hit
    if not all(pops[j].gate.kind == "generator" for j in columns):
        return None
    terms = [t for j in columns for t in column_terms(circuit, j, None, shift=shift)]
    delta, coeff = _layout(terms, len(pops))
    for a in (delta, coeff):
        a.setflags(write=False)
    hit = (delta, coeff, tuple(pops[t.column].gate.name for t in terms), _distinct(delta, pops))
    if len(memo) > 32:          # a few column sets a circuit: keep the memo small
        memo.clear()
    memo[key] = hit
    return hit
