"""Optimisers for circuit costs, returning `scipy.optimize.OptimizeResult`.

`minimize` trains any autograd-differentiable cost ``cost(theta) -> float`` (expectation
values plus classical terms, for instance). `minimize_expectation` trains one expectation
value and can use the circuit itself: its metric tensor, its shift-rule Hessian, or the
sinusoidal shape of the cost in each parameter.

- ``"gd"``: ``x - rate * g``;
- ``"adam"``: bias-corrected moment estimates (Kingma and Ba, ICLR 2015);
- ``"spsa"``: a random two-evaluation gradient estimate (Spall, IEEE Trans. Autom. Control
  37, 332 (1992));
- ``"natural"`` (needs the circuit): ``x - rate * (F + regulariser I)^-1 g`` with F the
  metric tensor (Stokes, Izaac, Killoran and Carleo, Quantum 4, 269 (2020));
- ``"newton"`` (needs the circuit): ``x - rate * (H + mu I)^-1 g`` with the shift-rule
  Hessian H and Levenberg-Marquardt damping mu;
- ``"icans"`` (needs the circuit and shots): gradient descent whose shots per gradient
  component follow the estimated signal-to-noise (Kübler, Arrasmith, Cincio and Coles,
  Quantum 4, 263 (2020); `qgradlib.train.icans`);
- ``"rotosolve"`` (needs the circuit): the exact minimum in one parameter at a time from three
  evaluations (Ostaszewski, Grant and Benedetti, Quantum 5, 391 (2021)), or 2R + 1 for a
  parameter with R frequencies (Wierichs, Izaac, Wang and Lin, Quantum 6, 677 (2022)).

``METHODS`` lists these names in this order.

Every run is wrapped in a `qgradlib.Ledger`: the result carries the executions and shots a
device would have needed, besides ``x, fun, jac, nit, success, status, message`` and a
``history`` of the cost, the gradient norm and the cumulative executions, one entry per
step (entry 0 is the starting point). The numbers come from simulation; with ``shots`` they
behave statistically like a device's estimates but are not measurements on hardware.

Examples
--------
>>> import numpy as np
>>> import qgradlib as qg
>>> c = qg.Circuit(1).ry(0)
>>> Z = qg.Observable({"Z": 1.0})
>>> r = qg.optimize.minimize_expectation(c, Z, np.array([0.5]), method="rotosolve", steps=1)
>>> round(r.fun, 10), r.nit
(-1.0, 1)
>>> r = qg.optimize.minimize(lambda t: qg.expect(c, Z, t), np.array([0.5]), method="adam",
...                          steps=300, rate=0.1)
>>> bool(abs(r.fun + 1.0) < 1e-6), r.executions > 0
(True, True)
"""
from __future__ import annotations

import inspect
from numbers import Real

import autograd
import numpy as np
from autograd.tracer import getval
from scipy.optimize import OptimizeResult

from . import rotosolve as _roto
from ..circuits import display
from .icans import run as _icans_run
from ..circuits.circuit import Circuit, check_theta
from ..evaluation.expectation import METHODS as _GRADIENTS
from ..evaluation.brief import brief
from ..evaluation.expectation import density_matrix, expect, state
from ..evaluation.ledger import Ledger
from ..engine.density import density_expectations
from ..engine.measure import expectations
from ..engine.measurement import make_rng
from ..shots.estimation import estimate
from ..circuits.observables import Observable
from .progress import progress_bar

__all__ = ["minimize", "minimize_expectation", "METHODS", "TrainingResult"]

METHODS = ("gd", "adam", "spsa", "natural", "newton", "rotosolve", "icans")
_NEEDS_CIRCUIT = ("natural", "newton", "rotosolve", "icans")
# the structures of curvature.metric_tensor (named here: train may not import curvature at load)
_STRUCTURES = ("full", "layerwise", "diagonal")

