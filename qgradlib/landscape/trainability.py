"""Trainability diagnostics: gradient variance as circuits grow, and redundant parameters.

`gradient_variance` draws parameters uniformly in ``[0, 2 pi)`` and reports, per circuit
size, the variance of each partial derivative and their mean. A barren plateau is that mean
falling exponentially with the number of qubits (McClean, Boixo, Smelyanskiy, Babbush and
Neven, Nat. Commun. 9, 4812 (2018)); for shallow circuits it does with a global cost and not
with a local one (Cerezo, Sone, Volkoff, Cincio and Coles, Nat. Commun. 12, 1791 (2021)).
The decay is fitted as ``variance ~ C * exp(-rate * size)`` by least squares on the
logarithm, with a confidence interval for ``rate`` from the fit's covariance.

`redundancy` reads overparametrisation at a point from the metric tensor's rank: directions
in theta along which the state does not move are redundant (Larocca, Ju, Garcia-Martin, Coles
and Cerezo, Nat. Comput. Sci. 3, 542 (2023)); the Hessian's spectrum shows the flat
directions of the cost beside them.

The gradients are exact simulations, not device measurements: a device would add shot noise
on top of the variances shown.

Examples
--------
>>> import numpy as np
>>> import qgradlib as qg
>>> c = qg.Circuit(1).h(0).rz(0).rz(0)                 # two RZ in a row: one is redundant
>>> r = qg.landscape.redundancy(c, qg.Observable({"X": 1.0}), np.array([0.2, 0.3]))
>>> r.n_params, r.rank, r.redundant
(2, 1, 1)
"""
from __future__ import annotations

from dataclasses import dataclass
from numbers import Real

import autograd.numpy as anp
import numpy as np
from autograd import grad

from .. import curvature
from ..circuits.circuit import Circuit, check_theta
from ..circuits.observables import Observable
from ..engine.measurement import make_rng
from ..evaluation.expectation import METHODS, expect
from ..evaluation.ledger import Ledger

__all__ = ["GradientVariance", "Redundancy", "gradient_variance", "redundancy", "exponential_fit"]


@dataclass(frozen=True, eq=False)
class GradientVariance:
    """Variances of the partial derivatives over random parameters, per size.

    Attributes
    ----------
    sizes : ndarray of int, shape (S,)
    variance : ndarray, shape (S,)
        Per size, the mean over parameters of each partial derivative's variance.
    per_parameter : tuple of ndarray
        Per size, the variance of each partial derivative (one per parameter).
    samples : int
        Random parameter vectors drawn per size.
    rate : float
        Fitted decay rate: ``variance ~ prefactor * exp(-rate * size)`` (``exp(rate)`` is the
        factor lost per unit of size; 0 means no exponential decay).
    rate_interval : tuple of float
        Confidence interval of ``rate`` at level ``confidence``.
    prefactor : float
    confidence : float
    executions : int
        Circuits a device would have run for these gradients (the ledger's count).

    Examples
    --------
    >>> import qgradlib as qg
    >>> build = lambda n: qg.Circuit(n).ry(0).ry(1).cnot(0, 1)
    >>> gv = qg.landscape.gradient_variance(build, lambda n: qg.Observable({"Z" * n: 1.0}), [2, 3, 4],
    ...                                     samples=20, seed=0)
    >>> len(gv.variance)
    3
    """

    sizes: np.ndarray
    variance: np.ndarray
    per_parameter: tuple
    samples: int
    rate: float
    rate_interval: tuple
    prefactor: float
    confidence: float
    executions: int

    def __repr__(self):
        lo, hi = self.rate_interval
        return (f"GradientVariance(sizes={self.sizes.tolist()}, rate={self.rate:.4g} "
                f"[{lo:.4g}, {hi:.4g}] at {self.confidence:g}, samples={self.samples})")


@dataclass(frozen=True, eq=False)
class Redundancy:
    """Overparametrisation at a point.

    Attributes
    ----------
    n_params : int
    rank : int
        Numerical rank of the metric tensor: eigenvalues above ``tol`` times the largest.
    redundant : int
        ``n_params - rank``: independent directions that leave the state unchanged.
    directions : ndarray, shape (n_params, redundant)
        Orthonormal redundant directions (the metric's null space).
    metric_eigenvalues, hessian_eigenvalues : ndarray, shape (n_params,)
        Ascending.
    tol : float

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> c = qg.Circuit(1).ry(0).rz(0).rz(0)          # two RZ in a row: one redundant direction
    >>> r = qg.landscape.redundancy(c, qg.Observable({"X": 1.0}), np.array([0.3, 0.4, 0.5]))
    >>> r.n_params, r.rank, r.redundant
    (3, 2, 1)
    """

    n_params: int
    rank: int
    redundant: int
    directions: np.ndarray
    metric_eigenvalues: np.ndarray
    hessian_eigenvalues: np.ndarray
    tol: float


def exponential_fit(sizes, variance, confidence=0.95):
    """``(rate, (lo, hi), prefactor)`` of ``variance ~ prefactor * exp(-rate * size)``.

    Ordinary least squares of ``log(variance)`` on ``size``; the interval is the rate's
    Student-t interval with ``S - 2`` degrees of freedom from the fit's covariance.
    """
    from scipy import stats

    x = np.asarray(sizes, dtype=float)
    y = np.log(np.asarray(variance, dtype=float))
    X = np.stack([np.ones_like(x), -x], axis=1)
    coef, *_ = np.linalg.lstsq(X, y, rcond=None)
    dof = x.size - 2
    resid = y - X @ coef
    s2 = float(resid @ resid) / dof
    cov = s2 * np.linalg.inv(X.T @ X)
    half = stats.t.ppf(0.5 + confidence / 2, dof) * np.sqrt(cov[1, 1])
    rate = float(coef[1])
    return rate, (rate - half, rate + half), float(np.exp(coef[0]))


