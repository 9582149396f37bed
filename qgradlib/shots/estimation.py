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
from dataclasses import dataclass, replace

import numpy as np
from autograd.tracer import getval

from ..circuits import display
from ..evaluation import distribute, ledger
from ..evaluation.brief import describe
from ..circuits.circuit import check_inputs, check_theta
from ..evaluation.expectation import _check_circuit, _observables, _spec
from ..rules.plans import first_order_points
from ..rules.variance import SPLITS, split_shots

__all__ = ["Estimate", "GradientEstimate", "TensorEstimate", "estimate", "estimate_gradient",
           "check_shots"]


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

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> r = qg.estimate(qg.Circuit(1).h(0), qg.Observable({"X": 1.0}), np.zeros(0), shots=50, seed=0)
    >>> float(r.value), float(r.standard_error), r.shots    # |+> gives X = +1 on every shot
    (1.0, 0.0, 50)
    """

    value: object
    standard_error: object
    executions: int
    shots: int
    settings: int

    def __repr__(self):
        return describe("Estimate", value=self.value, standard_error=self.standard_error,
                        executions=self.executions, shots=self.shots, settings=self.settings)


    def _repr_html_(self):
        """Values with their standard errors as a table, and the price, for notebooks."""
        return _estimate_html("Estimate", "value", self.value, self.standard_error, [
            ["executions", self.executions], ["shots", self.shots],
            ["settings per circuit", self.settings]])


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

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> g = qg.estimate_gradient(qg.Circuit(1).ry(0), qg.Observable({"Z": 1.0}), np.array([0.0]),
    ...                          shots=200, seed=1)
    >>> g.gradient.shape, g.circuits, g.shots              # two shifted circuits
    ((1,), 2, 400)
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

    def _repr_html_(self):
        """Components with their standard errors as a table, and the price, for notebooks."""
        return _estimate_html("Gradient estimate", "d/dtheta", self.gradient, self.standard_error, [
            ["executions", self.executions], ["shots", self.shots],
            ["distinct circuits", self.circuits]])


def _estimate_html(title, what, value, error, price, limit=20):
    value, error = np.asarray(value, dtype=float), np.asarray(error, dtype=float)
    index = list(np.ndindex(value.shape))
    rows = [["" if not i else str(list(i)), value[i], error[i]] for i in index[:limit]]
    note = (f"the first {limit} of {len(index)} entries; " if len(index) > limit else "") + \
        "simulated shot noise, not device measurements"
    return display.display(f"{title} from {price[1][1]} shots",
                           display.table(["entry", what, "standard error"], rows),
                           display.table(None, price), note=note)


@dataclass(frozen=True)
class TensorEstimate:
    """A finite-shot estimate of a tensor (a metric, a Fisher information), with standard
    errors entry by entry.

    Attributes
    ----------
    value : ndarray
        The estimate, shaped like the exact result.
    standard_error : ndarray
        Same shape: the estimated standard deviation of each entry.
    executions : int
        Circuits times measurement settings.
    shots : int
        Total shots taken.
    circuits : int
        Distinct circuits run.

    Examples
    --------
    >>> import numpy as np
    >>> from qgradlib import TensorEstimate
    >>> t = TensorEstimate(np.eye(2) / 4, np.full((2, 2), 0.01), executions=6, shots=600, circuits=3)
    >>> t.value.shape, float(t.standard_error[0, 1]), t.shots
    ((2, 2), 0.01, 600)
    """

    value: np.ndarray
    standard_error: np.ndarray
    executions: int
    shots: int
    circuits: int

    def __repr__(self):
        return describe("TensorEstimate", value=self.value, standard_error=self.standard_error,
                        executions=self.executions, shots=self.shots, circuits=self.circuits)


def check_shots(shots):
    """``shots`` as an int >= 2 (a standard error needs a sample variance), or ValueError."""
    if shots is None or isinstance(shots, (bool, np.bool_)) or not isinstance(shots, (int, np.integer)) \
            or shots < 2:
        raise ValueError(f"shots must be an int >= 2 (a standard error needs a sample variance); got {shots!r}")
    return int(shots)


def _prepare(circuit, observables, theta, shots, seed, allocation, readout, inputs=None, **options):
    _check_circuit(circuit)
    obs, single = _observables(observables, circuit.n_qubits)
    check_shots(shots)
    theta = np.asarray(getval(check_theta(circuit, theta)), dtype=float)
    inputs = check_inputs(circuit, inputs, theta)
    if inputs is not None:
        inputs = np.asarray(getval(inputs), dtype=float)
    spec = _spec(circuit, "expect", observables=obs, shots=shots, seed=seed,
                 allocation=allocation, readout=readout, **options)
    phi = circuit.angles(theta, inputs)
    return spec, single, phi.ndim == 2, np.atleast_2d(phi)


def _shape(a, single, batched, axis=1):
    if single:
        a = np.take(a, 0, axis=axis)
    return a if batched else a[0]


def estimate(circuit, observables, theta, *, shots, inputs=None, seed=None, allocation="uniform",
             readout=None, memory=None, executor=None, chunk=None, timeout=None) -> Estimate:
    """Finite-shot value(s) of ``observables`` after ``circuit``, with standard errors.

    Parameters
    ----------
    circuit : Circuit
    observables : Observable or list of Observable
        Several observables share measurement settings and shots.
    theta : array_like, shape (n_params,) or (B, n_params)
    inputs : array_like, shape (n_inputs,) or (N, n_inputs), optional
        The data point or data set the circuit's ``input=`` gates read (as in `expect`);
        a data set gives a leading axis (N,), each point its own run with its own shots.
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
    chunk, timeout : optional
        Circuits per task on ``executor``, and seconds to wait for the tasks of one batch
        (as in `qgradlib.expect`).

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
                                          readout, inputs, memory_budget=memory, executor=executor,
                                          chunk=chunk, timeout=timeout)
    P = phi.shape[0]
    ledger.record(P, spec.settings, spec.shots, {"value": P})
    mean, var = distribute.measure_rows(phi, spec, None, errors=True)
    value = _shape(mean, single, batched)
    se = _shape(np.sqrt(var), single, batched)
    if np.ndim(value) == 0:
        value, se = float(value), float(se)
    executions = P * spec.settings
    return Estimate(value, se, executions, executions * spec.shots, spec.settings)


