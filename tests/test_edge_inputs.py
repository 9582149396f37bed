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


# -- 6. nested adjoint derivatives: same values as shift rules, shifted Jacobians computed once -
def test_nested_adjoint_derivatives_compute_each_shifted_jacobian_once(monkeypatch):
    from qgradlib.evaluation import adjoint_nested
    c = qg.Circuit(3).ry(0).ry(1).cnot(0, 1).ry(2).cz(1, 2).rx(0).crx(2, 0)
    H = qg.Observable({"ZZI": 1.0, "IXZ": -0.5})
    theta = np.array([0.3, -0.4, 0.8, 0.2, 1.1])
    calls = []
    real = adjoint_nested.adjoint_vjp
    monkeypatch.setattr(adjoint_nested, "adjoint_vjp",
                        lambda phi, spec, g: calls.append(np.shape(phi)[0]) or real(phi, spec, g))
    h = hessian(lambda t: qg.expect(c, H, t, gradient="adjoint"))(theta)
    # exact against shift rules and against the dense reference's curvature plan
    assert np.allclose(h, hessian(lambda t: qg.expect(c, H, t))(theta), atol=1e-12)
    # one batch at the point and one of the shifted points (2 per RY/RX, 4 for the CRX):
    # not one batch of shifted points per entry of the gradient (m = 5 of them)
    assert len(calls) == 2 and calls[1] == 2 * 4 + 4


# -- 9. function gates must be unitary and of one size at every angle --------------------------
def test_function_gate_that_is_not_unitary_at_some_angles_is_refused():
    def stretch(a):                 # unitary at 0, a scaled identity elsewhere
        return np.eye(2) * (1.0 + abs(a))
    g = qg.Gate.from_function("stretch", stretch, 1)
    c = qg.Circuit(1).add(g, 0)
    with pytest.raises(ValueError, match=r"gate 'stretch' .*not unitary at angle 2\.0"):
        qg.expect(c, Z3, np.array([2.0]))
    with pytest.raises(ValueError, match="not unitary"):
        qg.Gate.from_function("scaled", lambda a: 2 * np.eye(2), 1)


def test_function_gate_whose_matrix_changes_size_is_refused():
    g = qg.Gate.from_function("grows", lambda a: np.eye(2 if a < 1 else 4), 1)
    with pytest.raises(ValueError, match=r"gate 'grows'.* 4x4.* 2x2 matrix"):
        qg.expect(qg.Circuit(1).add(g, 0), Z3, np.array([[0.5], [1.5]]))


# -- 10. finite-difference steps outside their useful range ------------------------------------
def ry_function_gate():
    # RY given only by its matrix; <3 Z> = 3 cos(a)   # common practice
    return qg.Gate.from_function("ry_fn", lambda a: qg.gates.RY.matrix(a), 1)


