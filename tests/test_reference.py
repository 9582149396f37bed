"""The dense reference itself: its embedding against explicit Kronecker products, and its
exact derivatives against numerical differences (scipy.optimize.check_grad), so the tests
that lean on it stand on something checked."""
import numpy as np
import pytest
import scipy.optimize

import qgradlib as qg
from reference import (FIXED, PAULI, angle_gradient, circuit_ops, dense_expectation,
                       dense_state, embed, observable_dense, reference_angles,
                       state_derivatives, theta_gradient)

X, Y, Z, I = PAULI["X"], PAULI["Y"], PAULI["Z"], PAULI["I"]


def test_embed_adjacent_qubits_is_a_plain_kron():
    # common practice: an operator on qubit q of n is I (x) ... (x) A (x) ... (x) I
    A = np.kron(X, Y)
    np.testing.assert_array_equal(embed(A, (1, 2), 4), np.kron(np.kron(I, A), I))
    np.testing.assert_array_equal(embed(Z, (0,), 3), np.kron(Z, np.eye(4)))


def test_embed_reversed_qubits_swaps_the_factors():
    A = np.kron(X, Z)
    np.testing.assert_allclose(embed(A, (1, 0), 2), np.kron(Z, X))
    swap = FIXED["SWAP"]
    np.testing.assert_allclose(embed(A, (1, 0), 2), swap @ A @ swap)


def _circuit():
    c = qg.Circuit(3).h(0).ry(1).cnot(0, 2).crx(1, 2).rz(0, param=0, scale=-2.0, offset=0.3)
    c.rxx(2, 0).cphase(0, 1, angle=0.4)
    c.add(qg.Gate.from_generator("mix", np.kron(X, Z) + 0.5 * np.kron(Z, Y)), (1, 0))
    c.add(qg.Gate.from_hamiltonian("pulse", drift=np.diag([0.2, -0.3]), drive="X"), 2)
    return c


H = observable_dense({"ZXI": 0.7, "IYZ": -1.1, "XII": 0.4}, 3)


def _energy(c):
    return lambda theta: dense_expectation(
        dense_state(circuit_ops(c, reference_angles(c, theta)), c.n_qubits), H)


def test_theta_gradient_against_check_grad():
    c = _circuit()
    theta = np.random.default_rng(1).normal(size=c.n_params)
    # scipy.optimize.check_grad: 2-norm of (gradient - forward difference), step ~1.5e-8
    err = scipy.optimize.check_grad(_energy(c), lambda t: theta_gradient(c, t, H), theta)
    assert err < 1e-6


def test_angle_gradient_against_central_differences():
    c = _circuit()
    phi = np.random.default_rng(2).normal(size=len(c.parametric_operations))

    def energy(p):
        return dense_expectation(dense_state(circuit_ops(c, p), 3), H)

    h = 1e-5
    fd = [(energy(phi + h * e) - energy(phi - h * e)) / (2 * h) for e in np.eye(phi.size)]
    np.testing.assert_allclose(angle_gradient(c, phi, H), fd, atol=1e-8)


def test_state_derivatives_against_central_differences():
    c = _circuit()
    phi = np.random.default_rng(3).normal(size=len(c.parametric_operations))
    h = 1e-6
    d = state_derivatives(c, phi)
    assert d.shape == (phi.size, 8)
    for k, e in enumerate(np.eye(phi.size)):
        fd = (dense_state(circuit_ops(c, phi + h * e), 3) -
              dense_state(circuit_ops(c, phi - h * e), 3)) / (2 * h)
        np.testing.assert_allclose(d[k], fd, atol=1e-8)


def test_function_gates_have_no_exact_derivative_here():
    c = qg.Circuit(1).add(qg.Gate.from_function("f", lambda a: np.diag([1, np.exp(1j * a)]), 1), 0)
    with pytest.raises(NotImplementedError):
        state_derivatives(c, np.array([0.2]))