# Defaults per method. Step sizes suit costs of order one with angles in radians.
_DEFAULTS = {
    "gd": {"rate": 0.1, "tol": 1e-6},
    "adam": {"rate": 0.05, "betas": (0.9, 0.999), "eps": 1e-8, "tol": 1e-6},
    "spsa": {"rate": 0.2, "perturbation": 0.1, "alpha": 0.602, "gamma": 0.101,
             "stability": None},
    "natural": {"rate": 0.05, "regulariser": 1e-3, "metric": "full", "tol": 1e-6},
    "newton": {"rate": 1.0, "damping": 1e-2, "tol": 1e-6},
    "rotosolve": {"tol": 1e-6},
    # rate None: 1 / lipschitz; lipschitz None: the sum of |coefficients| of the observable
    "icans": {"rate": None, "lipschitz": None, "mu": 0.99, "bias": 1e-6, "budget": None},
}
_EXPECTATION_ONLY = {"gd": ("gradient",), "adam": ("gradient",), "natural": ("gradient",)}


class TrainingResult(OptimizeResult):
    """A `scipy.optimize.OptimizeResult` that prints compactly: numbers as they are, arrays
    by shape and range, the history by its length (every entry stays one attribute away).

    Examples
    --------
    >>> import numpy as np
    >>> r = TrainingResult(x=np.zeros(30), fun=-1.5, nit=3, history={"cost": np.zeros(4)})
    >>> print(repr(r))
    TrainingResult(fun=-1.5, x=array (30,) in [0, 0], nit=3, history: cost (4 entries))
    """

    _FIRST = ("message", "success", "fun", "fun_error", "fun_exact", "x", "nit", "executions",
              "circuits", "shots")

    def __repr__(self):
        keys = [k for k in self._FIRST if k in self] + sorted(k for k in self if k not in
                                                              self._FIRST and k != "history")
        parts = [f"{k}={brief(self[k])}" for k in keys]
        if "history" in self:
            h = self["history"]
            n = len(next(iter(h.values()))) if h else 0
            parts.append(f"history: {', '.join(h)} ({n} entries)")
        return "TrainingResult(" + ", ".join(parts) + ")"

    def _repr_pretty_(self, printer, cycle):
        printer.text(repr(self))

    def _repr_html_(self):
        """Final value, steps, cost in executions and shots, and a sparkline of the cost."""
        rows = [[k, self[k]] for k in ("method", "fun", "fun_error", "fun_exact", "nit",
                                       "executions", "circuits", "shots") if k in self]
        if "x" in self:
            rows.insert(1, ["x", brief(self["x"])])
        if "message" in self:
            rows.append(["stopped", self["message"]])
        parts = [display.table(None, rows, digits=8)]
        cost = self.get("history", {}).get("cost")
        if cost is not None and len(cost) > 1:
            parts.append(display.sparkline(cost, label="cost per step"))
        note = "fun_exact is the exact value at x, simulator only" if "fun_exact" in self else None
        return display.display("Training result", *parts, note=note)