@pytest.mark.parametrize("step", [1e-8, 1e-10, 1e6])
def test_curvature_step_outside_its_useful_range_is_refused(step):
    c = qg.Circuit(1).add(ry_function_gate(), 0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with pytest.raises(ValueError, match=r"step=.* outside the useful range .* order 2"):
            curvature.hessian(c, Z3, np.array([0.4]), step=step)


def test_difference_step_outside_its_useful_range_is_refused():
    c = one_qubit()
    for step in (1e-13, 2.0, 1e6):
        with pytest.raises(ValueError, match=r"step=.* outside the useful range"):
            qg.expect(c, Z3, np.array([0.4]), gradient="difference", step=step)
    # 1e-8 is fine for a gradient, not for a Hessian by differences of differences
    f = lambda t: qg.expect(c, Z3, t, gradient="difference", step=1e-8)  # noqa: E731
    assert np.allclose(grad(f)(np.array([0.4])), [-3 * np.sin(0.4)], atol=1e-6)   # common practice
    with pytest.raises(ValueError, match=r"order 2"):
        hessian(f)(np.array([0.4]))


def test_steps_inside_the_range_give_the_derivatives():
    c = qg.Circuit(1).add(ry_function_gate(), 0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        r = curvature.hessian(c, Z3, np.array([0.4]), step=1e-3)
    assert np.isclose(r.hessian[0, 0], -3 * np.cos(0.4), atol=1e-5)       # common practice
    from qgradlib.rules.stencils import step_range
    lo, hi = step_range(2)
    assert lo == pytest.approx((np.finfo(float).eps / 1e-4) ** 0.5) and hi == 1.0


# -- 11. high frequencies: points merge only when they are equal circuits ----------------------
@pytest.mark.parametrize("w", [1e10, 1e13])
def test_high_frequency_generator_keeps_distinct_points_apart(w):
    # PHASE-like gate diag(0, w) after H: <X> = cos(w a)   # common practice
    c = qg.Circuit(1).h(0).add(qg.Gate.from_generator("fast", np.diag([0.0, w])), 0)
    X = qg.Observable({"X": 1.0})
    a = 0.3 / w
    r = curvature.hessian(c, X, np.array([a]))
    assert np.allclose(r.gradient, [-w * np.sin(w * a)], rtol=1e-9)
    assert np.allclose(r.hessian, [[-w ** 2 * np.cos(w * a)]], rtol=1e-9)
    assert r.executions == 3                       # value and the two shifts   # common practice
    g = grad(lambda t: qg.expect(c, X, t))(np.array([a]))
    assert np.allclose(g, [-w * np.sin(w * a)], rtol=1e-9)


# -- 12. smaller refusals -----------------------------------------------------------------------
def test_shots_beyond_a_64_bit_count_are_refused():
    c = one_qubit()
    with pytest.raises(ValueError, match="shots must be below 2\\*\\*63"):
        qg.expect(c, Z3, np.array([0.1]), shots=2 ** 63)
    with pytest.raises(ValueError, match="shots"):
        qg.sample(c, np.array([0.1]), shots=2 ** 64)


def test_empty_batch_gives_empty_results_of_the_right_shape():
    c = qg.Circuit(2).ry(0).cnot(0, 1)
    E = np.zeros((0, 1))
    assert qg.state(c, E).shape == (0, 4)
    assert qg.density_matrix(c, E).shape == (0, 4, 4)
    assert qg.expect(c, [ZZ, ZZ], E).shape == (0, 2)
    assert qg.probabilities(c, E).shape == (0, 4)
    assert qg.sample(c, E, shots=5, seed=1).shape == (0, 5)
    for method in ("shift", "adjoint", "difference"):
        with qg.Ledger() as book:
            g = grad(lambda t: anp.sum(qg.expect(c, ZZ, t, gradient=method)))(E)
        assert g.shape == (0, 1) and book.executions == 0


@pytest.mark.parametrize("seed, error", [("abc", TypeError), (1.5, TypeError), (-1, ValueError)])
def test_bad_seed_is_refused_with_or_without_shots(seed, error):
    c = one_qubit()
    for shots in (None, 10):
        with pytest.raises(error, match="seed"):
            qg.expect(c, Z3, np.array([0.1]), shots=shots, seed=seed)


def test_memory_true_and_non_string_gradient_are_refused():
    c = one_qubit()
    with pytest.raises(ValueError, match="memory"):
        qg.expect(c, Z3, np.array([0.1]), memory=True)
    with pytest.raises(TypeError, match="gradient must be a string"):
        qg.expect(c, Z3, np.array([0.1]), gradient=np.array(["shift"]))


def test_angles_too_large_to_hold_a_phase_are_refused():
    c = qg.Circuit(1).ry(0).rz(0, param=0, scale=1e3)
    for theta in (np.array([1e300]), np.array([[0.1], [1e10]])):
        with pytest.raises(ValueError, match=r"theta gives a gate angle .* 2\*\*40"):
            qg.expect(c, Z3, theta)
    assert np.isfinite(qg.expect(c, Z3, np.array([1e8])))


# -- 14. nested derivatives through Hamiltonian gates warn when their plans grow -------------
def test_nested_derivatives_through_hamiltonian_gates_warn_with_the_count(monkeypatch):
    from qgradlib.evaluation import expectation
    W = np.array([[0.3, 0.2], [0.2, -0.3]])
    D = qg.Gate.from_hamiltonian("pulse", drift=W, drive="X")
    c = qg.Circuit(2).ry(0).add(D, 1).cnot(0, 1).ry(1)
    H = qg.Observable({"ZZ": 1.0, "XI": 0.3})
    theta = np.array([0.3, 0.5, -0.2])
    monkeypatch.setattr(expectation, "NESTED_PLAN_LIMIT", 50)
    with pytest.warns(qg.NestedPlanWarning, match=r"pulse needs [\d,]+ circuits .*curvature\.derivatives"):
        h = hessian(lambda t: qg.expect(c, H, t))(theta)
    assert np.allclose(h, curvature.hessian(c, H, theta).hessian, atol=1e-9)   # the merged plan


def test_two_term_gates_keep_their_nested_counts_and_do_not_warn(monkeypatch):
    from qgradlib.evaluation import expectation
    monkeypatch.setattr(expectation, "NESTED_PLAN_LIMIT", 1)
    for m in range(1, 5):
        c = qg.Circuit(m)
        for q in range(m):
            c.ry(q)
        H = qg.Observable({"Z" * m: 1.0})
        with warnings.catch_warnings():
            warnings.simplefilter("error", qg.NestedPlanWarning)
            with qg.Ledger() as book:
                hessian(lambda t: qg.expect(c, H, t))(np.linspace(0.1, 0.7, m))
        # value 1, gradient 2m, the gradient's VJP again 2m, and the shifts of the shifts in
        # one merged call: m (i = j, +-pi) + 1 (back to the point) + 2m(m - 1) (i < j):
        # 2m**2 + m + 2   # common practice (two-term rule, shifts +-pi/2, period 2 pi)
        assert book.executions == 2 * m ** 2 + m + 2
