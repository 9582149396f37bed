"""The stochastic parameter-shift rule of Banchi and Crooks, Quantum 5, 386 (2021), for gates
``U(a) = expm(-1j (W + a P))``, against scipy.linalg.expm_frechet on dense matrices."""
import numpy as np
import pytest
from autograd import grad, hessian

import qgradlib as qg
from derivative_cases import random_pauli_observable, scramble, to_circuit
from reference import derivatives as ref


def _hermitian(d, rng, norm):
    a = rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d))
    h = (a + a.conj().T) / 2
    return norm * h / np.linalg.norm(h, 2)


def _case(rng, norm=1.5, drive="XZ"):
    n = 3
    W = _hermitian(4, rng, norm)
    gate = qg.Gate.from_hamiltonian("pulse", drift=W, drive=drive)
    kind = ("ham", W, ref.pauli(drive))
    ops = scramble(n, rng) + [(kind, (0, 2), (0, 1.0, 0.0)), ("RY", (1,), (1, 1.0, 0.0)),
                              ("CNOT", (1, 2), None), (kind, (2, 1), (0, -0.6, 0.3))]
    return n, ops, to_circuit(ops, n, {id(kind): gate})


@pytest.mark.parametrize("norm", [0.3, 1.5, 6.0])
def test_exact_without_shots(norm):
    # Gauss-Legendre quadrature of the split point: exact to 1e-10 against expm_frechet
    rng = np.random.default_rng(int(norm * 10))
    n, ops, c = _case(rng, norm)
    obs, M = random_pauli_observable(n, rng)
    theta = np.array([0.7, -0.2])
    exact = ref.gradient(ops, theta, n, M)
    assert np.abs(exact[0]) > 1e-3
    np.testing.assert_allclose(grad(lambda t: qg.expect(c, obs, t))(theta), exact, atol=1e-10)
    # the adjoint method is exact too (Daleckii-Krein derivative of the gate)
    np.testing.assert_allclose(grad(lambda t: qg.expect(c, obs, t, gradient="adjoint"))(theta),
                               exact, atol=1e-10)


def test_probabilities_exact_without_shots():
    rng = np.random.default_rng(8)
    n, ops, c = _case(rng, 2.0, drive="YY")
    theta = np.array([0.1, 0.9])
    from autograd import jacobian
    J = jacobian(lambda t: qg.probabilities(c, t, qubits=[1, 2]))(theta)
    np.testing.assert_allclose(J, ref.probabilities_jacobian(ops, theta, n, [1, 2]), atol=1e-10)


def test_second_derivative_applies_the_rule_twice():
    # d2/da2 of expm(-1j (W + a P)) from the block-triangular exponential (Van Loan, IEEE
    # Trans. Automat. Control 23, 395 (1978)), checked first against a finite difference of
    # expm_frechet, then the Hessian of the circuit against it
    rng = np.random.default_rng(21)
    W = _hermitian(2, rng, 1.0)
    kind = ("ham", W, ref.PX)
    a, h = 0.4, 1e-5
    fd = (ref.gate_derivative(kind, a + h) - ref.gate_derivative(kind, a - h)) / (2 * h)
    np.testing.assert_allclose(ref.gate_second_derivative(kind, a), fd, atol=1e-8)
    gate = qg.Gate.from_hamiltonian("pulse", drift=W, drive="X")
    ops = [("H", (0,), None), ("RY", (1,), (0, 1.0, 0.0)), ("CNOT", (0, 1), None),
           (kind, (1,), (1, 1.0, 0.0)), ("RX", (0,), (0, 0.5, 0.0))]
    c = to_circuit(ops, 2, {id(kind): gate})
    obs, M = random_pauli_observable(2, rng)
    theta = np.array([0.4, -0.8])
    np.testing.assert_allclose(hessian(lambda t: qg.expect(c, obs, t))(theta),
                               ref.hessian(ops, theta, 2, M), atol=1e-9)


