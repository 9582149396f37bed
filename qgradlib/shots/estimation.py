"""Finite-shot estimates with standard errors: values and parameter-shift gradients.

`estimate` samples every measurement setting of the observables (see
`qgradlib.engine.measurement`) and reports the mean with its standard error
``sqrt(sum_g var_g / s_g)``, from the sample variance ``var_g`` of the ``s_g`` shots of
setting ``g``. `estimate_gradient` runs the shift plan of every trainable parameter, every
point ``u`` of it as its own independently sampled circuit, so with weights ``w_u`` (the
shift rule's coefficients through the chain rule ``A.T @ dE/dphi``) the gradient is
``sum_u w_u f_u`` and its variance ``sum_u w_u**2 var(f_u)``.

Both are simulations of what a device would report, not device measurements: the shot noise
is drawn from the simulated state's exact probabilities, and noise channels are models.

Examples
--------
>>> import numpy as np
>>> import qgradlib as qg
>>> c = qg.Circuit(1).ry(0)
>>> Z = qg.Observable({"Z": 1.0})
>>> r = qg.estimate(c, Z, np.array([0.4]), shots=1000, seed=3)
>>> r.executions, r.shots
(1, 1000)
>>> bool(abs(r.value - np.cos(0.4)) < 5 * r.standard_error)
True
>>> g = qg.estimate_gradient(c, Z, np.array([0.4]), shots=1000, seed=3)
>>> g.executions                      # two shifted circuits
2
>>> bool(abs(g.gradient[0] + np.sin(0.4)) < 5 * g.standard_error[0])
True
"""
from __future__ import annotations

from collections import Counter
from dataclasses import dataclass

import numpy as np
from autograd.tracer import getval

from ..evaluation import distribute, ledger
from ..evaluation.brief import describe
from ..circuits.circuit import check_theta
from ..evaluation.expectation import _check_circuit, _observables, _spec
from ..rules.plans import first_order_points

__all__ = ["Estimate", "GradientEstimate", "estimate", "estimate_gradient"]


@dataclass(frozen=True)
class Estimate:
    """A finite-shot estimate of expectation value(s).

    Attributes
    ----------
    value : float or ndarray
        Shaped like `expect`'s result.
    standard_error : float or ndarray
        Same shape: the estimated standard deviation of ``value``.
    executions : int
        Circuits times measurement settings.
    shots : int
        Total shots taken.
    settings : int
        Measurement settings per circuit.
    """

    value: object
    standard_error: object
    executions: int
    shots: int
    settings: int

    def __repr__(self):
        return describe("Estimate", value=self.value, standard_error=self.standard_error,
                        executions=self.executions, shots=self.shots, settings=self.settings)


@dataclass(frozen=True)
class GradientEstimate:
    """A finite-shot parameter-shift gradient.

    Attributes
    ----------
    gradient : ndarray
        (n_params,), (K, n_params) for K observables, with a leading (B,) for batched theta.
    standard_error : ndarray
        Same shape.
    executions : int
        Distinct shifted circuits times measurement settings.
    shots : int
        Total shots taken.
    circuits : int
        Distinct shifted circuits run.
    """

    gradient: np.ndarray
    standard_error: np.ndarray
    executions: int
    shots: int
    circuits: int

    def __repr__(self):
        return describe("GradientEstimate", gradient=self.gradient,
                        standard_error=self.standard_error, executions=self.executions,
                        shots=self.shots, circuits=self.circuits)


def _prepare(circuit, observables, theta, shots, seed, allocation, readout, **options):
    _check_circuit(circuit)
    obs, single = _observables(observables, circuit.n_qubits)
    if shots is None or isinstance(shots, (bool, np.bool_)) or not isinstance(shots, (int, np.integer)) \
            or shots < 2:
        raise ValueError(f"shots must be an int >= 2 (a standard error needs a sample variance); got {shots!r}")
    theta = np.asarray(getval(check_theta(circuit, theta)), dtype=float)
    spec = _spec(circuit, "expect", observables=obs, shots=shots, seed=seed,
                 allocation=allocation, readout=readout, **options)
    phi = np.atleast_2d(circuit.angles(theta))
    return spec, single, theta.ndim == 2, phi


def _shape(a, single, batched, axis=1):
    if single:
        a = np.take(a, 0, axis=axis)
    return a if batched else a[0]