# -- public functions ---------------------------------------------------------------------------
def minimize(cost, theta0, *, method="adam", steps=100, callback=None, progress=None, seed=None,
             **options):
    """Minimise an autograd-differentiable ``cost(theta) -> float``.

    Parameters
    ----------
    cost : callable
        ``cost(theta)`` for ``theta`` of shape (m,), written with autograd.numpy (it may call
        `qgradlib.expect`, whose gradient is then the shift rule).
    theta0 : array_like, shape (m,)
    method : {"adam", "gd", "spsa"}
        The methods that need the circuit ("natural", "newton", "rotosolve") are in
        `minimize_expectation`.
    steps : int
        Most updates to make; the run stops earlier when the gradient norm falls to ``tol``.
    callback : callable, optional
        Called after each update, scipy style: ``callback(x)`` with a copy of the new point,
        or, when its signature has a parameter named ``intermediate_result``, with an
        `OptimizeResult` holding ``x, fun, nit, grad_norm``. Raising StopIteration or
        returning True stops the run.
    progress : bool or None
        A tqdm bar with the current cost (a widget in a notebook, text on standard error in a
        terminal). None: on in a Jupyter notebook or when standard error is an interactive
        terminal, off when the environment variable ``CI`` is set and in logs and pipes (see
        `qgradlib.train.progress`).
    seed : int or numpy.random.Generator, optional
        Randomness of the methods that draw random numbers ("spsa"); "gd" and "adam" are
        deterministic and draw none.
    **options
        Per method, with defaults: gd ``rate=0.1, tol=1e-6``; adam ``rate=0.05,
        betas=(0.9, 0.999), eps=1e-8, tol=1e-6``; spsa ``rate=0.2 (a),
        perturbation=0.1 (c), alpha=0.602, gamma=0.101, stability=steps/10 (A)``, with gains
        ``a / (k + 1 + A)**alpha`` and ``c / (k + 1)**gamma``; spsa has no tolerance test.

    Returns
    -------
    TrainingResult
        A `scipy.optimize.OptimizeResult` (printed compactly): ``x, fun, jac, nit, success,
        status, message, method``; ``history`` (dict of arrays "cost", "grad_norm",
        "executions", one entry per point visited, the start first); ``executions``,
        ``circuits`` and ``shots`` from the run's ledger. ``success`` is True when the
        tolerance was met. For spsa ``jac`` and "grad_norm" are the random estimates.

    Examples
    --------
    >>> import numpy as np
    >>> import autograd.numpy as anp
    >>> r = minimize(lambda t: anp.sum((t - 1.0) ** 2), np.zeros(2), method="gd", rate=0.25)
    >>> r.success, np.round(r.x, 6).tolist()
    (True, [1.0, 1.0])
    """
    if not callable(cost):
        raise TypeError(f"cost must be callable as cost(theta) -> float; got {type(cost).__name__}")
    method = _check_method(method)
    if method in _NEEDS_CIRCUIT:
        raise ValueError(f"method={method!r} needs the circuit and observable: use "
                         f"minimize_expectation(circuit, observable, theta0, method={method!r})")
    x0 = _check_x0(theta0)
    steps = _check_steps(steps)
    opts = _options(method, options, steps, expectation=False)
    def checked(t):
        v = cost(t)
        _finite_scalar(v, getval(t))   # before autograd sees a non-scalar
        return v
    vg = autograd.value_and_grad(checked)

    def value_and_grad(x):
        v, g = vg(x)
        return float(v), _finite_vector(g, x.size)

    def values(X):
        return np.array([_finite_scalar(cost(x), x) for x in X])

    problem = _Problem(value_and_grad, values, None)
    return _run(problem, method, x0, steps, opts, callback, progress, make_rng(seed))