def estimate_gradient(circuit, observables, theta, *, shots, inputs=None, seed=None,
                      allocation="uniform", readout=None, shift=None, splits=1, memory=None,
                      executor=None, chunk=None, timeout=None, rule="default",
                      term_shots="even") -> GradientEstimate:
    """Finite-shot parameter-shift gradient of ``observables`` with standard errors.

    Every trainable gate angle is differentiated by its shift rule (two-term, equidistant,
    general; the stochastic rule for Hamiltonian gates, ``splits`` sampled split points
    each); shared and scaled parameters follow by the chain rule. Noise channels in the
    circuit are allowed: they do not depend on the angles, so the rules stay exact.

    Parameters
    ----------
    circuit, observables, theta, inputs, seed, allocation, readout, memory, executor, chunk,
    timeout
        As in `estimate`. With a data set
        ``inputs`` the gradient over the weights is per data point, (N, n_params); the
        feature angles are never shifted.
    shots : int >= 2, or array of int >= 2 with shape (n_params,)
        Shots per setting of every shifted circuit; or, per parameter, the shots of the
        shifted circuits of its gates (as an adaptive optimiser asks for).
    shift : float in (0, pi), optional
        Shift of the two-term rule (default pi/2).
    splits : int
        Split points sampled per Hamiltonian gate.
    rule : {"default", "least-variance"}
        "least-variance": each generator gate's shift rule is the exact rule with the least
        estimator-variance bound for the ``term_shots`` split among those available for its
        frequencies (`qgradlib.rules.variance`; Wierichs, Izaac, Wang and Lin, Quantum 6, 677
        (2022)); for one frequency that is the two-term rule at pi/2.
    term_shots : {"even", "proportional"}
        How the shots are split over the shifted circuits. "even": ``shots`` per setting of
        each. "proportional": each gate angle's rule keeps the total it would have had
        (``shots`` times its number of terms) and splits it over its terms in proportion to
        ``|coefficient|``, at least 2 each: the split that minimises the rule's variance when
        every term's single-shot variance is the same (the bound ``||O||**2``). The ledger
        counts the same shots as with "even"; two-term rules, whose coefficients are equal
        in size, are unchanged.

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

    A controlled rotation's four-term rule has unequal coefficients: shots in proportion to
    them lower the variance at the same total.

    >>> c = qg.Circuit(2).h(0).crx(0, 1)
    >>> even = qg.estimate_gradient(c, qg.Observable({"IY": 1.0}), np.array([0.8]), shots=500, seed=1)
    >>> frugal = qg.estimate_gradient(c, qg.Observable({"IY": 1.0}), np.array([0.8]), shots=500,
    ...                               seed=1, rule="least-variance", term_shots="proportional")
    >>> even.shots == frugal.shots, bool(frugal.standard_error[0] < even.standard_error[0])
    (True, True)
    """
    if rule not in ("default", "least-variance"):
        raise ValueError(f"rule must be 'default' or 'least-variance'; got {rule!r}")
    if term_shots not in SPLITS:
        raise ValueError(f"term_shots must be one of {SPLITS}; got {term_shots!r}")
    per_param = None
    if np.ndim(shots) == 1:
        per_param = _per_parameter_shots(shots, circuit.n_params)
        shots = int(per_param.max())
    spec, single, batched, phi = _prepare(circuit, observables, theta, shots, seed, allocation,
                                          readout, inputs, shift=shift, splits=splits,
                                          memory_budget=memory, executor=executor, chunk=chunk,
                                          timeout=timeout)
    P, K, m = phi.shape[0], spec.n_out, circuit.n_params
    choose = term_shots if rule == "least-variance" else None
    points, inserts, coeff, names = first_order_points(circuit, phi, None, spec.columns,
                                                       least_variance=choose, **spec.rule_options())
    T = coeff.shape[1]
    grad = np.zeros((P, K, m))
    se = np.zeros((P, K, m))
    taken = 0
    if T:
        A, _ = circuit.angle_map()
        weights = A.T @ coeff                      # (m, T): shift coefficients through the chain rule
        if term_shots == "even" and per_param is None:
            ledger.record(P * T, spec.settings, spec.shots, Counter(names))
            mean, var = distribute.measure_rows(np.asarray(points), spec, inserts, errors=True)
            taken = P * T * spec.shots
        else:
            per_term = _per_term(coeff, A, spec.shots if per_param is None else per_param,
                                 term_shots)
            mean, var = _measure_split(np.asarray(points), inserts, names, spec, per_term, P)
            taken = P * int(per_term.sum())
        mean, var = mean.reshape(P, T, K), var.reshape(P, T, K)
        grad = np.einsum("it,ptk->pki", weights, mean)
        se = np.sqrt(np.einsum("it,ptk->pki", weights ** 2, var))
    executions = P * T * spec.settings
    return GradientEstimate(_shape(grad, single, batched), _shape(se, single, batched),
                            executions, taken * spec.settings, P * T)


