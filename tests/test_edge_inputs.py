"""Edge inputs that once gave silent wrong results (issue 11): integer, list and nested theta,
finite differences priced per parameter, copies and snapshots of circuits, non-unitary
function gates, steps outside their useful range, very high frequencies, and the smaller
refusals. Every test is named after its case."""
import copy
import warnings

import autograd.numpy as anp
import numpy as np
import pytest
from autograd import elementwise_grad, grad, hessian, jacobian, make_vjp

import qgradlib as qg
from qgradlib import curvature

Z3 = qg.Observable({"Z": 3.0})
ZZ = qg.Observable({"ZZ": 1.0})


def one_qubit():
    return qg.Circuit(1).ry(0)          # <3 Z> = 3 cos(a)   # common practice


def two_qubits():
    return qg.Circuit(2).ry(0).ry(1)    # <ZZ> = cos(a) cos(b)   # common practice


# -- 1. integer, list, tuple and nested-list theta --------------------------------------------
def test_integer_theta_gives_the_float_gradient():
    c = one_qubit()
    g = grad(lambda t: qg.expect(c, Z3, t))(np.array([2]))
    assert np.allclose(g, [-3 * np.sin(2.0)], atol=1e-12)         # d/da 3 cos a   # common practice


@pytest.mark.parametrize("method", ["shift", "adjoint", "difference"])
def test_integer_theta_inside_grad_jacobian_hessian_and_elementwise_grad(method):
    c = one_qubit()
    f = lambda t: qg.expect(c, Z3, t, gradient=method)  # noqa: E731
    tol = 1e-12 if method != "difference" else 1e-6
    assert np.allclose(jacobian(f)(np.array([2])), [-3 * np.sin(2.0)], atol=tol)   # common practice
    if method != "difference":
        assert np.allclose(hessian(f)(np.array([2])), [[-3 * np.cos(2.0)]], atol=tol)
    batch = elementwise_grad(lambda t: qg.expect(c, Z3, t, gradient=method))(np.array([[1], [2]]))
    assert np.allclose(batch[:, 0], -3 * np.sin([1.0, 2.0]), atol=tol)


def test_integer_array_made_inside_autograd_is_refused():
    # autograd's own indexing rule would already have truncated this derivative to [0, 0]
    c = one_qubit()
    with pytest.raises(TypeError, match=r"theta is an integer array .*float array"):
        elementwise_grad(lambda t: qg.expect(c, Z3, t[:, None]))(np.array([1, 2]))


def test_list_theta_gives_the_true_gradient():
    c = two_qubits()
    f = lambda t: qg.expect(c, ZZ, t)  # noqa: E731
    truth = [-np.sin(0.0) * np.cos(1.0), -np.cos(0.0) * np.sin(1.0)]     # common practice
    for theta in ([0.0, 1.0], (0.0, 1.0)):
        assert np.allclose(np.array(grad(f)(theta), dtype=float), truth, atol=1e-12)
    nested = grad(lambda t: anp.sum(qg.expect(c, ZZ, t)))([[0.0, 1.0], [0.5, 0.2]])
    a, b = np.array([0.5, 0.2])
    assert np.allclose(np.array(nested, dtype=float),
                       [truth, [-np.sin(a) * np.cos(b), -np.cos(a) * np.sin(b)]], atol=1e-12)
    # a list built of boxes inside the cost
    g = grad(lambda t: qg.expect(c, ZZ, [t[0], 1.0]))(np.array([0.5, 0.1]))
    assert np.allclose(g, [-np.sin(0.5) * np.cos(1.0), 0.0], atol=1e-12)


def test_list_of_ints_inside_autograd_is_refused_with_a_float_array_hint():
    c = two_qubits()
    with pytest.raises(TypeError, match=r"list of ints .*float array"):
        grad(lambda t: qg.expect(c, ZZ, t))([0, 1])


def test_boolean_theta_is_refused():
    c = two_qubits()
    for theta in ([True, False], np.array([True, False])):
        with pytest.raises(TypeError, match="theta"):
            qg.expect(c, ZZ, theta)
    with pytest.raises(TypeError, match="theta0"):
        qg.optimize.minimize(lambda t: anp.sum(t ** 2), np.array([True]), steps=1)