def minimize_expectation(circuit, observable, theta0, *, method="adam", shots=None, seed=None,
                         steps=100, callback=None, progress=None, executor=None, chunk=None,
                         timeout=None, **options):
    """Minimise ``expect(circuit, observable, theta)`` over ``theta``.

    Parameters
    ----------
    circuit : Circuit
    observable : Observable
    theta0 : array_like, shape (circuit.n_params,)
    method : {"adam", "gd", "spsa", "natural", "newton", "rotosolve", "icans"}
    shots : int, optional
        Estimate every value with ``shots`` readouts per measurement setting (simulated
        sampling); None for exact values. For "icans" (required): the least shots per
        setting of each shifted circuit, ``s_min``, where every component starts.
    seed : int or numpy.random.Generator, optional
        One generator made from it serves the whole run, so the shots of successive steps
        are independent and the run is reproducible.
    steps : int
        Most updates; for "rotosolve" a step is one sweep through all parameters.
    callback, progress
        As in `minimize`.
    executor, chunk, timeout
        Where the circuits of every value, gradient, metric and Hessian run (see
        `qgradlib.evaluation.distribute`); the numbers and the ledger are those of a serial run.
        ``timeout`` bounds the wait for each evaluation's tasks (a `qgradlib.ChunkError` past it).
    **options
        Those of `minimize`, plus ``gradient="shift"`` ("adjoint", "difference") for gd,
        adam and natural, and: natural ``rate=0.05, regulariser=1e-3,
        metric="full"`` ("layerwise" or "diagonal" for the cheaper structures of
        `qgradlib.curvature.metric_tensor`), ``tol=1e-6``;
        newton ``rate=1.0, damping=1e-2, tol=1e-6``; rotosolve ``tol=1e-6``; icans (the
        paper's symbols in words) ``rate=1/lipschitz`` (alpha, below ``2 / lipschitz``),
        ``lipschitz`` (L; default the sum of the observable's ``|coefficients|``, which bounds
        it for rotation gates), ``mu=0.99`` (moving-average decay), ``bias=1e-6`` (b),
        ``budget=None`` (stop once the ledger's shots reach it).

    Returns
    -------
    TrainingResult
        As in `minimize`, and ``fun_error``. Without shots ``fun`` is exact (``fun_error`` is
        0.0). With shots ``fun`` is a fresh estimate at ``x``, independent of the estimates
        the run steered by (the kept least of those is biased low), with its standard error
        ``fun_error``; its executions and shots are in the ledger's counts ("icans" takes it
        with the largest shots per setting of its last gradient step). ``fun_exact`` is
        then the exact value at ``x``: **simulator only**, a device has no such number (it is
        not counted in the ledger).

    Notes
    -----
    "natural" uses `qgradlib.curvature.metric_tensor` (the Fubini-Study metric, the real part
    of the quantum geometric tensor) and solves ``(F + regulariser I) d = g``. With shots the
    metric is estimated from sampled circuits as a device would (``shots`` per setting of
    every circuit, see `metric_tensor`), and the ledger counts its shots.

    "newton" takes value, gradient and Hessian from one ``qgradlib.curvature.tensors.hessian`` call,
    solves ``(H + mu I) d = -g`` and keeps the step only if the cost falls (one more
    evaluation); ``mu`` starts at ``damping``, is divided by 10 after a kept step and
    multiplied by 10 after a refused one (Levenberg-Marquardt). Where H has a negative
    eigenvalue ``l``, ``mu - l`` is used so that the step is a descent direction.

    "icans" takes a shift-rule gradient with ``s_i`` shots per setting of the shifted circuits
    of parameter ``i`` (`qgradlib.estimate_gradient` with per-parameter shots), steps by
    ``rate * g`` and chooses the next ``s_i`` by the iCANS formula from moving averages of
    the gradient and of its per-shot variance (`qgradlib.train.icans`). It measures no cost
    values: its history's "cost" is the exact cost at each point from the simulator, outside
    the ledger, for the user's reading only. The history's "shots" (every method has it)
    holds the ledger's shots at each entry.

    "rotosolve" visits each parameter in turn and sets it to the exact minimum of the cost
    in it. For a parameter driving one single-frequency gate that is ``A + B cos(w t) + C
    sin(w t)``, found from the cost at ``t`` and ``t +- pi / (2 w)``; a parameter shared by
    several gates, or driving a gate with several frequencies, has R frequencies and is
    reconstructed from 2R + 1 values (`qgradlib.train.rotosolve.coordinate_minimum`;
    Wierichs, Izaac, Wang and Lin, Quantum 6, 677 (2022)). Gates without a finite spectrum
    (Hamiltonian gates) are refused (ValueError). Exact runs reuse the minimum as the next
    parameter's value at ``t`` (2R evaluations per parameter); with shots it is evaluated
    afresh (2R + 1), and the cost shown after a sweep (progress bar, callback, history) is
    the cost measured at the new point, not the fitted minimum (a fit to noisy values is
    biased low). Its "grad_norm" at step k is the norm of the slopes met during sweep
    k + 1 (the point moves between parameters); the last entry is the gradient at ``x``.

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> c = qg.Circuit(2).ry(0).ry(1).cnot(0, 1)
    >>> H = qg.Observable({"ZZ": -1.0, "XI": -0.5})
    >>> r = minimize_expectation(c, H, np.array([0.3, 0.2]), method="rotosolve", steps=20)
    >>> bool(r.fun < -1.11)
    True
    """
    if not isinstance(circuit, Circuit):
        raise TypeError(f"circuit must be a qgradlib Circuit; got {type(circuit).__name__}")
    if not isinstance(observable, Observable):
        raise TypeError(f"observable must be a qgradlib Observable; got {type(observable).__name__}")
    if observable.n_qubits != circuit.n_qubits:
        raise ValueError(f"observable acts on {observable.n_qubits} qubits but the circuit has "
                         f"{circuit.n_qubits}")
    method = _check_method(method)
    if circuit.n_params == 0:
        raise ValueError("the circuit has no trainable parameters: nothing to minimise")
    x0 = np.asarray(getval(check_theta(circuit, theta0)), dtype=float).copy()
    if x0.ndim != 1:
        raise ValueError(f"theta0 must have shape ({circuit.n_params},); got {x0.shape}")
    steps = _check_steps(steps)
    opts = _options(method, options, steps, expectation=True)
    if method == "icans" and shots is None:
        raise ValueError("method='icans' chooses the shots of every gradient component and needs "
                         "shots= as its least shots per shifted circuit (s_min), an int >= 2")
    rng = make_rng(seed)
    gradient = opts.pop("gradient", "shift")
    if gradient not in _GRADIENTS:
        raise ValueError(f"gradient must be one of {_GRADIENTS}; got {gradient!r}")

    where = {"executor": executor, "chunk": chunk, "timeout": timeout}
    # exact values draw nothing: without a generator the calls may take the lean lane
    draws = rng if shots is not None else None

    def cost(t):
        return expect(circuit, observable, t, shots=shots, seed=draws, gradient=gradient, **where)

    vg = autograd.value_and_grad(cost)

    def value_and_grad(x):
        v, g = vg(x)
        return float(v), np.asarray(g, dtype=float)

    def values(X):
        return np.atleast_1d(np.asarray(expect(circuit, observable, np.asarray(X), shots=shots,
                                               seed=draws, **where), dtype=float))

    problem = _Problem(value_and_grad, values, (circuit, observable, shots, rng), where)
    return _run(problem, method, x0, steps, opts, callback, progress, rng)


