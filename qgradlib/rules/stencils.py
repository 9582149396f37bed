"""One-dimensional derivative rules of every order on one shared stencil per gate.

For a generator gate whose expectation values have the frequencies ``w_1..w_R``, ``f(a + x)``
is ``a_0 + sum_l a_l cos(w_l x) + b_l sin(w_l x)``: 2R + 1 unknowns. The stencil is the point
``x = 0`` together with the 2R shifts of the gate's first-order rule, so the interpolation is
unique and the k-th derivative at 0 is one fixed linear combination of the stencil values,
``f^(k)(0) = sum_p W[k, p] f(x_p)``. Every order uses the same points, which is what lets a
Hessian (or any higher tensor) reuse the value and gradient evaluations (Mari, Bromley and
Killoran, Phys. Rev. A 103, 012405 (2021)). For one frequency with shifts +-pi/2 this gives
``f''(0) = (f(pi/2) - 2 f(0) + f(-pi/2)) / 2``. For first order the weights are those of the
gate's own rule (the interpolant is unique), with zero weight on ``x = 0``.

Gates known only through a matrix function get central finite-difference stencils instead
(approximate). Hamiltonian gates have no finite stencil; see `duhamel_rule`.

Examples
--------
>>> import numpy as np
>>> st = trig_stencil([1.0], [np.pi / 2, -np.pi / 2], max_order=2)
>>> st.points.round(4).tolist()
[0.0, 1.5708, -1.5708]
>>> st.weights[2].round(12).tolist()
[-1.0, 0.5, 0.5]
"""
from __future__ import annotations

from dataclasses import dataclass
from math import ceil, factorial

import numpy as np

from .shift_rules import warn_approximate
from .plans import piecewise_quadrature

__all__ = ["Stencil", "trig_stencil", "fd_stencil", "gate_stencil", "duhamel_rule", "check_step",
           "step_range"]

# Weights below this fraction of the largest weight of their order are rounding noise of
# an exact zero (for example the weight of x = 0 in a symmetric first-order rule).
_ZERO = 1e-12


@dataclass(frozen=True, eq=False)
class Stencil:
    """Points ``x_p`` (``points[0] == 0``) and weights ``W[k, p]`` for orders k = 0..K.

    ``f^(k)(0) = weights[k] @ f(points)``; ``exact`` is False for finite differences.
    """

    points: np.ndarray
    weights: np.ndarray
    exact: bool = True

    @property
    def max_order(self) -> int:
        return self.weights.shape[0] - 1

    def rule(self, order: int):
        """``[(x_p, W[order, p]), ...]`` for the nonzero weights of one order."""
        return [(float(x), float(w)) for x, w in zip(self.points, self.weights[order]) if w != 0.0]


def _clean(W):
    W = np.array(W, dtype=float)
    for k in range(W.shape[0]):
        scale = np.abs(W[k]).max(initial=0.0)
        W[k][np.abs(W[k]) <= _ZERO * scale] = 0.0
    W.setflags(write=False)
    return W