def _entry_points(c, H, theta):
    """Every public entry point's result at ``theta`` (seeded where random)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return [
            qg.expect(c, H, theta),
            grad(lambda t: qg.expect(c, H, t))(np.asarray(theta, dtype=float)),
            qg.probabilities(c, theta),
            qg.state(c, theta),
            qg.sample(c, theta, shots=20, seed=1),
            qg.estimate(c, H, theta, shots=50, seed=2).value,
            qg.estimate_gradient(c, H, theta, shots=50, seed=2).gradient,
            curvature.hessian(c, H, theta).hessian,
            curvature.derivatives(c, H, theta, order=3).tensor,
            curvature.metric_tensor(c, theta),
            curvature.fisher_information(c, theta),
            qg.check.gradients(c, H, theta, seed=0)["shift"].gradient,
            qg.optimize.minimize_expectation(c, H, theta, steps=2).x,
        ]


def test_integer_list_tuple_and_nested_theta_equal_the_float_result_at_every_entry_point():
    c = two_qubits().cnot(0, 1)
    floats = _entry_points(c, ZZ, np.array([2.0, 1.0]))
    for theta in (np.array([2, 1]), [2, 1], (2, 1), [2.0, 1.0], np.array([2, 1], dtype=np.int32)):
        for got, want in zip(_entry_points(c, ZZ, theta), floats):
            assert np.array_equal(np.asarray(got), np.asarray(want))
    batch = qg.expect(c, ZZ, [[2, 1], [0, 3]])
    assert np.array_equal(batch, qg.expect(c, ZZ, np.array([[2.0, 1.0], [0.0, 3.0]])))


def test_audit_at_integer_theta_differentiates_the_float_point():
    c = one_qubit()
    r = qg.check.gradients(c, Z3, np.array([2]), seed=0)
    assert np.allclose(r.reference, [-3 * np.sin(2.0)], atol=1e-12)        # common practice
    assert np.allclose(r["shift"].gradient, [-3 * np.sin(2.0)], atol=1e-12)
    assert r["autograd-check"].passed and r.ok(1e-6)


# -- 2. finite differences step theta, one trainable parameter at a time ----------------------
def shared_by_six():
    c = qg.Circuit(6).ry(0)
    for q in range(1, 6):
        c.ry(q, param=0)
    return c                             # <Z^6> = cos(a)**6   # common practice


Z6 = qg.Observable({"ZZZZZZ": 1.0})


@pytest.mark.parametrize("stencil, executions", [("central", 3), ("forward", 2)])
def test_difference_prices_one_shared_parameter_as_one_step(stencil, executions):
    c, a = shared_by_six(), 0.4
    with qg.Ledger() as book:
        g = grad(lambda t: qg.expect(c, Z6, t, gradient="difference", stencil=stencil))(np.array([a]))
    # a device steps theta: the value plus 2 (central) or 1 (forward) shifted circuits
    assert book.executions == executions and book.by_purpose["theta[0]"] == executions - 1
    tol = 1e-8 if stencil == "central" else 1e-4
    assert np.allclose(g, [-6 * np.cos(a) ** 5 * np.sin(a)], atol=tol)     # common practice


def test_difference_counts_and_values_with_shared_and_scaled_parameters():
    c = qg.Circuit(2).ry(0).rx(1, param=0, scale=2.0).rz(0, param=0, offset=0.1).ry(1)
    c.crx(0, 1, param=1, scale=-0.5).rx(0, angle=0.3)
    H = qg.Observable({"ZZ": 1.0, "XI": 0.4})
    theta = np.array([0.3, -0.7])
    with qg.Ledger() as book:
        g = grad(lambda t: qg.expect(c, H, t, gradient="difference"))(theta)
    assert book.executions == (1 + 2 * 2) * 2        # 2 parameters, 2 measurement settings
    exact = grad(lambda t: qg.expect(c, H, t, gradient="adjoint"))(theta)
    assert np.allclose(g, exact, atol=1e-8)
    # second derivatives by differences of differences stay right (step 1e-4 for order 2)
    hd = hessian(lambda t: qg.expect(c, H, t, gradient="difference", step=1e-4))(theta)
    assert np.allclose(hd, hessian(lambda t: qg.expect(c, H, t))(theta), atol=1e-5)


def test_audit_prices_finite_differences_per_parameter():
    c = shared_by_six()
    r = qg.check.gradients(c, Z6, np.array([0.4]), seed=0)
    assert r["difference"].executions == 3                 # value + 2, not value + 12
    assert r.ok(1e-6)


# -- 7, 8. copies are independent; a derivative belongs to the circuit its value evaluated -----
@pytest.mark.parametrize("make_copy", [copy.copy, copy.deepcopy, qg.Circuit.copy])
def test_copies_of_a_circuit_are_independent(make_copy):
    c = qg.Circuit(1).ry(0)
    d = make_copy(c)
    d.rx(0)
    assert (len(c), c.n_params, len(d), d.n_params) == (1, 1, 2, 2)
    assert np.isclose(qg.expect(c, Z3, np.array([0.2])), 3 * np.cos(0.2))   # common practice
    fn = qg.Gate.from_function("f", lambda a: qg.gates.RY.matrix(a), 1)     # a lambda inside
    e = copy.deepcopy(qg.Circuit(1).add(fn, 0))
    assert e.operations[0].gate is fn


@pytest.mark.parametrize("method", ["shift", "adjoint", "difference"])
def test_vjp_differentiates_the_circuit_its_forward_pass_evaluated(method):
    c = qg.Circuit(1).ry(0)
    a = 0.7
    vjp, value = make_vjp(lambda t: qg.expect(c, Z3, t, gradient=method))(np.array([a]))
    c.rx(0, param=0)              # the circuit changes after the forward pass
    g = vjp(1.0)
    tol = 1e-12 if method != "difference" else 1e-8
    assert np.isclose(value, 3 * np.cos(a)) and np.allclose(g, [-3 * np.sin(a)], atol=tol)
    # and the changed circuit is evaluated as changed on the next call
    g2 = grad(lambda t: qg.expect(c, Z3, t, gradient=method))(np.array([a]))
    # RY(a) then RX(a) on |0>: <Z> = cos(a)**2, so d/da 3 cos(a)**2 = -3 sin(2a)   # common practice
    assert np.allclose(g2, [-3 * np.sin(2 * a)], atol=1e-6)


def test_snapshot_refuses_to_change():
    c = qg.Circuit(1).ry(0)
    snap = c.snapshot()
    assert c.snapshot() is snap
    with pytest.raises(ValueError, match="snapshot"):
        snap.rx(0)
    c.rx(0)
    assert c.snapshot() is not snap and len(c.snapshot()) == 2
