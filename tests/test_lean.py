"""The lean lane of exact small-circuit calls (`qgradlib.evaluation.lean`) changes only speed.

After a first call has gone the general way, later calls with the same circuit, observables
and options take the lane: their values and adjoint gradients are compared with the general
engine (``fuse=False``, which never takes the lane) to 1e-12, with the dense simulator of
tests/reference (numpy.kron of every gate's matrix, generator gates by scipy.linalg.expm,
derivatives by scipy.linalg.expm_frechet) and with autograd's numerical check
(`autograd.test_util.check_grads`). Ledger counts, nested and forward-mode derivatives, and
the refusal of bad input must stay those of the general path.
"""
import numpy as np
import pytest
from autograd import grad, hessian, jacobian, make_jvp
from autograd.test_util import check_grads

import qgradlib as qg
from qgradlib.engine import memory, small
from qgradlib.evaluation import lean
from derivative_cases import rotation_layers
from reference import circuit_state, dense_expectation, observable_dense, theta_gradient


def _circuit(n):
    """Shared and scaled parameters, fixed angles, blocks of single-qubit gates, two-qubit
    generator gates and fixed entanglers."""
    c = qg.Circuit(n)
    for q in range(n):
        c.ry(q)
    for q in range(n):
        c.rx(q, param=q, scale=-0.5, offset=0.2)        # shares theta[q]
    for q in range(n - 1):
        c.cz(q, q + 1)
    c.rz(0, angle=0.7)
    c.crx(0, n - 1)
    c.h(n - 1)
    for q in range(n):
        c.rz(q)
    c.ryy(0, 1)
    return c


def _obs(n):
    return [qg.Observable({"Z" + "I" * (n - 2) + "Z": 1.0, "X" + "I" * (n - 1): 0.5}),
            qg.Observable({"Y" * n: -0.3, "I" * (n - 1) + "X": 0.8})]


def _lane_hit(c):
    return bool(c.snapshot().__dict__.get("_memo_lanes"))


@pytest.mark.parametrize("n", [2, 4, 6, 7])
def test_lane_equals_dense_reference_and_general_engine(n):
    c = _circuit(n)
    H, K = _obs(n)
    theta = np.random.default_rng(n).uniform(-3, 3, size=c.n_params)
    f = lambda t: qg.expect(c, H, t, gradient="adjoint")  # noqa: E731
    first = grad(f)(theta)
    assert _lane_hit(c)                      # the general call kept its lane
    g = grad(f)(theta)
    v = f(theta)
    general_v = qg.expect(c, H, theta, fuse=False)
    general_g = grad(lambda t: qg.expect(c, H, t, gradient="adjoint", fuse=False))(theta)
    assert abs(v - general_v) <= 1e-12 and np.max(np.abs(g - general_g)) <= 1e-12
    assert np.max(np.abs(first - g)) <= 1e-12
    # reference: the dense simulator of tests/reference (scipy.linalg.expm-built gates)
    M = observable_dense(H.terms, n)
    assert abs(v - dense_expectation(circuit_state(c, theta), M)) <= 1e-12
    assert np.max(np.abs(g - theta_gradient(c, theta, M))) <= 1e-11
    # two observables: values (2,) and the Jacobian (2, m)
    both = lambda t: qg.expect(c, [H, K], t, gradient="adjoint")  # noqa: E731
    jacobian(both)(theta)
    J = jacobian(both)(theta)
    MK = observable_dense(K.terms, n)
    assert np.max(np.abs(J[1] - theta_gradient(c, theta, MK))) <= 1e-11
    assert np.max(np.abs(both(theta) - qg.expect(c, [H, K], theta, fuse=False))) <= 1e-12


@pytest.mark.parametrize("n", [4, 11, 12])
def test_lane_gradient_passes_autograds_numerical_check(n):
    c = _circuit(n)
    H = _obs(n)[0]
    theta = np.random.default_rng(1).normal(size=c.n_params)
    f = lambda t: qg.expect(c, H, t, gradient="adjoint")  # noqa: E731
    f(theta)
    # reference: autograd.test_util.check_grads (finite differences of the values)
    check_grads(f, modes=["rev"], order=1)(theta)
    assert _lane_hit(c)
    general = grad(lambda t: qg.expect(c, H, t, gradient="adjoint", fuse=False))(theta)
    assert np.max(np.abs(grad(f)(theta) - general)) <= 1e-12