def estimate(circuit, observables, theta, *, shots, seed=None, allocation="uniform", readout=None,
             memory=None, executor=None, chunk=None) -> Estimate:
    """Finite-shot value(s) of ``observables`` after ``circuit``, with standard errors.

    Parameters
    ----------
    circuit : Circuit
    observables : Observable or list of Observable
        Several observables share measurement settings and shots.
    theta : array_like, shape (n_params,) or (B, n_params)
    shots : int >= 2
        Mean shots per measurement setting per circuit (total per circuit:
        ``shots * settings``); with ``allocation="uniform"``, exactly ``shots`` each.
    seed : int or numpy.random.Generator, optional
    allocation : {"uniform", "weighted"}
    readout : float or sequence of float in [0, 0.5], optional
        Per-qubit readout flip probabilities applied to the sampled bits.
    memory : int, optional
        Bytes the engine may use for one chunk of a batch.
    executor : concurrent.futures.Executor or dask.distributed.Client, optional
        Where the circuits run, in chunks of ``chunk`` (see `qgradlib.evaluation.distribute`); the same
        seed gives the same numbers as a serial run.
    chunk : int, optional

    Returns
    -------
    Estimate

    Notes
    -----
    Every row of a batched ``theta`` is its own run with its own shots, even where rows
    repeat (`expect` runs repeated rows once).

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> H = qg.Observable({"ZI": 1.0, "IZ": 1.0, "XX": 0.2})
    >>> r = qg.estimate(qg.Circuit(2).ry(0).ry(1), H, np.array([0.3, 0.5]), shots=500, seed=1)
    >>> r.settings, r.executions, r.shots
    (2, 2, 1000)
    """
    spec, single, batched, phi = _prepare(circuit, observables, theta, shots, seed, allocation,
                                          readout, memory_budget=memory, executor=executor,
                                          chunk=chunk)
    P = phi.shape[0]
    ledger.record(P, spec.settings, spec.shots, {"value": P})
    mean, var = distribute.measure_rows(phi, spec, None, errors=True)
    value = _shape(mean, single, batched)
    se = _shape(np.sqrt(var), single, batched)
    if np.ndim(value) == 0:
        value, se = float(value), float(se)
    executions = P * spec.settings
    return Estimate(value, se, executions, executions * spec.shots, spec.settings)


def estimate_gradient(circuit, observables, theta, *, shots, seed=None, allocation="uniform",
                      readout=None, shift=None, splits=1, memory=None, executor=None,
                      chunk=None) -> GradientEstimate:
    """Finite-shot parameter-shift gradient of ``observables`` with standard errors.

    Every trainable gate angle is differentiated by its shift rule (two-term, equidistant,
    general; the stochastic rule for Hamiltonian gates, ``splits`` sampled split points
    each); shared and scaled parameters follow by the chain rule. Noise channels in the
    circuit are allowed: they do not depend on the angles, so the rules stay exact.

    Parameters
    ----------
    circuit, observables, theta, shots, seed, allocation, readout, memory, executor, chunk
        As in `estimate`; ``shots`` is per setting of every shifted circuit.
    shift : float in (0, pi), optional
        Shift of the two-term rule (default pi/2).
    splits : int
        Split points sampled per Hamiltonian gate.

    Returns
    -------
    GradientEstimate

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> c = qg.Circuit(2).ry(0).cnot(0, 1).noise(1, qg.channels.depolarizing(0.05)).ry(1)
    >>> r = qg.estimate_gradient(c, qg.Observable({"ZZ": 1.0}), np.array([0.2, 0.9]),
    ...                          shots=400, seed=0)
    >>> r.gradient.shape, r.circuits, r.shots
    ((2,), 4, 1600)
    """
    spec, single, batched, phi = _prepare(circuit, observables, theta, shots, seed, allocation,
                                          readout, shift=shift, splits=splits, memory_budget=memory,
                                          executor=executor, chunk=chunk)
    P, K, m = phi.shape[0], spec.n_out, circuit.n_params
    points, inserts, coeff, names = first_order_points(circuit, phi, None, spec.columns,
                                                       **spec.rule_options())
    T = coeff.shape[1]
    grad = np.zeros((P, K, m))
    se = np.zeros((P, K, m))
    if T:
        ledger.record(P * T, spec.settings, spec.shots, Counter(names))
        mean, var = distribute.measure_rows(np.asarray(points), spec, inserts, errors=True)
        A, _ = circuit.angle_map()
        weights = A.T @ coeff                      # (m, T): shift coefficients through the chain rule
        mean, var = mean.reshape(P, T, K), var.reshape(P, T, K)
        grad = np.einsum("it,ptk->pki", weights, mean)
        se = np.sqrt(np.einsum("it,ptk->pki", weights ** 2, var))
    executions = P * T * spec.settings
    return GradientEstimate(_shape(grad, single, batched), _shape(se, single, batched),
                            executions, executions * spec.shots, P * T)