# -- checks ---------------------------------------------------------------------------------------
def _check_method(method):
    if method not in METHODS:
        raise ValueError(f"method must be one of {METHODS}; got {method!r}")
    return method


def _check_steps(steps):
    if isinstance(steps, (bool, np.bool_)) or not isinstance(steps, (int, np.integer)) or steps < 0:
        raise ValueError(f"steps must be a non-negative int; got {steps!r}")
    return int(steps)


def _check_x0(theta0):
    try:
        x = np.array(getval(theta0), dtype=float)
    except (TypeError, ValueError):
        raise TypeError(f"theta0 must be a 1-D array of real numbers; got {type(theta0).__name__}") from None
    if np.iscomplexobj(np.asarray(getval(theta0))):
        raise TypeError("theta0 must be real")
    if np.asarray(getval(theta0)).dtype == bool:
        raise TypeError("theta0 must hold real numbers, not booleans")
    if x.ndim != 1 or x.size == 0:
        raise ValueError(f"theta0 must be a non-empty 1-D array; got shape {x.shape}")
    if not np.all(np.isfinite(x)):
        raise ValueError("theta0 must be finite (found NaN or inf)")
    return x


def _positive(name, v, allow_zero=False):
    if isinstance(v, bool) or not isinstance(v, Real) or not np.isfinite(v) or v < 0 \
            or (v == 0 and not allow_zero):
        kind = "non-negative" if allow_zero else "positive"
        raise ValueError(f"{name} must be a {kind} finite number; got {v!r}")
    return float(v)


def _options(method, options, steps, expectation):
    allowed = dict(_DEFAULTS[method])
    if expectation:
        allowed.update({k: "shift" for k in _EXPECTATION_ONLY.get(method, ())})
    unknown = sorted(set(options) - set(allowed))
    if unknown:
        raise TypeError(f"method={method!r} takes the options {sorted(allowed)}; "
                        f"got unknown {unknown}")
    o = {**allowed, **options}
    for key in ("rate", "eps", "perturbation", "damping", "lipschitz", "bias", "budget"):
        if key in o and not (method == "icans" and o[key] is None):
            o[key] = _positive(key, o[key])
    if "mu" in o and (isinstance(o["mu"], bool) or not isinstance(o["mu"], Real)
                      or not 0 <= o["mu"] < 1):
        raise ValueError(f"mu must be a number in [0, 1); got {o['mu']!r}")
    for key in ("tol", "regulariser"):
        if key in o:
            o[key] = _positive(key, o[key], allow_zero=True)
    for key in ("alpha", "gamma"):
        if key in o:
            o[key] = _positive(key, o[key])
    if method == "spsa":
        stab = o["stability"]
        o["stability"] = 0.1 * steps if stab is None else _positive("stability", stab, allow_zero=True)
    if "betas" in o:
        b = o["betas"]
        if not isinstance(b, (tuple, list)) or len(b) != 2 or not all(
                isinstance(v, Real) and not isinstance(v, bool) and 0 <= v < 1 for v in b):
            raise ValueError(f"betas must be a pair of numbers in [0, 1), such as (0.9, 0.999); got {b!r}")
        o["betas"] = (float(b[0]), float(b[1]))
    if "metric" in o and (not isinstance(o["metric"], str) or o["metric"] not in _STRUCTURES):
        raise ValueError(f"metric must be one of {_STRUCTURES}; got {o['metric']!r}")
    return o


