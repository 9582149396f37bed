"""Gradient audits: every differentiation method side by side on one circuit.

`gradients` computes the gradient of an expectation value by the parameter-shift rules, by
finite differences and by the adjoint method (the exact reference), runs autograd's own
numerical check (`autograd.test_util.check_grads`) on the shift-rule derivative, and reports
for each method its largest deviation from the reference, the device executions and shots it
would take (counted by a `Ledger`; the adjoint method has no device counterpart) and the wall
time it took here. All numbers come from simulation, not from a device.

Examples
--------
>>> import numpy as np
>>> import qgradlib as qg
>>> c = qg.Circuit(2).h(0).ry(1).cnot(0, 1).crx(1, 0)
>>> H = qg.Observable({"ZZ": 1.0, "XI": 0.5})
>>> report = qg.check.gradients(c, H, np.array([0.3, 0.8]), seed=0)
>>> report.ok(1e-6)
True
>>> report["shift"].executions      # (1 value + 2 + 4 shifted circuits) x 2 settings
14
"""
from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np
from autograd import make_vjp, value_and_grad
from autograd.test_util import check_grads, make_numerical_jvp

from ..evaluation.brief import brief, describe
from ..evaluation.expectation import expect
from ..evaluation.ledger import Ledger
from ..engine.measurement import make_rng
from ..circuits.observables import Observable

__all__ = ["MethodAudit", "GradientReport", "gradients", "METHODS"]

METHODS = ("shift", "adjoint", "difference", "autograd-check")


@dataclass(frozen=True)
class MethodAudit:
    """One method's line of the audit.

    Attributes
    ----------
    method : str
    gradient : ndarray
        Shape (n_params,) for one observable, (K, n_params) for K observables. For
        ``"autograd-check"`` it is autograd's own numerical gradient (central differences of
        step 1e-6, one direction per parameter).
    deviation : float
        Largest absolute difference from the adjoint gradient (0.0 for the adjoint itself).
    executions : int or None
        Circuit executions a device would run for value and gradient; None for the adjoint
        method, which needs the simulator's state.
    shots : int
        Shots those executions take (0 for exact simulation).
    seconds : float
        Wall time here, on the simulator.
    passed : bool or None
        For ``"autograd-check"``: whether `check_grads` accepted the shift-rule derivative.
    """

    method: str
    gradient: np.ndarray
    deviation: float
    executions: int | None
    shots: int
    seconds: float
    passed: bool | None = None

    def __repr__(self):
        return describe("MethodAudit", method=self.method, gradient=self.gradient,
                        deviation=self.deviation, executions=self.executions, shots=self.shots,
                        seconds=self.seconds, passed=self.passed)


@dataclass(frozen=True)
class GradientReport:
    """The audit of `gradients`; ``print`` it for the table."""

    methods: tuple
    reference: np.ndarray
    n_qubits: int
    n_params: int
    shots: int | None

    @property
    def max_deviation(self) -> float:
        """Largest deviation of any method from the adjoint reference."""
        return max((m.deviation for m in self.methods), default=0.0)

    def ok(self, tol: float = 1e-6) -> bool:
        """True when every method is within ``tol`` of the reference and autograd's check passed."""
        if not isinstance(tol, (int, float)) or not tol >= 0:
            raise ValueError(f"tol must be a non-negative number; got {tol!r}")
        return self.max_deviation <= tol and all(m.passed is not False for m in self.methods)

    def __repr__(self):
        names = ", ".join(m.method for m in self.methods)
        return (f"GradientReport({self.n_qubits} qubits, {self.n_params} parameters, methods "
                f"{names}; largest deviation from the adjoint {self.max_deviation:.2e}; "
                f"reference={brief(self.reference)}; print() it for the table)")

    def __getitem__(self, method: str) -> MethodAudit:
        for m in self.methods:
            if m.method == method:
                return m
        raise KeyError(f"no method {method!r} in this report; it has {[m.method for m in self.methods]}")

    def __str__(self):
        mode = "exact simulation" if self.shots is None else f"{self.shots} shots per execution"
        plural = lambda k, word: f"{k} {word}" + ("" if k == 1 else "s")  # noqa: E731
        head = (f"gradient audit: {plural(self.n_qubits, 'qubit')}, "
                f"{plural(self.n_params, 'parameter')}, {mode} "
                "(simulated numbers, not device measurements)")
        names = [m.method for m in self.methods]
        width = max(14, *(len(n) + 2 for n in names))
        lines = [head, "", "  d/dtheta".ljust(12) + "".join(n.rjust(width) for n in names)]
        ref = np.atleast_2d(self.reference)
        for k in range(ref.shape[0]):
            for j in range(ref.shape[1]):
                label = f"  [{j}]" if ref.shape[0] == 1 else f"  obs{k}[{j}]"
                cells = "".join(f"{np.atleast_2d(m.gradient)[k, j]:{width}.9f}" for m in self.methods)
                lines.append(label.ljust(12) + cells)
        lines += ["", f"  {'method':<16}{'vs adjoint':>12}{'executions':>12}{'shots':>10}"
                      f"{'time/ms':>10}  check"]
        for m in self.methods:
            dev = "reference" if m.method == "adjoint" else f"{m.deviation:.2e}"
            ex = "sim only" if m.executions is None else str(m.executions)
            check = "" if m.passed is None else ("passed" if m.passed else "FAILED")
            lines.append(f"  {m.method:<16}{dev:>12}{ex:>12}{m.shots:>10}"
                         f"{_milliseconds(m.seconds):>10}  {check}")
        lines.append(f"  largest deviation from the adjoint gradient: {self.max_deviation:.2e}")
        return "\n".join(lines)