def gradient_variance(builder, observable, sizes, *, samples=200, seed=None, gradient="adjoint",
                      confidence=0.95) -> GradientVariance:
    """Variance of the gradient over uniformly random parameters, as the circuit grows.

    Parameters
    ----------
    builder : callable
        ``builder(size) -> Circuit`` (size: qubits, layers, or any int that grows the circuit).
    observable : Observable or callable
        The cost's observable, or ``observable(size) -> Observable``.
    sizes : sequence of int
        At least three, for the fit and its interval.
    samples : int
        Parameter vectors drawn per size, uniformly in ``[0, 2 pi)``.
    seed : int or numpy.random.Generator, optional
    gradient : {"adjoint", "shift", "difference"}
        How the exact gradients are computed ("shift" for circuits with noise).
    confidence : float in (0, 1)

    Returns
    -------
    GradientVariance

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> def ladder(n):
    ...     c = qg.Circuit(n)
    ...     for q in range(n):
    ...         c.ry(q)
    ...     return c
    >>> zz = lambda n: qg.Observable({"Z" * n: 1.0})     # global: <Z..Z> = prod cos(theta)
    >>> r = qg.landscape.gradient_variance(ladder, zz, [2, 3, 4, 5], samples=400, seed=1)
    >>> bool(abs(r.rate - np.log(2)) < 0.15)               # variance 2**-n exactly
    True
    """
    if not callable(builder):
        raise TypeError(f"builder must be callable as builder(size) -> Circuit; got {type(builder).__name__}")
    try:
        sizes = [int(s) for s in sizes]
    except (TypeError, ValueError):
        raise TypeError(f"sizes must be a sequence of ints; got {sizes!r}") from None
    if len(sizes) < 3 or len(set(sizes)) != len(sizes):
        raise ValueError(f"sizes must hold at least three distinct ints (a fit and its interval); got {sizes}")
    if isinstance(samples, bool) or not isinstance(samples, (int, np.integer)) or samples < 2:
        raise ValueError(f"samples must be an int >= 2; got {samples!r}")
    if gradient not in METHODS:
        raise ValueError(f"gradient must be one of {METHODS}; got {gradient!r}")
    if not isinstance(confidence, Real) or not 0 < confidence < 1:
        raise ValueError(f"confidence must be a number in (0, 1); got {confidence!r}")
    rng = make_rng(seed)
    per, means = [], []
    with Ledger() as book:
        for size in sizes:
            c = builder(size)
            if not isinstance(c, Circuit):
                raise TypeError(f"builder({size}) must return a qgradlib Circuit; got {type(c).__name__}")
            if c.n_params == 0:
                raise ValueError(f"builder({size}) returned a circuit without trainable parameters")
            obs = observable(size) if callable(observable) and not isinstance(observable, Observable) \
                else observable
            if not isinstance(obs, Observable):
                raise TypeError(f"observable must be an Observable or a function of the size returning "
                                f"one; got {type(obs).__name__} for size {size}")
            T = rng.uniform(0.0, 2 * np.pi, size=(int(samples), c.n_params))
            G = grad(lambda X: anp.sum(expect(c, obs, X, gradient=gradient)))(T)
            v = np.var(G, axis=0, ddof=1)
            per.append(v)
            means.append(float(np.mean(v)))
    variance = np.array(means)
    if np.any(variance <= 0):
        raise ValueError("a gradient variance is zero, so no exponential can be fitted: the cost does "
                         f"not depend on the parameters at some size ({dict(zip(sizes, means))})")
    rate, interval, pref = exponential_fit(sizes, variance, confidence)
    return GradientVariance(np.array(sizes), variance, tuple(per), int(samples), rate, interval,
                            pref, float(confidence), book.executions)


def redundancy(circuit, observable, theta, *, tol=1e-8) -> Redundancy:
    """Metric-tensor rank and Hessian spectrum at ``theta``: a redundancy report.

    Parameters
    ----------
    circuit : Circuit
    observable : Observable
    theta : array_like, shape (n_params,)
    tol : float
        Relative tolerance of the rank: metric eigenvalues at most ``tol`` times the largest
        count as zero (the exact metric carries rounding of ~1e-15 relative).

    Returns
    -------
    Redundancy

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> r = qg.landscape.redundancy(qg.Circuit(1).ry(0), qg.Observable({"Z": 1.0}), np.array([0.3]))
    >>> r.rank
    1
    """
    if not isinstance(circuit, Circuit):
        raise TypeError(f"circuit must be a qgradlib Circuit; got {type(circuit).__name__}")
    if not isinstance(tol, Real) or not 0 < tol < 1:
        raise ValueError(f"tol must be a number in (0, 1); got {tol!r}")
    theta = np.asarray(check_theta(circuit, theta), dtype=float)
    if theta.shape != (circuit.n_params,):
        raise ValueError(f"theta must have shape ({circuit.n_params},); got {theta.shape}")
    F = np.asarray(curvature.metric_tensor(circuit, theta), dtype=float)
    ev, vec = np.linalg.eigh(0.5 * (F + F.T))
    top = max(float(ev[-1]), 0.0)
    null = ev <= tol * top if top > 0 else np.ones(ev.size, dtype=bool)
    H = np.asarray(curvature.hessian(circuit, observable, theta).hessian, dtype=float)
    rank = int(np.count_nonzero(~null))
    return Redundancy(circuit.n_params, rank, circuit.n_params - rank, vec[:, null], ev,
                      np.linalg.eigvalsh(0.5 * (H + H.T)), float(tol))