def _finite_scalar(v, x):
    raw = getval(v)
    if np.ndim(raw) != 0 or np.iscomplexobj(raw):
        raise ValueError(f"cost must return a real scalar; got {type(raw).__name__} of shape "
                         f"{np.shape(raw)}")
    out = float(raw)
    if not np.isfinite(out):
        raise ValueError(f"cost returned {out} at theta={np.round(x, 6).tolist()}")
    return out


def _finite_vector(g, m):
    g = np.asarray(g, dtype=float)
    if g.shape != (m,) or not np.all(np.isfinite(g)):
        raise ValueError(f"the gradient of cost must be a finite array of shape ({m},); "
                         f"got shape {g.shape}")
    return g


# -- the run --------------------------------------------------------------------------------------
class _Problem:
    """What a method may ask: value and gradient, batched values, the circuit (or None)."""

    def __init__(self, value_and_grad, values, circuit_parts, where=None):
        self.value_and_grad = value_and_grad
        self.values = values
        self.circuit_parts = circuit_parts
        self.where = where or {}      # executor=, chunk=, timeout= for the circuit evaluations


class _Trace:
    """History, ledger, progress bar and callback of one run."""

    def __init__(self, book, bar, callback):
        if callback is not None and not callable(callback):
            raise TypeError(f"callback must be callable; got {type(callback).__name__}")
        self.book, self.bar, self.callback = book, bar, callback
        self.wants_result = False
        if callback is not None:
            try:
                self.wants_result = "intermediate_result" in inspect.signature(callback).parameters
            except (TypeError, ValueError):
                pass
        self.cost, self.grad_norm, self.executions, self.shots = [], [], [], []

    def record(self, cost, grad_norm):
        self.cost.append(float(cost))
        self.grad_norm.append(float(grad_norm))
        self.executions.append(self.book.executions)
        self.shots.append(self.book.shots)

    def advance(self, x, fun, nit, grad_norm=None):
        """One step done: tick the bar, call the callback; True asks to stop."""
        self.bar.update(1)
        self.bar.set_postfix(cost=f"{fun:.6g}")
        if self.callback is None:
            return False
        x = np.array(x, dtype=float)
        arg = OptimizeResult(x=x, fun=float(fun), nit=nit, grad_norm=grad_norm) \
            if self.wants_result else x
        try:
            return bool(self.callback(arg))
        except StopIteration:
            return True


def _run(problem, method, x0, steps, opts, callback, progress, rng):
    bar = progress_bar(progress, total=steps, desc=method)
    final, final_shots = {}, None
    with Ledger() as book, bar:
        trace = _Trace(book, bar, callback)
        if method == "rotosolve":
            x, fun, jac, nit, status = _rotosolve(problem, x0, steps, trace, opts)
        elif method == "newton":
            x, fun, jac, nit, status = _newton(problem, x0, steps, trace, opts)
        elif method == "icans":
            x, fun, jac, nit, status, last = _icans(problem, x0, steps, trace, opts)
            # its s_min (often 2) would make the fresh estimate nearly worthless
            final_shots = int(np.max(last))
        else:
            evaluate, update = _first_order_method(method, problem, x0.size, opts, rng)
            x, fun, jac, nit, status = _first_order(evaluate, update, x0, steps, trace,
                                                    opts.get("tol", 0.0))
        if problem.circuit_parts is not None:
            fun, final = _final_value(problem, x, fun, final_shots)
    messages = {0: f"gradient norm fell to tol={opts.get('tol', 0.0):g}",
                1: f"reached steps={steps}",
                2: "stopped by the callback",
                3: f"spent the shot budget={opts.get('budget')}"}
    h = {"cost": np.array(trace.cost), "grad_norm": np.array(trace.grad_norm),
         "executions": np.array(trace.executions, dtype=int),
         "shots": np.array(trace.shots, dtype=int)}
    return TrainingResult(x=x, fun=fun, jac=jac, nit=nit, success=status == 0, status=status,
                          message=messages[status], method=method, history=h,
                          executions=book.executions, circuits=book.circuits, shots=book.shots,
                          **final)


