"""autograd on hybrid costs: circuit outputs mixed with classical autograd.numpy code.

Sources: autograd.test_util.check_grads (autograd's own numerical VJP checks), and
scipy.optimize.check_grad (scipy's forward-difference check); every transform's output is
also compared with exact derivatives of the dense reference (scipy.linalg.expm_frechet).
"""
import autograd.numpy as anp
import numpy as np
import pytest
import scipy.optimize
from autograd import elementwise_grad, grad, hessian, jacobian, value_and_grad
from autograd.test_util import check_grads

import qgradlib as qg
from derivative_cases import random_pauli_observable, scramble, to_circuit
from reference import derivatives as ref

N = 3


def _case(seed=0):
    rng = np.random.default_rng(seed)
    ops = scramble(N, rng) + [("RY", (0,), (0, 1.0, 0.0)), ("CRX", (0, 1), (1, 1.0, 0.0)),
                              ("RZZ", (1, 2), (2, 1.0, 0.0)), ("RX", (2,), (0, 2.0, 0.1)),
                              ("CNOT", (2, 0), None), ("RY", (1,), (1, -1.0, 0.0))]
    c = to_circuit(ops, N)
    (o1, M1), (o2, M2) = random_pauli_observable(N, rng), random_pauli_observable(N, rng)
    theta = rng.uniform(-np.pi, np.pi, size=3)
    return ops, c, (o1, o2), (M1, M2), theta


def _hybrid(c, obs, method):
    def cost(t):
        e = qg.expect(c, list(obs), t, gradient=method)
        p = qg.probabilities(c, t, qubits=[2], gradient=method)
        return (anp.sin(e[0]) * e[1] + 0.1 * anp.sum(t ** 2) + anp.log(1.5 + p[1])
                + anp.tanh(t[0]) * e[0])
    return cost


@pytest.mark.parametrize("method, order", [("shift", 2), ("adjoint", 2), ("difference", 1)])
def test_check_grads_on_hybrid_cost(method, order):
    # autograd.test_util.check_grads: reverse mode against autograd's numerical derivative,
    # order 2 checks the derivative of the derivative as well
    _, c, obs, _, theta = _case()
    np.random.seed(0)             # check_grads draws its directions from numpy's global RNG
    check_grads(_hybrid(c, obs, method), modes=["rev"], order=order)(theta)


@pytest.mark.parametrize("method", ["shift", "adjoint", "difference"])
def test_scipy_check_grad_on_hybrid_cost(method):
    # scipy.optimize.check_grad: forward differences with step sqrt(machine eps)
    _, c, obs, _, theta = _case(1)
    f = _hybrid(c, obs, method)
    err = scipy.optimize.check_grad(f, grad(f), theta)
    assert err < 1e-5


def test_hybrid_gradient_against_reference_chain_rule():
    # the same hybrid cost with the circuit parts taken from expm_frechet, chain rule by hand
    ops, c, obs, (M1, M2), theta = _case(2)
    e1, e2 = ref.expectation(ops, theta, N, M1), ref.expectation(ops, theta, N, M2)
    g1, g2 = ref.gradient(ops, theta, N, M1), ref.gradient(ops, theta, N, M2)
    p1 = ref.probabilities(ops, theta, N, [2])[1]
    dp1 = ref.probabilities_jacobian(ops, theta, N, [2])[1]
    exact = (np.cos(e1) * e2 * g1 + np.sin(e1) * g2 + 0.2 * theta + dp1 / (1.5 + p1)
             + np.tanh(theta[0]) * g1)
    exact[0] += (1 - np.tanh(theta[0]) ** 2) * e1
    for method in ("shift", "adjoint"):
        np.testing.assert_allclose(grad(_hybrid(c, obs, method))(theta), exact, atol=1e-10)


def test_value_and_grad_scalar():
    ops, c, (o1, _), (M1, _), theta = _case(3)
    v, g = value_and_grad(lambda t: qg.expect(c, o1, t))(theta)
    assert np.isclose(v, ref.expectation(ops, theta, N, M1), atol=1e-12)
    np.testing.assert_allclose(g, ref.gradient(ops, theta, N, M1), atol=1e-10)


@pytest.mark.parametrize("method", ["shift", "adjoint"])
def test_jacobian_of_a_list_of_observables(method):
    ops, c, obs, Ms, theta = _case(4)
    J = jacobian(lambda t: qg.expect(c, list(obs), t, gradient=method))(theta)
    assert J.shape == (2, 3)
    np.testing.assert_allclose(J, [ref.gradient(ops, theta, N, M) for M in Ms], atol=1e-10)


@pytest.mark.parametrize("method", ["shift", "adjoint"])
def test_batched_theta(method):
    ops, c, obs, Ms, _ = _case(5)
    T = np.random.default_rng(5).uniform(-2, 2, size=(4, 3))
    J = jacobian(lambda t: qg.expect(c, list(obs), t, gradient=method))(T)
    assert J.shape == (4, 2, 4, 3)
    eg = elementwise_grad(lambda t: qg.expect(c, obs[0], t, gradient=method))(T)
    assert eg.shape == (4, 3)
    for b in range(4):
        exact = np.array([ref.gradient(ops, T[b], N, M) for M in Ms])
        np.testing.assert_allclose(J[b, :, b], exact, atol=1e-10)
        others = np.delete(J[b], b, axis=1)
        assert np.all(others == 0)              # rows of a batch do not interact
        np.testing.assert_allclose(eg[b], exact[0], atol=1e-10)
    # a classical cost over the batch
    g = grad(lambda t: anp.sum(qg.expect(c, obs[0], t, gradient=method) ** 2))(T)
    for b in range(4):
        np.testing.assert_allclose(g[b], 2 * ref.expectation(ops, T[b], N, Ms[0])
                                   * ref.gradient(ops, T[b], N, Ms[0]), atol=1e-10)