def _basis_derivative(freqs, k):
    """k-th derivative at 0 of the basis [1, cos(w_l x)..., sin(w_l x)...]."""
    R = len(freqs)
    d = np.zeros(2 * R + 1)
    d[0] = 1.0 if k == 0 else 0.0
    wk = np.asarray(freqs, dtype=float) ** k
    if k % 2 == 0:
        d[1:R + 1] = (-1) ** (k // 2) * wk
    else:
        d[R + 1:] = (-1) ** ((k - 1) // 2) * wk
    return d


def _basis(freqs, x):
    wx = np.outer(x, freqs)
    return np.hstack([np.ones((len(x), 1)), np.cos(wx), np.sin(wx)])


def trig_stencil(frequencies, shifts, max_order: int) -> Stencil:
    """Stencil ``{0} U shifts`` for trigonometric polynomials with ``frequencies``.

    With exactly 2R + 1 distinct points the weights solve ``M.T W[k] = d_k`` where
    ``M[p] = [1, cos(w x_p), sin(w x_p)]`` and ``d_k`` holds the k-th derivatives of the
    basis at 0. With more points the minimum-norm weights are taken. If the points do not
    determine the interpolant (a rule whose shifts alias), equidistant points are added.
    """
    w = np.asarray(frequencies, dtype=float).reshape(-1)
    if w.size == 0 or np.any(w <= 0):
        raise ValueError(f"frequencies must be positive; got {frequencies!r}")
    K = _order(max_order)
    pts = [0.0]
    for s in np.asarray(shifts, dtype=float).reshape(-1):
        if all(abs(s - p) > 1e-12 * max(abs(s), abs(p)) for p in pts):
            pts.append(float(s))
    n = 2 * w.size + 1
    extra = 1
    while np.linalg.matrix_rank(_basis(w, np.array(pts)), tol=1e-9) < n:
        # aliasing shifts: add generic points (golden-ratio steps) until M has full rank
        pts.append(float(((extra * 0.6180339887498949) % 1.0 - 0.5) * 2 * np.pi / w.min()))
        extra += 1
    x = np.array(pts)
    M = _basis(w, x)
    D = np.stack([_basis_derivative(w, k) for k in range(K + 1)], axis=1)  # (n, K+1)
    if x.size == n:
        W = np.linalg.solve(M.T, D).T
    else:
        W = np.linalg.lstsq(M.T, D, rcond=None)[0].T
    return Stencil(x, _clean(W), True)


def fd_stencil(max_order: int, step: float) -> Stencil:
    """Central finite-difference stencil ``j * step``, ``j = -q..q``, ``q = max(1, ceil(K/2))``.

    The weights make the rule exact for polynomials of degree 2q (Taylor matching), so the
    k-th derivative has truncation error of order ``step**(2q + 1 - k)``.
    """
    K = _order(max_order)
    h = float(step)
    if not (np.isfinite(h) and h > 0):
        raise ValueError(f"step must be a positive finite number; got {step!r}")
    q = max(1, ceil(K / 2))
    j = np.arange(-q, q + 1, dtype=float)
    order = np.concatenate([[q], np.delete(np.arange(2 * q + 1), q)])   # x = 0 first
    j = j[order]
    V = np.stack([j ** d / factorial(d) for d in range(2 * q + 1)])    # (deg, points)
    W = np.stack([np.linalg.solve(V, np.eye(2 * q + 1)[k]) / h ** k for k in range(K + 1)])
    return Stencil(j * h, _clean(W), False)


def gate_stencil(gate, max_order: int, *, shift=None, step=None) -> Stencil:
    """The stencil of a generator gate (exact) or a function gate (finite differences).

    ``shift`` selects the two-term shift of single-frequency gates, as in `qgradlib.expect`.
    The default finite-difference step grows with the order (about eps**(1/(K+2))), the
    usual balance of truncation against rounding.
    """
    K = _order(max_order)
    if gate.kind == "generator":
        rule = gate.rule_with_shift(shift)
        if rule is None:       # a global phase: every derivative is zero, no point is needed
            W = np.zeros((K + 1, 1))
            W[0, 0] = 1.0
            return Stencil(np.zeros(1), _clean(W), True)
        # the interpolant needs the gate's true frequencies, whatever rule supplied the shifts
        return trig_stencil(gate.frequencies, rule.shifts, K)
    if gate.kind == "function":
        warn_approximate(gate)
        h = check_step(step, K) if step is not None else float(np.finfo(float).eps ** (1.0 / (K + 2)))
        return fd_stencil(K, h)
    raise ValueError(f"gate {gate.name!r} of kind {gate.kind!r} has no finite stencil; "
                     "Hamiltonian gates use duhamel_rule")


def duhamel_rule(order: int, spread: float, *, first=None, shots=None, splits=1, rng=None):
    """k-th derivative of a Hamiltonian gate's angle as inserted rotations (stochastic rule).

    Returns ``[(splits, weight), ...]`` where ``splits`` is a sorted tuple of ``(r, t)``:
    insert ``expm(-1j t P)`` after a fraction ``r`` of the evolution. One application of
    Duhamel's formula (Banchi and Crooks, Quantum 5, 386 (2021)) turns each entry into
    ``int_0^1 dr [entry + (r, +pi/4)] - [entry + (r, -pi/4)]``; the formula holds whatever
    splits the evolution already carries, so applying it k times gives the k-th derivative.

    ``spread`` bounds the integrand's frequency; existing splits cut the integrand into
    smooth pieces (it has a kink at each), so without shots every piece gets its own
    Gauss-Legendre rule (`qgradlib.rules.plans.piecewise_quadrature`). With ``shots`` the split
    points are sampled uniformly, ``splits`` per application, which keeps every order
    unbiased.

    ``first`` (optional) are the order-1 entries to build on, so that every order of one
    column starts from the same first-order splits (for example those of
    `qgradlib.rules.plans.column_terms`).
    """
    k = _order(order)
    if k == 0:
        return [((), 1.0)]
    entries = list(first) if first is not None else [((), 1.0)]
    for _ in range(k - (first is not None)):
        nxt = []
        for cuts, weight in entries:
            if shots is None:
                rs, ws = piecewise_quadrature(spread, [r for r, _ in cuts])
            else:
                rs = np.sort(rng.uniform(0.0, 1.0, size=int(splits)))
                ws = np.full(rs.size, 1.0 / rs.size)
            for r, w in zip(rs, ws):
                for t, sign in ((np.pi / 4, 1.0), (-np.pi / 4, -1.0)):
                    nxt.append((tuple(sorted(cuts + ((float(r), t),))), sign * float(w) * weight))
        entries = nxt
    return entries


# A k-th finite difference carries rounding error ~ eps * |f| / step**k and truncation
# error ~ step**2 * |f^(k+2)| (central). Steps are refused where rounding alone would exceed
# this fraction of the value's scale, or where a step of more than one radian leaves the
# truncation error of the order of the derivative itself (for unit frequencies).
_ROUNDING_BUDGET = 1e-4
_MAX_STEP = 1.0


def step_range(order: int):
    """``(smallest, largest)`` finite-difference step allowed for derivatives of ``order``.

    Examples
    --------
    >>> [f"{lo:.1e}" for lo, hi in (step_range(1), step_range(2), step_range(3))]
    ['2.2e-12', '1.5e-06', '1.3e-04']
    """
    k = max(1, _order(order))
    return (np.finfo(float).eps / _ROUNDING_BUDGET) ** (1.0 / k), _MAX_STEP


def check_step(step, order: int, name: str = "step") -> float:
    """``step`` as a float, refused (ValueError naming ``name``) outside `step_range` (order)."""
    if isinstance(step, (bool, np.bool_)) or not isinstance(step, (int, float, np.integer, np.floating)):
        raise TypeError(f"{name} must be a positive number; got {step!r}")
    h = float(step)
    lo, hi = step_range(order)
    if not (np.isfinite(h) and lo <= h <= hi):
        best = np.finfo(float).eps ** (1.0 / (max(1, order) + 2))
        raise ValueError(
            f"{name}={step!r} is outside the useful range [{lo:.1e}, {hi:g}] for a derivative of "
            f"order {order}: below it rounding (~ eps / {name}**{order}) swamps the difference, "
            f"above it truncation (~ {name}**2) does; about {best:.0e} balances the two for "
            "exact values (larger with shots)")
    return h


def _order(k):
    if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or k < 0:
        raise ValueError(f"order must be a non-negative int; got {k!r}")
    return int(k)