def _final_value(problem, x, fun, shots=None):
    """``fun`` at the returned point and its error fields.

    Under shots the run's own estimate at ``x`` is the one it kept because it looked low
    (Newton accepts a step when the noisy cost falls), so it is biased low: a fresh
    independent estimate replaces it, with its standard error, and the exact value at ``x``
    is added for the simulator's user (computed outside the ledger: no device can run it).
    ``shots`` overrides the run's shots per setting for that estimate.
    """
    circuit, observable, run_shots, rng = problem.circuit_parts
    if run_shots is None:
        return fun, {"fun_error": 0.0}
    shots = run_shots if shots is None else shots
    r = estimate(circuit, observable, x, shots=shots, seed=rng, **problem.where)
    return r.value, {"fun_error": r.standard_error, "fun_exact": _exact_value(circuit, observable, x)}


def _exact_value(circuit, observable, x):
    """The exact expectation at ``x``, from the state itself (no ledger records it)."""
    n = circuit.n_qubits
    if circuit.has_noise:
        return float(density_expectations(density_matrix(circuit, x).reshape(1, -1), n,
                                          (observable,))[0, 0])
    return float(expectations(state(circuit, x)[None], n, (observable,))[0, 0])


def _first_order(evaluate, update, x, steps, trace, tol):
    """The loop of the gradient methods: evaluate, record, test, update."""
    x = x.copy()
    k = 0
    while True:
        v, g = evaluate(x, k)
        gn = float(np.linalg.norm(g))
        trace.record(v, gn)
        if k > 0 and trace.advance(x, v, k, gn):
            return x, v, g, k, 2
        if tol > 0 and gn <= tol:
            return x, v, g, k, 0
        if k == steps:
            return x, v, g, k, 1
        x = x - update(x, v, g, k)
        k += 1


def _first_order_method(method, problem, m, o, rng):
    """``(evaluate(x, k) -> (value, gradient), update(x, v, g, k) -> step to subtract)``."""
    evaluate = lambda x, k: problem.value_and_grad(x)  # noqa: E731
    if method == "gd":
        return evaluate, lambda x, v, g, k: o["rate"] * g
    if method == "adam":
        b1, b2 = o["betas"]
        mom = {"m": np.zeros(m), "v": np.zeros(m)}

        def adam(x, v, g, k):
            mom["m"] = b1 * mom["m"] + (1 - b1) * g
            mom["v"] = b2 * mom["v"] + (1 - b2) * g * g
            mhat = mom["m"] / (1 - b1 ** (k + 1))
            vhat = mom["v"] / (1 - b2 ** (k + 1))
            return o["rate"] * mhat / (np.sqrt(vhat) + o["eps"])
        return evaluate, adam
    if method == "natural":
        from .. import curvature

        circuit, _, shots, gen = problem.circuit_parts

        def natural(x, v, g, k):
            if shots is None:
                F = curvature.metric_tensor(circuit, x, o["metric"], **problem.where)
            else:
                # measured as a device would, with the run's shots (and in its ledger)
                F = curvature.metric_tensor(circuit, x, o["metric"], shots=shots, seed=gen,
                                            **problem.where).value
            F = np.asarray(F, dtype=float)
            A = F + o["regulariser"] * np.eye(m)
            return o["rate"] * np.linalg.lstsq(A, g, rcond=None)[0]
        return evaluate, natural
    if method == "spsa":
        def spsa_evaluate(x, k):
            c_k = o["perturbation"] / (k + 1) ** o["gamma"]
            return spsa_estimate(problem.values, x, c_k, rng)

        def spsa_update(x, v, g, k):
            return o["rate"] / (k + 1 + o["stability"]) ** o["alpha"] * g
        return spsa_evaluate, spsa_update
    raise AssertionError(method)


def spsa_estimate(values, x, c, rng):
    """``(f(x), g)``: the cost at ``x`` and Spall's two-point gradient estimate.

    ``g_i = (f(x + c D) - f(x - c D)) / (2 c D_i)`` with ``D`` of independent signs +-1;
    for a quadratic ``f`` its mean over ``D`` is the gradient exactly.
    """
    delta = rng.choice(np.array([-1.0, 1.0]), size=x.size)
    f0, fp, fm = values(np.stack([x, x + c * delta, x - c * delta]))
    return float(f0), (fp - fm) / (2 * c) / delta