def test_unbiased_with_shots():
    # Banchi and Crooks (2021): sampling the split point uniformly gives an unbiased estimate.
    # 300 independent estimates (seeds 0..299), each with sampled splits and shot noise; the
    # mean must lie within 4 standard errors of the expm_frechet value. For an unbiased
    # estimator a |z| > 4 happens with probability about 6e-5 (normal tail; the mean of 300
    # bounded draws is close to normal): that is the false-failure rate of this check.
    rng = np.random.default_rng(5)
    W = _hermitian(2, rng, 2.0)
    gate = qg.Gate.from_hamiltonian("pulse", drift=W, drive="X")
    kind = ("ham", W, ref.PX)
    ops = [("RY", (0,), 0.7), (kind, (0,), (0, 1.0, 0.0))]
    c = to_circuit(ops, 1, {id(kind): gate})
    Z = qg.Observable({"Z": 1.0})
    theta = np.array([0.5])
    exact = ref.gradient(ops, theta, 1, ref.PZ)[0]
    est = np.array([grad(lambda t: qg.expect(c, Z, t, shots=200, seed=s, splits=2))(theta)[0]
                    for s in range(300)])
    z = (est.mean() - exact) / (est.std(ddof=1) / np.sqrt(est.size))
    assert abs(z) < 4.0
    # not a vacuous check: the estimates do scatter, and a bias of 10 standard errors is caught
    assert est.std() > 1e-2
    assert abs((est.mean() + 10 * est.std(ddof=1) / np.sqrt(est.size) - exact)
               / (est.std(ddof=1) / np.sqrt(est.size))) > 4.0


def test_same_seed_same_estimate_and_ledger():
    rng = np.random.default_rng(6)
    W = _hermitian(2, rng, 1.0)
    c = qg.Circuit(1).add(qg.Gate.from_hamiltonian("pulse", drift=W, drive="Y"), 0)
    Z = qg.Observable({"Z": 1.0})
    f = lambda t: qg.expect(c, Z, t, shots=100, seed=3, splits=4)  # noqa: E731
    assert grad(f)(np.array([0.2]))[0] == grad(f)(np.array([0.2]))[0]
    with qg.Ledger() as book:
        grad(f)(np.array([0.2]))
    # common practice for the stochastic rule: two circuits (+ and - insert) per split point
    assert book.executions == 1 + 2 * 4
    assert book.shots == book.executions * 100
    assert book.by_purpose["pulse"] == 8


def test_bad_hamiltonian_gates_are_refused():
    with pytest.raises(ValueError, match="drift"):
        qg.Gate.from_hamiltonian("p", drift=np.array([[0, 1], [0, 0]]), drive="X")
    with pytest.raises(TypeError, match="drive"):
        qg.Gate.from_hamiltonian("p", drift=np.eye(2), drive=1)
    with pytest.raises(ValueError, match="drive"):
        qg.Gate.from_hamiltonian("p", drift=np.eye(2), drive="I")
    with pytest.raises(ValueError, match="splits"):
        c = qg.Circuit(1).add(qg.Gate.from_hamiltonian("p", drift=np.eye(2), drive="X"), 0)
        qg.expect(c, qg.Observable({"Z": 1.0}), np.array([0.1]), shots=10, splits=0)


def test_hessian_of_shared_hamiltonian_parameters():
    # two Hamiltonian gates share theta[0] (one scaled): Hessian against the dense reference
    # (expm_frechet and the block-triangular exponential of Van Loan 1978)
    rng = np.random.default_rng(31)
    n, ops, c = _case(rng, 1.5)
    obs, M = random_pauli_observable(n, rng)
    theta = np.array([0.7, -0.2])
    np.testing.assert_allclose(hessian(lambda t: qg.expect(c, obs, t))(theta),
                               ref.hessian(ops, theta, n, M), atol=1e-9)