def _milliseconds(seconds):
    """Wall time in ms to about three significant digits (timings here jitter more than that)."""
    ms = 1e3 * seconds
    return f"{ms:.0f}" if ms >= 100 else f"{ms:.1f}" if ms >= 10 else f"{ms:.2f}"


def _derivative(f, single):
    """(value, derivative) from one forward pass, as a device would reuse the value run."""
    if single:
        return value_and_grad(f)

    def value_and_jacobian(t):
        vjp, value = make_vjp(f)(t)
        return value, np.stack([vjp(e) for e in np.eye(np.size(value))])
    return value_and_jacobian


def _timed(fn, theta):
    with Ledger() as book:
        t0 = time.perf_counter()
        out = fn(theta)
        seconds = time.perf_counter() - t0
    return out, book, seconds


def _autograd_check(f, theta, rng):
    """check_grads on ``f`` (reverse mode, first order) and autograd's numerical gradient."""
    # check_grads draws its random directions from numpy's global generator: seed it from
    # ours and put the caller's state back afterwards
    saved = np.random.get_state()
    np.random.seed(int(rng.integers(2 ** 32)))
    try:
        check_grads(f, modes=["rev"], order=1)(theta)
        passed = True
    except AssertionError:
        passed = False
    finally:
        np.random.set_state(saved)
    jvp = make_numerical_jvp(f, theta)
    numeric = np.stack([np.asarray(jvp(e)) for e in np.eye(theta.size)], axis=-1)
    return passed, numeric


def gradients(circuit, observable, theta, *, methods=METHODS, shots=None, seed=None, executor=None,
              chunk=None):
    """Audit the gradient of ``expect(circuit, observable, theta)`` across methods.

    Parameters
    ----------
    circuit : Circuit
    observable : Observable or list of Observable
    theta : array_like, shape (n_params,)
    methods : sequence of str
        Any of ``"shift"``, ``"adjoint"``, ``"difference"``, ``"autograd-check"``. The
        adjoint gradient is always computed: it is the reference.
    shots : int, optional
        Shots per execution for the shift and finite-difference estimates (the adjoint
        reference and autograd's check stay exact: neither is defined on shot noise).
    seed : int or numpy.random.Generator, optional
        Randomness for shots and for autograd's random check directions.
    executor : concurrent.futures.Executor or dask.distributed.Client, optional
        Where every method's circuits run (see `qgradlib.evaluation.distribute`); the adjoint method's
        backward pass runs here. Wall times then include the executor's overhead.
    chunk : int, optional
        Circuits per task on ``executor``.

    Returns
    -------
    GradientReport

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> c = qg.Circuit(1).ry(0)
    >>> r = qg.check.gradients(c, qg.Observable({"Z": 1.0}), np.array([0.5]), seed=1)
    >>> bool(abs(r.reference[0] + np.sin(0.5)) < 1e-12), r["autograd-check"].passed
    (True, True)
    """
    if isinstance(methods, str) or not all(isinstance(m, str) for m in methods):
        raise TypeError(f"methods must be a sequence of method names from {METHODS}; got {methods!r}")
    bad = [m for m in methods if m not in METHODS]
    if bad or not methods:
        raise ValueError(f"methods must be a non-empty selection of {METHODS}; got {tuple(methods)!r}")
    single = isinstance(observable, Observable)
    theta = np.asarray(theta, dtype=float) if isinstance(theta, (list, tuple)) else theta
    if not isinstance(theta, np.ndarray) or theta.ndim != 1:
        raise ValueError("theta must be a 1-D array of shape (n_params,); audits take one point, "
                         f"not a batch; got {np.shape(theta)}")
    rng = make_rng(seed)

    def f(method, **kw):
        return lambda t: expect(circuit, observable, t, gradient=method, executor=executor,
                                chunk=chunk, **kw)

    (_, ref), _, ref_seconds = _timed(_derivative(f("adjoint"), single), theta)
    ref = np.asarray(ref, dtype=float)
    rows = []
    for method in methods:
        if method == "adjoint":
            rows.append(MethodAudit("adjoint", ref, 0.0, None, 0, ref_seconds))
            continue
        if method == "autograd-check":
            (passed, numeric), book, seconds = _timed(
                lambda t: _autograd_check(f("shift"), t, rng), theta)
            rows.append(MethodAudit(method, numeric, float(np.max(np.abs(numeric - ref))),
                                    book.executions, book.shots, seconds, passed))
            continue
        kw = {} if shots is None else {"shots": shots, "seed": np.random.default_rng(rng.integers(2 ** 63))}
        (_, g), book, seconds = _timed(_derivative(f(method, **kw), single), theta)
        g = np.asarray(g, dtype=float)
        rows.append(MethodAudit(method, g, float(np.max(np.abs(g - ref))), book.executions,
                                book.shots, seconds))
    return GradientReport(tuple(rows), ref, circuit.n_qubits, circuit.n_params, shots)