def _newton(problem, x, steps, trace, o):
    from .. import curvature

    circuit, observable, shots, rng = problem.circuit_parts
    x = x.copy()
    mu = o["damping"]
    here = None
    k = 0
    while True:
        if here is None:
            r = curvature.hessian(circuit, observable, x, shots=shots, seed=rng, **problem.where)
            here = (float(r.value), np.asarray(r.gradient, dtype=float),
                    np.asarray(r.hessian, dtype=float))
        v, g, H = here
        gn = float(np.linalg.norm(g))
        trace.record(v, gn)
        if k > 0 and trace.advance(x, v, k, gn):
            return x, v, g, k, 2
        if o["tol"] > 0 and gn <= o["tol"]:
            return x, v, g, k, 0
        if k == steps:
            return x, v, g, k, 1
        w, V = np.linalg.eigh(0.5 * (H + H.T))
        shift = mu + max(0.0, -float(w.min()))
        trial = x - o["rate"] * (V @ ((V.T @ g) / (w + shift)))
        if problem.values(trial[None])[0] < v:
            x, here = trial, None
            mu = max(mu / 10, 1e-8)
        else:
            mu = mu * 10
        k += 1


def _icans(problem, x, steps, trace, o):
    from ..shots.estimation import estimate_gradient

    circuit, observable, shots, rng = problem.circuit_parts
    L = o["lipschitz"]
    if L is None:
        L = float(sum(abs(v) for w, v in observable.terms.items() if set(w) != {"I"}))
        if observable.dense is not None or L == 0:
            raise ValueError("method='icans' needs lipschitz= (a Lipschitz constant of the gradient) "
                             "for this observable")
    rate = 1.0 / L if o["rate"] is None else o["rate"]
    if not rate < 2.0 / L:
        raise ValueError(f"method='icans' needs rate < 2 / lipschitz = {2.0 / L:.6g} (Kübler et al. "
                         f"2020: the expected gain is positive only then); got rate={rate:g}")

    def gradient(x, per_param):
        r = estimate_gradient(circuit, observable, x, shots=per_param, seed=rng, **problem.where)
        return np.asarray(r.gradient, dtype=float), np.asarray(r.standard_error, dtype=float)

    return _icans_run(gradient, lambda x: _exact_value(circuit, observable, x), x, steps, trace,
                      {**o, "rate": rate, "lipschitz": L, "min_shots": shots})


def _rotosolve(problem, x, steps, trace, o):
    from ..rules.shift_rules import rule_for_frequencies

    circuit = problem.circuit_parts[0]
    exact = problem.circuit_parts[2] is None
    freqs = _roto.frequencies_by_parameter(circuit)
    active = [p for p, w in enumerate(freqs) if w is not None]
    x = x.copy()
    e = float(problem.values(x[None])[0])
    status, k = 1, 0
    while k < steps:
        e_start, slopes = e, np.zeros(x.size)
        for p in active:
            if not exact and p != active[0]:
                e = float(problem.values(x[None])[0])
            w = freqs[p]
            if w.size == 1:
                h = np.zeros(x.size)
                h[p] = np.pi / (2 * w[0])
                ep, em = problem.values(np.stack([x + h, x - h]))
                x[p], e, slopes[p] = _roto.sinusoid_minimum(e, ep, em, x[p], w[0])
            else:
                def along(t, p=p):
                    X = np.repeat(x[None], np.size(t), axis=0)
                    X[:, p] = t
                    return problem.values(X)
                x[p], e, slopes[p] = _roto.coordinate_minimum(along, x[p], w, e)
        if not exact:
            # the fitted minimum of noisy values is biased low: show (and start the next
            # sweep from) the cost measured at the new point
            e = float(problem.values(x[None])[0])
        gn = float(np.linalg.norm(slopes))
        trace.record(e_start, gn)
        k += 1
        if trace.advance(x, e, k, gn):
            status = 2
            break
        if o["tol"] > 0 and gn <= o["tol"]:
            status = 0
            break
    # the gradient at the final point by each parameter's shift rule, batched with its value
    rules = {p: rule_for_frequencies(freqs[p]) for p in active}
    rows = [x[None]]
    for p in active:
        shifted = np.repeat(x[None], rules[p].n_terms, axis=0)
        shifted[:, p] += rules[p].shifts
        rows.append(shifted)
    vals = problem.values(np.vstack(rows))
    g = np.zeros(x.size)
    at = 1
    for p in active:
        n = rules[p].n_terms
        g[p] = float(rules[p].coefficients @ vals[at:at + n])
        at += n
    trace.record(vals[0], np.linalg.norm(g))
    return x, float(vals[0]), g, k, status
