"""Trigonometric polynomials: the cost along one direction in theta, fixed by a few values.

Along a direction ``v`` in theta, every gate angle that moves is ``phi_j = c_j t + const``
with ``c_j = scale_j * v[param_j]``, so the cost is ``<psi| U(t)^+ O U(t) |psi>`` with
phases ``exp(i t (L_a - L_b))``, where ``L`` runs over the sums ``sum_j c_j lambda_j`` of one
eigenvalue of each moving gate's generator. Its frequencies are the distinct positive
differences of those sums, and with R of them the cost is
``a0 + sum_l (a_l cos(w_l t) + b_l sin(w_l t))``, fixed by 2R + 1 values (Wierichs, Izaac,
Wang and Lin, Quantum 6, 677 (2022), sec. 3). When every frequency is an integer multiple of
the smallest, ``w0``, the multiples ``w0, ..., R w0`` are used with 2R + 1 equidistant points
(the design matrix is then orthogonal up to a factor); otherwise the points are chosen for a
well-conditioned solve.

This module is mathematics only: it takes a circuit's operations and values, never simulates.

Examples
--------
>>> import numpy as np
>>> w, t = sample_points(np.array([1.0, 2.0]), 0.3)
>>> w.tolist(), t.size
([1.0, 2.0], 5)
>>> f = lambda x: 0.5 - np.cos(x) + 0.25 * np.sin(2 * x)
>>> p = fit(w, t, f(t))
>>> bool(np.isclose(p(1.7), f(1.7))), round(float(p.a[0]), 12), round(float(p.b[1]), 12)
(True, -1.0, 0.25)
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .shift_rules import _FREQ_TOL, frequencies_of

__all__ = ["TrigPolynomial", "frequencies_along", "sample_points", "design", "fit",
           "equidistant_base"]

# sums of eigenvalues kept apart: beyond this many the frequency set is not worth sampling
_MAX_SUMS = 4096


@dataclass(frozen=True, eq=False)
class TrigPolynomial:
    """``f(t) = a0 + sum_l (a[l] cos(w[l] t) + b[l] sin(w[l] t))``.

    Attributes
    ----------
    frequencies : ndarray, shape (L,)
        The positive frequencies ``w``.
    a0 : float
    a, b : ndarray, shape (L,)
    a0_error, a_error, b_error : float, ndarray or None
        Standard errors of the coefficients when they were fitted to estimates (None when
        fitted to exact values).
    """

    frequencies: np.ndarray
    a0: float
    a: np.ndarray
    b: np.ndarray
    a0_error: float | None = None
    a_error: np.ndarray | None = None
    b_error: np.ndarray | None = None

    def __post_init__(self):
        for name in ("frequencies", "a", "b", "a_error", "b_error"):
            v = getattr(self, name)
            if v is not None:
                v = np.array(v, dtype=float).reshape(-1)
                v.setflags(write=False)
                object.__setattr__(self, name, v)
        object.__setattr__(self, "a0", float(self.a0))
        if not (self.frequencies.shape == self.a.shape == self.b.shape):
            raise ValueError("frequencies, a and b must have one length; got "
                             f"{self.frequencies.shape}, {self.a.shape}, {self.b.shape}")

    def __call__(self, t):
        """The value at ``t`` (float or array; the result has the shape of ``t``)."""
        return self.derivative(t, 0)

    def derivative(self, t, order=1):
        """The ``order``-th derivative at ``t`` (vectorised like the call)."""
        if isinstance(order, bool) or not isinstance(order, (int, np.integer)) or order < 0:
            raise ValueError(f"order must be a non-negative int; got {order!r}")
        t = np.asarray(t, dtype=float)
        u = t[..., None] * self.frequencies
        # d^k/dt^k cos(w t) = w^k cos(w t + k pi/2), and the same for sin
        shift = order * np.pi / 2
        wk = self.frequencies ** order
        out = (wk * (self.a * np.cos(u + shift) + self.b * np.sin(u + shift))).sum(axis=-1)
        if order == 0:
            out = out + self.a0
        return float(out) if out.ndim == 0 else out

    @property
    def period(self) -> float | None:
        """The period when all frequencies are integer multiples of the smallest, else None."""
        base = equidistant_base(self.frequencies)
        return None if base is None else 2 * np.pi / base

    def minimum(self, near=0.0):
        """``(t, f(t))`` at the least value: over one period, or within ``near +- pi / w_min``.

        Dense sampling (at least 16 points per shortest period) locates the basin; Newton's
        method on the closed-form derivatives polishes it to rounding.
        """
        w = self.frequencies
        if w.size == 0:
            return float(near), self.a0
        period = self.period
        lo, width = (near - period / 2, period) if period is not None else (near - np.pi / w[0],
                                                                            2 * np.pi / w[0])
        n = int(np.clip(16 * width * w[-1] / (2 * np.pi), 64, 200_000))
        grid = lo + width * np.arange(n) / n
        vals = self(grid)
        best_t, best_v = float(near), float(self(near))
        for i in np.argsort(vals)[:3]:
            t = float(grid[i])
            for _ in range(30):
                d1, d2 = self.derivative(t, 1), self.derivative(t, 2)
                if d2 <= 0:
                    break
                step = d1 / d2
                t -= step
                if abs(step) < 1e-15 * max(1.0, abs(t)):
                    break
            v = float(self(t))
            if not v <= float(vals[i]):      # Newton left the basin: keep the grid point
                t, v = float(grid[i]), float(vals[i])
            if v < best_v:
                best_t, best_v = t, v
        return best_t, best_v


def equidistant_base(frequencies):
    """The smallest frequency if every frequency is an integer multiple of it, else None."""
    w = np.asarray(frequencies, dtype=float)
    if w.size == 0:
        return None
    ratio = w / w[0]
    return float(w[0]) if np.allclose(ratio, np.round(ratio), rtol=0, atol=1e-8) else None


def frequencies_along(circuit, direction) -> np.ndarray:
    """Frequencies of every expectation value of ``circuit`` along ``direction`` in theta.

    Parameters
    ----------
    circuit : Circuit
    direction : array_like, shape (circuit.n_params,)

    Raises
    ------
    ValueError
        When a moving gate has no finite spectrum (a Hamiltonian gate or one known only by
        its matrix), naming it.
    """
    v = np.asarray(direction, dtype=float)
    sums = np.zeros(1)
    for op in circuit.parametric_operations:
        if op.param is None:
            continue
        c = op.scale * v[op.param]
        if c == 0.0:
            continue
        if op.gate.kind != "generator":
            raise ValueError(f"parameter {op.param} drives {op.gate.name!r} on {op.qubits} of kind "
                             f"{op.gate.kind!r}: it has no finite spectrum, so the cost in it is not "
                             "a trigonometric polynomial of known frequencies")
        ev = np.unique(np.round(np.asarray(op.gate.spectrum, dtype=float), 12))
        sums = (sums[:, None] + c * ev[None, :]).reshape(-1)
        sums = _merge(sums)
        if sums.size > _MAX_SUMS:
            raise ValueError(f"the cost along this direction has more than {_MAX_SUMS} distinct "
                             "eigenvalue sums: too many frequencies to reconstruct")
    return frequencies_of(sums)


def _merge(x):
    x = np.sort(x)
    keep = np.concatenate([[True], np.diff(x) > _FREQ_TOL * np.maximum(1.0, np.abs(x[1:]))])
    return x[keep]


def design(frequencies, t):
    """Design matrix, shape t.shape + (2L+1,): columns ``1, cos(w_l t)..., sin(w_l t)...``."""
    u = np.asarray(t, dtype=float)[..., None] * np.asarray(frequencies, dtype=float)
    return np.concatenate([np.ones(u.shape[:-1] + (1,)), np.cos(u), np.sin(u)], axis=-1)


def sample_points(frequencies, centre=0.0):
    """``(frequencies used, points)``: 2R + 1 points with ``points[0] == centre``.

    Frequencies that are integer multiples of the smallest ``w0`` are replaced by all
    multiples ``w0..R w0`` (R the largest multiple) and sampled at ``centre + 2 pi mu /
    ((2R + 1) w0)``, mu = 0..2R (Wierichs et al. 2022, eq. (29)). Other sets are sampled
    equidistantly at the spacing, among a few candidates, that makes the design matrix best
    conditioned.
    """
    w = np.sort(np.asarray(frequencies, dtype=float).reshape(-1))
    if w.size == 0:
        return w, np.array([float(centre)])
    base = equidistant_base(w)
    if base is not None:
        R = int(round(w[-1] / base))
        w = base * np.arange(1, R + 1)
        mu = np.arange(2 * R + 1)
        return w, centre + 2 * np.pi * mu / ((2 * R + 1) * base)
    R = w.size
    mu = np.arange(2 * R + 1)
    best = None
    for scale in (w[0], w[-1] / R, np.mean(np.diff(np.concatenate([[0.0], w]))), w[-1]):
        t = 2 * np.pi * mu / ((2 * R + 1) * scale)
        cond = np.linalg.cond(design(w, t))
        if best is None or cond < best[0]:
            best = (cond, t)
    return w, centre + best[1]


def fit(frequencies, points, values, errors=None) -> TrigPolynomial:
    """The trigonometric polynomial with ``frequencies`` through ``values`` at ``points``.

    With ``errors`` (standard errors of independent values), the coefficients' standard
    errors follow by linear propagation: ``cov = M+ diag(errors**2) M+^T``.
    """
    w = np.asarray(frequencies, dtype=float).reshape(-1)
    M = design(w, points)
    y = np.asarray(values, dtype=float).reshape(-1)
    if M.shape[0] < M.shape[1]:
        raise ValueError(f"{M.shape[1]} coefficients need at least as many points; got {M.shape[0]}")
    pinv = np.linalg.pinv(M)
    coef = pinv @ y
    L = w.size
    err = {}
    if errors is not None:
        e = np.asarray(errors, dtype=float).reshape(-1)
        se = np.sqrt(np.einsum("ip,p,ip->i", pinv, e ** 2, pinv))
        err = {"a0_error": float(se[0]), "a_error": se[1:L + 1], "b_error": se[L + 1:]}
    return TrigPolynomial(w, coef[0], coef[1:L + 1], coef[L + 1:], **err)
