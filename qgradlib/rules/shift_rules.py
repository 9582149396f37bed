"""Parameter-shift rules derived from the spectrum of a gate's generator.

For ``U(a) = expm(-1j * a * G)`` every expectation value is a trigonometric polynomial in
``a`` whose frequencies are the distinct positive differences of the eigenvalues of ``G``.
A shift rule is a set of shifts ``s_k`` and coefficients ``c_k`` with
``f'(a) = sum_k c_k * f(a + s_k)`` exactly for every such polynomial.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

__all__ = ["ShiftRule", "frequencies_of", "rule_for_frequencies", "check_rule", "warn_approximate"]

# Eigenvalue differences closer than this fraction of the spectrum's spread are one frequency;
# below _ROUNDING times the largest eigenvalue they are rounding (float64 eigenvalues carry
# about 1e-15 * norm), so a generator c * I (a global phase) has no frequency at all.
_FREQ_TOL = 1e-8
_ROUNDING = 64 * np.finfo(float).eps


@dataclass(frozen=True, eq=False)
class ShiftRule:
    """First-derivative rule ``f'(a) = sum_k coefficients[k] * f(a + shifts[k])``.

    Parameters
    ----------
    shifts, coefficients : array_like of float, shape (T,)
        Shifts in radians of the gate angle, and their weights.
    frequencies : tuple of float, optional
        The frequencies for which the rule is exact (for display and checks).

    Examples
    --------
    >>> import numpy as np
    >>> r = ShiftRule.two_term(1.0)
    >>> f = np.sin
    >>> bool(np.isclose(r.derivative(f, 0.3), np.cos(0.3)))
    True
    """

    shifts: np.ndarray
    coefficients: np.ndarray
    frequencies: tuple = ()

    def __post_init__(self):
        s = np.asarray(self.shifts, dtype=float).reshape(-1)
        c = np.asarray(self.coefficients, dtype=float).reshape(-1)
        if s.shape != c.shape or s.size == 0:
            raise ValueError("shifts and coefficients must be non-empty 1-D arrays of one length; "
                             f"got shapes {np.shape(self.shifts)} and {np.shape(self.coefficients)}")
        if not (np.all(np.isfinite(s)) and np.all(np.isfinite(c))):
            raise ValueError("shifts and coefficients must be finite")
        s.setflags(write=False)
        c.setflags(write=False)
        object.__setattr__(self, "shifts", s)
        object.__setattr__(self, "coefficients", c)
        object.__setattr__(self, "frequencies", tuple(float(w) for w in self.frequencies))

    @property
    def n_terms(self) -> int:
        """Number of shifted evaluations the rule needs."""
        return int(self.shifts.size)

    def derivative(self, f, a):
        """Apply the rule to a scalar function ``f`` at ``a``."""
        return sum(c * f(a + s) for s, c in zip(self.shifts, self.coefficients))

    def __repr__(self):
        pairs = ", ".join(f"{s:+.6g}: {c:+.6g}" for s, c in zip(self.shifts, self.coefficients))
        return f"ShiftRule({{{pairs}}})"

    # -- constructors ---------------------------------------------------------------------
    @classmethod
    def two_term(cls, frequency: float, shift: float = np.pi / 2) -> "ShiftRule":
        """Two-term rule for a single frequency ``w``.

        ``f'(a) = w * (f(a + s/w) - f(a - s/w)) / (2 sin s)`` for any ``s`` in (0, pi)
        (Schuld, Bergholm, Gogolin, Izaac and Killoran, Phys. Rev. A 99, 032331 (2019)).
        """
        w = _positive(frequency, "frequency")
        s = float(shift)
        if not (0.0 < s < np.pi):
            raise ValueError(f"shift must lie in the open interval (0, pi); got {shift!r}")
        c = w / (2.0 * np.sin(s))
        return cls(np.array([s / w, -s / w]), np.array([c, -c]), (w,))

    @classmethod
    def equidistant(cls, base: float, order: int) -> "ShiftRule":
        """2R-term rule for the frequencies ``w, 2w, ..., Rw``.

        Shifts ``x_mu = (2 mu - 1) pi / (2R)`` (in units of ``1/w``), coefficients
        ``(-1)**(mu - 1) / (4 R sin**2(x_mu / 2))`` for mu = 1..2R: Wierichs, Izaac, Wang and
        Lin, Quantum 6, 677 (2022), eq. (24). Shifts past pi are written as negative shifts.
        """
        w = _positive(base, "base")
        R = int(order)
        if R < 1:
            raise ValueError(f"order must be a positive int; got {order!r}")
        mu = np.arange(1, 2 * R + 1)
        x = (2 * mu - 1) * np.pi / (2 * R)
        c = (-1.0) ** (mu - 1) / (4 * R * np.sin(x / 2) ** 2)
        x = np.where(x > np.pi, x - 2 * np.pi, x)
        return cls(x / w, w * c, tuple(w * k for k in range(1, R + 1)))

    @classmethod
    def general(cls, frequencies) -> "ShiftRule":
        """Rule for any set of distinct positive frequencies.

        The odd part ``(f(a+x) - f(a-x)) / 2 = sum_l b_l sin(w_l x)`` is sampled at R shifts
        and the linear system ``S b = d`` with ``S[mu, l] = sin(w_l x_mu)`` is solved; the
        derivative is ``sum_l w_l b_l``. The shifts are chosen by minimising the 1-norm of
        the resulting coefficients (Nelder-Mead from equidistant starting shifts). That norm
        bounds how much shot noise the rule amplifies, and it is large exactly when ``S`` is
        close to singular, so minimising it also keeps the system well conditioned.
        """
        w = np.sort(np.asarray(frequencies, dtype=float).reshape(-1))
        if w.size == 0 or np.any(w <= 0) or not np.all(np.isfinite(w)):
            raise ValueError(f"frequencies must be positive finite numbers; got {frequencies!r}")
        x, coeff = _general_shifts(tuple(np.round(w, 12)))
        return cls(np.concatenate([x, -x]), np.concatenate([coeff, -coeff]) / 2, tuple(w))


def _positive(v, name):
    v = float(v)
    if not (np.isfinite(v) and v > 0):
        raise ValueError(f"{name} must be a positive finite number; got {v!r}")
    return v


def _general_coefficients(x, w):
    S = np.sin(np.outer(x, w))
    # f'(0) = w . b = w . S^{-1} d  ->  weights on d are S^{-T} w
    return np.linalg.solve(S.T, w)


@lru_cache(maxsize=256)
def _general_shifts(w: tuple, norm: str = "one"):
    """Positive shifts and half-coefficients of the general rule on ``w`` that minimise a
    norm of the coefficients: "one" (``sum |c|``) or "even" (``T sum c**2``, the variance of
    an even shot split; see `qgradlib.rules.variance`)."""
    from scipy.optimize import minimize

    w = np.asarray(w)
    R = w.size

    def cost(x):
        try:
            c = _general_coefficients(x, w)
        except np.linalg.LinAlgError:
            return 1e300
        # the 2R terms are +-c/2: T sum_k c_k**2 = 2R * 2 sum (c/2)**2
        n = np.sum(np.abs(c)) if norm == "one" else 2 * R * 2 * np.sum((c / 2) ** 2)
        return n if np.isfinite(n) else 1e300

    best = None
    for scale in (w[-1], w[-1] / 2, w[0], np.mean(w)):
        x0 = (2 * np.arange(1, R + 1) - 1) * np.pi / (2 * R * scale)
        res = minimize(cost, x0, method="Nelder-Mead",
                       options={"xatol": 1e-10, "fatol": 1e-12, "maxiter": 4000 * R})
        if best is None or res.fun < best.fun:
            best = res
    x = np.abs(best.x)
    return x, _general_coefficients(x, w)


def frequencies_of(eigenvalues) -> np.ndarray:
    """Distinct positive differences of ``eigenvalues``.

    Thresholds are relative to the spectrum: differences within 1e-8 of its spread are one
    frequency, and differences at the rounding level of the largest eigenvalue are zero. So
    ``1e-9 * Z/2`` has the frequency 1e-9, and a multiple of the identity has none.

    Examples
    --------
    >>> frequencies_of([0.5e-9, -0.5e-9]).tolist()
    [1e-09]
    >>> frequencies_of([0.3, 0.3]).size
    0
    """
    ev = np.asarray(eigenvalues, dtype=float).reshape(-1)
    if ev.size == 0:
        return np.zeros(0)
    spread = float(ev.max() - ev.min())
    zero = max(_FREQ_TOL * spread, _ROUNDING * float(np.abs(ev).max()))
    diffs = np.abs(ev[:, None] - ev[None, :]).reshape(-1)
    diffs = np.sort(diffs[diffs > zero])
    out = []
    for d in diffs:
        if not out or d - out[-1] > _FREQ_TOL * d:
            out.append(d)
    return np.array(out)


def check_rule(rule: ShiftRule, frequencies, name: str = "shift_rule") -> None:
    """Refuse a rule that is not exact for every trigonometric polynomial of ``frequencies``.

    Exact means ``sum_k c_k f(s_k) = f'(0)`` for ``f = 1``, ``cos(w x)`` and ``sin(w x)`` of
    every frequency ``w``: ``sum c_k = 0``, ``sum c_k cos(w s_k) = 0`` and
    ``sum c_k sin(w s_k) = w`` (an expectation value in the angle is such a polynomial).

    Examples
    --------
    >>> check_rule(ShiftRule.two_term(1.0), [1.0])
    >>> try:
    ...     check_rule(ShiftRule.two_term(1.0), [1.0, 2.0])
    ... except ValueError as err:
    ...     print("for sin(2 x) it gives" in str(err))
    True
    """
    w = np.asarray(frequencies, dtype=float).reshape(-1)
    s, c = rule.shifts, rule.coefficients
    size = float(np.sum(np.abs(c))) * max(1.0, float(np.max(np.abs(s) * w.max(initial=0.0), initial=0.0)))
    tol = 1e-8 * max(size, float(w.max(initial=0.0)), 1e-300)
    checks = [("1", float(np.sum(c)), 0.0)]
    for wk in w:
        checks.append((f"cos({wk:g} x)", float(c @ np.cos(wk * s)), 0.0))
        checks.append((f"sin({wk:g} x)", float(c @ np.sin(wk * s)), float(wk)))
    for what, got, want in checks:
        if abs(got - want) > tol:
            listed = ", ".join(f"{x:g}" for x in w)
            raise ValueError(f"{name} is not exact for the gate's frequencies ({listed}): for {what} "
                             f"it gives {got:.6g} instead of f'(0) = {want:g}; a rule must be exact "
                             "for every frequency of the generator (rule_for_frequencies builds one)")


def rule_for_frequencies(freqs, shift=None) -> ShiftRule:
    """The cheapest exact rule for a frequency set.

    One frequency: the two-term rule (with ``shift`` if given). Frequencies
    ``w, 2w, ..., Rw``: the 2R-term equidistant rule. Anything else: `ShiftRule.general`.

    Examples
    --------
    >>> from qgradlib.rules import rule_for_frequencies
    >>> rule_for_frequencies([1.0]).n_terms, rule_for_frequencies([1.0, 2.0]).n_terms
    (2, 4)
    """
    w = np.asarray(freqs, dtype=float)
    if w.size == 0:
        raise ValueError("a gate whose generator has a single eigenvalue has no frequencies: "
                         "its angle does not change any expectation value")
    if w.size == 1:
        return ShiftRule.two_term(w[0], np.pi / 2 if shift is None else shift)
    base = w[0]
    if np.allclose(w / base, np.arange(1, w.size + 1), rtol=0, atol=1e-8):
        return ShiftRule.equidistant(base, w.size)
    return ShiftRule.general(w)


def warn_approximate(gate):
    """Warn that ``gate`` (known only by its matrix function) is differentiated approximately."""
    warnings.warn(f"gate {gate.name!r} is known only by its matrix function, so the derivative "
                  "of its angle is a central finite difference: approximate (truncation error "
                  "~ step**2), not an exact shift rule", stacklevel=4)