def test_lane_counts_what_the_general_path_counts():
    c = _circuit(3)
    H = _obs(3)[0]
    theta = np.linspace(0.1, 0.9, c.n_params)
    f = lambda t: qg.expect(c, H, t, gradient="adjoint")  # noqa: E731
    with qg.Ledger() as general:
        grad(f)(theta)
    assert _lane_hit(c)
    with qg.Ledger() as laned:
        grad(f)(theta)
        f(theta)
    # common practice: the adjoint method runs the circuit once; the value call once more
    assert general.circuits == 1 and laned.circuits == 2
    assert laned.shots == general.shots == 0
    with qg.Ledger() as words:
        qg.expect(c, [H, _obs(3)[1]], theta)
        qg.expect(c, [H, _obs(3)[1]], theta)
    assert words.circuits == 2


def test_nested_and_forward_mode_derivatives_take_the_general_path():
    c = qg.Circuit(2).ry(0).rx(1).cz(0, 1)
    Z = qg.Observable({"ZZ": 1.0})
    theta = np.array([0.3, -0.7])
    f = lambda t: qg.expect(c, Z, t, gradient="adjoint")  # noqa: E731
    grad(f)(theta)
    assert _lane_hit(c)
    # from memory: <ZZ> = cos(a) cos(b) for RY(a) on 0 and RX(b) on 1 (CZ commutes with ZZ);
    # checked against the dense reference too
    a, b = theta
    h = hessian(f)(theta)
    want = np.array([[-np.cos(a) * np.cos(b), np.sin(a) * np.sin(b)],
                     [np.sin(a) * np.sin(b), -np.cos(a) * np.cos(b)]])
    np.testing.assert_allclose(h, want, atol=1e-12)
    assert np.isclose(f(theta), dense_expectation(circuit_state(c, theta),
                                                  observable_dense(Z.terms, 2)), atol=1e-12)
    _, tangent = make_jvp(f)(theta)(np.array([1.0, 0.0]))
    assert np.isclose(tangent, -np.sin(a) * np.cos(b), atol=1e-12)


def test_shift_gradient_still_differentiates_by_shifts():
    c = qg.Circuit(2).ry(0).cnot(0, 1).ry(1)
    Z = qg.Observable({"ZI": 1.0})
    theta = np.array([0.4, 0.9])
    qg.expect(c, Z, theta)
    assert _lane_hit(c)               # plain values take the lane whatever the gradient
    with qg.Ledger() as book:
        g = grad(lambda t: qg.expect(c, Z, t))(theta)
    # common practice: two-term rule, 2 circuits per parameter plus the value
    assert book.circuits == 2 * 2 + 1
    np.testing.assert_allclose(g, [-np.sin(0.4), 0.0], atol=1e-12)


@pytest.mark.parametrize("bad, error, match", [
    (np.array([0.1, np.nan]), ValueError, "finite"),
    (np.array([0.1]), ValueError, r"shape \(2,\)"),
    (np.array([0.1, 2.0 ** 41]), ValueError, "2\\*\\*40"),
    (np.array([True, False]), TypeError, "booleans|numeric"),
    ("ab", TypeError, "theta"),
])
def test_bad_theta_is_refused_after_the_lane_exists(bad, error, match):
    c = qg.Circuit(2).ry(0).cnot(0, 1).ry(1)
    Z = qg.Observable({"ZZ": 1.0})
    qg.expect(c, Z, np.array([0.1, 0.2]), gradient="adjoint")
    assert _lane_hit(c)
    with pytest.raises(error, match=match):
        qg.expect(c, Z, bad, gradient="adjoint")


def test_lists_and_integer_thetas_give_the_general_answers():
    c = qg.Circuit(2).ry(0).cnot(0, 1).ry(1)
    Z = qg.Observable({"ZZ": 1.0})
    qg.expect(c, Z, np.array([0.1, 0.2]))
    want = qg.expect(c, Z, np.array([1.0, 2.0]), fuse=False)
    assert abs(qg.expect(c, Z, [1, 2]) - want) <= 1e-12
    assert abs(qg.expect(c, Z, np.array([1, 2])) - want) <= 1e-12
    g = grad(lambda t: qg.expect(c, Z, t, gradient="adjoint"))([0.1, 0.2])
    assert isinstance(g, list) and len(g) == 2


def test_memory_guard_still_refuses_on_the_lane(monkeypatch):
    c = qg.Circuit(3).ry(0).ry(1)
    Z = qg.Observable({"ZII": 1.0})
    f = lambda t: qg.expect(c, Z, t, gradient="adjoint")  # noqa: E731
    grad(f)(np.array([0.1, 0.2]))
    assert _lane_hit(c)
    monkeypatch.setattr(memory, "available_bytes", lambda: 1000)
    monkeypatch.setattr(memory, "_recent", [0.0, -1, None])
    with pytest.raises(memory.StateTooLarge, match="evaluating 1 circuit"):
        f(np.array([0.1, 0.2]))


