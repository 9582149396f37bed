"""A stand-in for qgradlib.curvature used by the tests only while that module has not landed.

Once the real module provides metric_tensor and hessian, `install` returns it untouched, so the
same tests then check the real implementation.
"""
import importlib
import sys
import types

import autograd
import numpy as np

import qgradlib as qg


def _metric(circuit, theta, approx=None):
    # Fubini-Study metric Re(<d_i psi|d_j psi> - <d_i psi|psi><psi|d_j psi>) from central
    # differences of the state: independent of the shift rules (full metric; approx ignored)
    h = 1e-5
    theta = np.asarray(theta, dtype=float)
    psi = qg.state(circuit, theta)
    d = np.array([(qg.state(circuit, theta + h * e) - qg.state(circuit, theta - h * e)) / (2 * h)
                  for e in np.eye(theta.size)])
    overlap = d.conj() @ psi
    return (d.conj() @ d.T - np.outer(overlap, overlap.conj())).real


def _hessian(circuit, observable, theta, shots=None, seed=None):
    f = lambda t: qg.expect(circuit, observable, t, shots=shots, seed=seed)  # noqa: E731
    with qg.Ledger() as book:
        value, gradient = autograd.value_and_grad(f)(theta)
        hess = autograd.hessian(f)(theta)
    return types.SimpleNamespace(value=float(value), gradient=np.asarray(gradient),
                                 hessian=np.asarray(hess), executions=book.executions)


def install(monkeypatch):
    """The real qgradlib.curvature if it is there, else this stand-in (patched in for one test)."""
    try:
        real = importlib.import_module("qgradlib.curvature")
        if hasattr(real, "metric_tensor") and hasattr(real, "hessian"):
            return real
    except ImportError:
        pass
    standin = types.ModuleType("qgradlib.curvature")
    standin.metric_tensor = _metric
    standin.hessian = _hessian
    monkeypatch.setitem(sys.modules, "qgradlib.curvature", standin)
    monkeypatch.setattr(qg, "curvature", standin, raising=False)
    return standin