@pytest.mark.parametrize("method", ["shift", "adjoint", "difference"])
def test_probability_vectors(method):
    ops, c, _, _, theta = _case(6)
    tol = 1e-10 if method != "difference" else 1e-7
    J = jacobian(lambda t: qg.probabilities(c, t, qubits=[1, 0], gradient=method))(theta)
    np.testing.assert_allclose(J, ref.probabilities_jacobian(ops, theta, N, [1, 0]), atol=tol)
    # probabilities sum to one, so their derivatives sum to zero (common practice)
    np.testing.assert_allclose(J.sum(axis=0), 0.0, atol=tol)
    T = np.stack([theta, theta + 0.3])
    Jb = jacobian(lambda t: qg.probabilities(c, t, gradient=method))(T)
    np.testing.assert_allclose(Jb[1, :, 1], ref.probabilities_jacobian(ops, theta + 0.3, N),
                               atol=tol)


@pytest.mark.parametrize("method", ["shift", "adjoint"])
def test_hessian_scalar_and_hybrid(method):
    # second derivatives against the dense reference (expm_frechet and the block-triangular
    # exponential of Van Loan, IEEE Trans. Automat. Control 23, 395 (1978))
    ops, c, (o1, o2), (M1, M2), theta = _case(7)
    Hs = hessian(lambda t: qg.expect(c, o1, t, gradient=method))(theta)
    np.testing.assert_allclose(Hs, ref.hessian(ops, theta, N, M1), atol=1e-9)
    np.testing.assert_allclose(Hs, Hs.T, atol=1e-12)
    # a product of two expectation values: H = e1 H2 + e2 H1 + g1 g2^T + g2 g1^T
    Hp = hessian(lambda t: qg.expect(c, o1, t, gradient=method) * qg.expect(c, o2, t, gradient=method))(theta)
    e1, e2 = ref.expectation(ops, theta, N, M1), ref.expectation(ops, theta, N, M2)
    g1, g2 = ref.gradient(ops, theta, N, M1), ref.gradient(ops, theta, N, M2)
    exact = e1 * ref.hessian(ops, theta, N, M2) + e2 * ref.hessian(ops, theta, N, M1) \
        + np.outer(g1, g2) + np.outer(g2, g1)
    np.testing.assert_allclose(Hp, exact, atol=1e-9)


def test_hessian_of_probabilities_and_batched_theta():
    ops, c, (o1, _), (M1, _), theta = _case(8)
    Hp = jacobian(jacobian(lambda t: qg.probabilities(c, t, qubits=[0])))(theta)
    # d2 p0 = d2 <(I + Z)/2 on qubit 0> (common practice: p0 = (1 + <Z>) / 2)
    Z0 = ref.kron(ref.PZ, np.eye(4))
    np.testing.assert_allclose(Hp[0], ref.hessian(ops, theta, N, Z0) / 2, atol=1e-9)
    np.testing.assert_allclose(Hp[1], -ref.hessian(ops, theta, N, Z0) / 2, atol=1e-9)
    T = np.stack([theta, -theta])
    Hb = hessian(lambda t: anp.sum(qg.expect(c, o1, t)))(T)
    assert Hb.shape == (2, 3, 2, 3)
    np.testing.assert_allclose(Hb[1, :, 1], ref.hessian(ops, -theta, N, M1), atol=1e-9)
    assert np.all(Hb[0, :, 1] == 0)


def test_third_derivative_with_adjoint_and_shift():
    # d3E: central difference (h = 1e-4) of the reference's exact Hessian (expm_frechet and
    # Van Loan's block exponential); truncation ~ h**2 * |d5E| stays below 1e-6
    ops, c, (o1, _), (M1, _), theta = _case(9)
    h = 1e-4
    fd = np.stack([(ref.hessian(ops, theta + h * e, N, M1) - ref.hessian(ops, theta - h * e, N, M1))
                   / (2 * h) for e in np.eye(3)], axis=-1)
    for method in ("adjoint", "shift"):
        d3 = jacobian(hessian(lambda t: qg.expect(c, o1, t, gradient=method)))(theta)
        np.testing.assert_allclose(d3, fd, atol=1e-6)


def test_adjoint_hessian_costs_no_device_executions():
    # the adjoint method runs on the simulator only: a device would run the value alone
    _, c, (o1, _), _, theta = _case(10)
    with qg.Ledger() as book:
        hessian(lambda t: qg.expect(c, o1, t, gradient="adjoint"))(theta)
    assert book.executions == qg.shots.n_settings(o1)


def test_adjoint_nested_refuses_gates_without_a_rule():
    W = np.array([[0.3, 0.2], [0.2, -0.3]])
    c = qg.Circuit(1).add(qg.Gate.from_hamiltonian("pulse", drift=W, drive="X"), 0)
    Z = qg.Observable({"Z": 1.0})
    f = lambda t: qg.expect(c, Z, t, gradient="adjoint")  # noqa: E731
    grad(f)(np.array([0.2]))                                # first order is fine
    with pytest.raises(ValueError, match="gradient='shift'"):
        hessian(f)(np.array([0.2]))


@pytest.mark.parametrize("method", ["shift", "adjoint"])
def test_hessian_of_a_list_of_observables(method):
    ops, c, obs, Ms, theta = _case(11)
    Hl = hessian(lambda t: qg.expect(c, list(obs), t, gradient=method))(theta)
    assert Hl.shape == (2, 3, 3)
    for k in range(2):
        np.testing.assert_allclose(Hl[k], ref.hessian(ops, theta, N, Ms[k]), atol=1e-9)