def test_a_grown_circuit_gets_a_new_lane():
    c = qg.Circuit(1).ry(0)
    Z = qg.Observable({"Z": 1.0})
    f = lambda t: qg.expect(c, Z, t, gradient="adjoint")  # noqa: E731
    f(np.array([0.4]))
    f(np.array([0.4]))
    c.rx(0, angle=np.pi)
    # common practice: RX(pi) after RY(a) flips the sign of <Z>: -cos(a)
    assert np.isclose(f(np.array([0.4])), -np.cos(0.4), atol=1e-12)
    assert np.isclose(grad(f)(np.array([0.4]))[0], np.sin(0.4), atol=1e-12)


def test_lane_declines_calls_it_does_not_cover():
    c = qg.Circuit(2).ry(0).cnot(0, 1).ry(1)
    Z = qg.Observable({"ZZ": 1.0})
    spec_like = qg.Observable.from_matrix(np.diag([1.0, -1.0, -1.0, 1.0]))
    theta = np.array([0.3, 0.5])
    qg.expect(c, spec_like, theta)
    assert not _lane_hit(c)                      # a dense part: the general readout
    noisy = qg.Circuit(1).ry(0).noise(0, qg.channels.dephasing(0.1))
    qg.expect(noisy, qg.Observable({"Z": 1.0}), np.array([0.2]))
    assert not _lane_hit(noisy)
    qg.expect(c, Z, theta, precision="single")
    assert not _lane_hit(c)


def test_blocks_of_single_qubit_gates_are_one_step():
    c = qg.Circuit(3)
    for q in range(3):
        c.ry(q)
    c.cz(0, 1)
    c.rx(2).rx(2)                   # the same qubit twice: no block
    comp = small.compiled(c)
    codes = [s[0] for s in comp.steps]
    assert codes.count(small._BLOCK) == 1 and codes.count(small._ONE) == 2
    assert lean.LANE_QUBITS == small.SMALL_QUBITS


@pytest.mark.parametrize("n", [3, 6])
def test_shift_lane_differentiates_by_the_general_paths_plan(n):
    c = qg.Circuit(n)
    for layer in range(3):
        for q in range(n):
            (c.ry if (q + layer) % 2 else c.rx)(q)
        for q in range(n - 1):
            c.cz(q, q + 1)
    c.rz(0, param=0, scale=2.0)                 # a parameter read by two gates
    H = _obs(n)[0]
    theta = np.random.default_rng(n).uniform(-3, 3, size=c.n_params)
    f = lambda t: qg.expect(c, H, t)  # noqa: E731
    with qg.Ledger() as general:
        first = grad(f)(theta)
    assert _lane_hit(c)
    with qg.Ledger() as laned:
        g = grad(f)(theta)
    # common practice: two-term rule, 2 circuits per gate angle plus the value; the lane
    # counts what the general path counts
    assert laned.circuits == general.circuits == 2 * len(c.parametric_operations) + 1
    assert laned.by_purpose == general.by_purpose
    assert np.max(np.abs(g - first)) <= 1e-12
    # reference: the dense simulator of tests/reference (scipy.linalg.expm_frechet derivatives)
    assert np.max(np.abs(g - theta_gradient(c, theta, observable_dense(H.terms, n)))) <= 1e-11
    # reference: autograd.test_util.check_grads, to second order (the nested derivative
    # leaves the lane for the general path)
    check_grads(f, modes=["rev"], order=2)(theta)
    J = jacobian(lambda t: qg.expect(c, _obs(n), t))
    J(theta)
    assert np.allclose(J(theta)[0], g, atol=1e-12)


def test_a_nan_in_a_parameter_no_gate_reads_is_refused_after_the_lane_exists():
    # parameter 1 is read only with a zero scale: the lane does not count on the angle check
    # for it (its input check looks at every entry)
    c = qg.Circuit(2).ry(0).cnot(0, 1).ry(1, scale=0.0)
    Z = qg.Observable({"ZZ": 1.0})
    qg.expect(c, Z, np.array([0.1, 0.2]), gradient="adjoint")
    assert _lane_hit(c)
    assert not list(c.snapshot().__dict__["_memo_lanes"].values())[0].covered
    for bad in (np.array([0.1, np.nan]), np.array([0.1, np.inf])):
        with pytest.raises(ValueError, match="finite"):
            qg.expect(c, Z, bad, gradient="adjoint")


