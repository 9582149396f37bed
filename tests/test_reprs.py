"""Every result type prints compactly (a notebook shows a line, not 900 numbers), and its
arrays stay one attribute away."""
import re

import numpy as np
import pytest

import qgradlib as qg
from qgradlib import curvature, models


@pytest.fixture(scope="module")
def problem():
    c = models.layered(5, 5)                 # 30 parameters
    H = models.ising_chain(5)
    return c, H, np.linspace(0.1, 1.0, c.n_params)


def test_hessian_result_of_30_parameters_prints_value_shapes_executions_and_eigenvalue_range(problem):
    # regression (issue 11, case 15): the dataclass repr printed all 900 + 30 numbers
    c, H, theta = problem
    r = curvature.hessian(c, H, theta)
    text = repr(r)
    assert len(text) < 300, text
    ev = np.linalg.eigvalsh(r.hessian)        # numpy's symmetric eigensolver
    assert f"eigenvalues in [{ev.min():.4g}, {ev.max():.4g}]" in text
    assert "shape (30, 30)" in text and f"executions={r.executions}" in text
    assert f"value={r.value:.6g}" in text and "gradient=array (30,)" in text
    assert r.hessian.shape == (30, 30)       # the array itself is one attribute away


def test_derivative_tensors_print_their_shapes(problem):
    c, H, theta = problem
    d = curvature.derivatives(c, H, theta, order=2)
    text = repr(d)
    assert len(text) < 200 and "shapes (30,), (30, 30)" in text and "order=2" in text


def test_estimates_print_compactly(problem):
    c, H, theta = problem
    e = qg.estimate(c, H, theta, shots=100, seed=1)
    assert repr(e) == (f"Estimate(value={e.value:.6g}, standard_error={e.standard_error:.6g}, "
                       f"executions=2, shots=200, settings=2)")
    g = qg.estimate_gradient(c, H, theta, shots=100, seed=1)
    text = repr(g)
    assert len(text) < 250 and "gradient=array (30,) in [" in text
    assert f"in [{g.gradient.min():.4g}, {g.gradient.max():.4g}]" in text


def test_audit_report_and_lines_print_compactly(problem):
    c, H, theta = problem
    rep = qg.check.gradients(c, H, theta, methods=("shift", "adjoint"), seed=0)
    assert len(repr(rep)) < 300 and "30 parameters" in repr(rep) and "print()" in repr(rep)
    assert len(repr(rep["shift"])) < 250
    assert len(str(rep).splitlines()) > 30      # the table itself stays complete


def test_comparison_and_training_result_print_compactly(problem):
    c, H, theta = problem
    cmp = qg.workflows.compare_training(c, H, theta, methods=("adam",), steps=2)
    assert len(repr(cmp)) < 200 and "adam:" in repr(cmp) and ".summary()" in repr(cmp)
    r = cmp.results["adam"]
    text = repr(r)
    assert len(text) < 600 and "x=array (30,)" in text
    assert not re.search(r"(-?\d\.\d+e?-?\d*,? *){7}", text)   # no long runs of numbers