def _per_parameter_shots(shots, m):
    try:
        n = np.asarray(shots)
        ok = n.shape == (m,) and n.dtype.kind in "iu" and np.all(n >= 2)
    except (TypeError, ValueError):
        ok = False
    if not ok:
        raise ValueError(f"shots must be an int >= 2 or one int >= 2 per parameter (shape ({m},)); "
                         f"got {shots!r}")
    return n.astype(int)


def _per_term(coeff, A, shots, split):
    """Shots per term. Each term shifts one gate angle, driven by one parameter whose shots
    (``shots``: an int, or one per parameter) it takes; with ``split="proportional"`` each
    gate angle's terms share their total in proportion to ``|coefficient|``."""
    column = np.argmax(np.abs(coeff), axis=0)
    param = np.argmax(np.abs(A), axis=1)              # the parameter of each gate angle
    base = np.broadcast_to(np.asarray(shots, dtype=int), (A.shape[1],))
    out = np.zeros(coeff.shape[1], dtype=int)
    for j in np.unique(column):
        terms = np.flatnonzero(column == j)
        n = int(base[param[j]])
        out[terms] = n if split == "even" else split_shots(coeff[j, terms], n * terms.size)
    return out


def _measure_split(points, inserts, names, spec, per_term, P):
    """Means and variances of the rows of ``points`` (P*T, row-major) with ``per_term[t]``
    shots per setting on term t: one sampled batch per distinct shot count."""
    T = per_term.size
    mean = var = None
    for n in np.unique(per_term):
        terms = np.flatnonzero(per_term == n)
        rows = (np.arange(P)[:, None] * T + terms[None, :]).reshape(-1)
        ledger.record(rows.size, spec.settings, int(n), Counter(names[r] for r in rows))
        sub = None if inserts is None else [inserts[r] for r in rows]
        mu, v = distribute.measure_rows(points[rows], replace(spec, shots=int(n)), sub,
                                        errors=True)
        if mean is None:
            mean, var = np.zeros((P * T,) + mu.shape[1:]), np.zeros((P * T,) + v.shape[1:])
        mean[rows], var[rows] = mu, v
    return mean, var