def test_shift_lane_takes_the_memoised_plan_and_falls_back_where_there_is_none(monkeypatch):
    c = qg.Circuit(4)
    for q in range(4):
        c.ry(q)
    c.cnot(0, 1).cnot(2, 3)
    for q in range(4):
        c.rx(q)
    H = _obs(4)[0]
    theta = np.linspace(-1.1, 1.4, c.n_params)
    f = lambda t: qg.expect(c, H, t)  # noqa: E731
    grad(f)(theta)
    # the lane's shifts lay out no plan: the memoised one serves
    from qgradlib.evaluation import expectation

    def no_layout(*args, **kwargs):
        raise AssertionError("the plan was laid out again")
    with monkeypatch.context() as m:
        m.setattr(expectation, "first_order_points", no_layout)
        g = grad(f)(theta)
    # reference: the dense simulator of tests/reference (scipy.linalg.expm_frechet derivatives)
    assert np.max(np.abs(g - theta_gradient(c, theta, observable_dense(H.terms, 4)))) <= 1e-11
    # a gate known only through its matrices has no fixed plan: the general path's VJP
    # (finite differences for it, with its warning), the same answer as without the lane
    rot = qg.Gate.from_function("turn", lambda a: np.array([[np.cos(a / 2), -np.sin(a / 2)],
                                                            [np.sin(a / 2), np.cos(a / 2)]]), 1)
    d = qg.Circuit(2).ry(0).add(rot, (1,)).cz(0, 1).ry(1)
    K = qg.Observable({"ZZ": 1.0, "XI": 0.4})
    t = np.array([0.3, -0.6, 0.9])
    fd = lambda x: qg.expect(d, K, x)  # noqa: E731
    with pytest.warns(UserWarning):
        first = grad(fd)(t)
    with pytest.warns(UserWarning):
        again = grad(fd)(t)
    assert np.array_equal(first, again)
    # reference: the dense simulator of tests/reference on the same circuit with RY in its
    # place (the function is RY's matrix); central differences of step ~1e-7 leave ~1e-8
    same = qg.Circuit(2).ry(0).ry(1).cz(0, 1).ry(1)
    assert np.max(np.abs(again - theta_gradient(same, t, observable_dense(K.terms, 2)))) <= 1e-6


@pytest.mark.parametrize("n", [3, 6])
def test_rows_that_leave_one_point_in_one_column_take_the_growing_batch(n, monkeypatch):
    # a rotosolve sweep's pair and a few more batches: values against the dense simulator of
    # tests/reference (scipy.linalg.expm-built gates), ledger counts against the general path
    from qgradlib.evaluation import distribute

    c = rotation_layers(n)
    H, K = _obs(n)[0], _obs(n)
    theta = np.random.default_rng(n).uniform(-3, 3, size=c.n_params)
    qg.expect(c, H, theta)
    qg.expect(c, K, theta)
    h = np.zeros(c.n_params)
    h[n + 1] = np.pi / 2
    # common practice: RY, RX and RZ have period 4 pi in their angle; a row 4 pi on is the
    # same circuit, run and counted once
    batches = [np.stack([theta + h, theta - h]), np.stack([theta, theta]),
               np.stack([theta + h, theta, theta + h, theta + 8 * h])]
    counts = [2, 1, 2]
    for X, count in zip(batches, counts):
        with qg.Ledger() as general:
            want = qg.expect(c, H, X, fuse=False)
        real = distribute.measure_rows
        monkeypatch.setattr(distribute, "measure_rows", None)   # the general path would fail
        with qg.Ledger() as laned:
            got = qg.expect(c, H, X)
            many = qg.expect(c, K, X)
        monkeypatch.setattr(distribute, "measure_rows", real)
        M = observable_dense(H.terms, n)
        dense = [dense_expectation(circuit_state(c, x), M) for x in X]
        assert got.shape == (X.shape[0],) and many.shape == (X.shape[0], len(K))
        assert np.max(np.abs(got - dense)) <= 1e-12 and np.max(np.abs(got - want)) <= 1e-12
        assert np.max(np.abs(many[:, 0] - got)) <= 1e-12
        assert general.circuits == count and laned.circuits == 2 * count
    # rows that move two columns each go the general way, with the same answer
    X = theta + np.random.default_rng(1).uniform(-1, 1, size=(3, c.n_params))
    M = observable_dense(H.terms, n)
    assert np.max(np.abs(qg.expect(c, H, X) - [dense_expectation(circuit_state(c, x), M)
                                                for x in X])) <= 1e-12
