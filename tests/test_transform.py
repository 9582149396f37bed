"""Equality, the inverse circuit, composition on a qubit map and initial states, checked
against the dense reference simulator (tests/reference) and scipy's expm."""
import autograd.numpy as anp
import numpy as np
import pytest
import scipy.linalg
from autograd import grad

import qgradlib as qg
from reference import circuit_ops, circuit_state, dense_state, observable_dense, reference_angles

RNG = np.random.default_rng(14)


def _unitary_of(circuit, theta):
    # the reference's own operator, column by column from basis states
    d = 2 ** circuit.n_qubits
    ops = circuit_ops(circuit, reference_angles(circuit, theta))
    cols = []
    for k in range(d):
        e = np.zeros(d, dtype=complex)
        e[k] = 1
        cols.append(_apply_ops(ops, e, circuit.n_qubits))
    return np.array(cols).T


def _apply_ops(ops, psi, n):
    from reference import embed
    for m, qs in ops:
        psi = embed(m, qs, n) @ psi
    return psi


def _mixed_circuit():
    W = np.array([[0.3, 0.2], [0.2, -0.1]])
    M = np.diag([0.0, 1.0, 2.5, 0.0])
    c = qg.Circuit(3).h(0).ry(1, offset=0.3).s(2).t(0).sx(1).cnot(0, 1).crx(1, 2, scale=2.0)
    c.rz(0, angle=0.7).add(qg.Gate.from_generator("mix", M), (2, 0))
    c.add(qg.Gate.from_hamiltonian("pulse", drift=W, drive="X"), 1)
    c.add(qg.Gate.fixed("twist", scipy.linalg.expm(-1j * np.array([[0.1, 0.4], [0.4, 0.2]]))), 2)
    c.add(qg.Gate.from_function("fun", _fun, 1), 0, param=0)
    return c


def _fun(a):
    return scipy.linalg.expm(-1j * a * np.array([[0.5, 0.3j], [-0.3j, -0.2]]))


def test_equality_is_exact_and_structural():
    a, b = _mixed_circuit(), _mixed_circuit()
    assert a == b and a is not b
    b.rz(0)
    assert a != b
    assert qg.Circuit(1).ry(0, offset=0.1) != qg.Circuit(1).ry(0, offset=0.1 + 1e-15)
    assert qg.Circuit(1).ry(0) != qg.Circuit(1).rx(0)
    with pytest.raises(TypeError):
        hash(a)      # circuits grow in place: unhashable, like lists
    assert qg.gates.RX == qg.Gate.from_generator("RX", qg.gates.RX.generator)
    assert hash(qg.Gate.fixed("f", np.eye(2))) == hash(qg.Gate.fixed("f", np.eye(2)))
    assert qg.Gate.fixed("f", np.eye(2)) != qg.Gate.fixed("g", np.eye(2))
    assert qg.channels.depolarizing(0.1) == qg.channels.depolarizing(0.1)
    assert qg.channels.depolarizing(0.1) != qg.channels.depolarizing(0.1 + 1e-12)
    assert len({qg.channels.dephasing(0.2), qg.channels.dephasing(0.2)}) == 1


def test_inverse_undoes_the_circuit_against_the_reference():
    c = _mixed_circuit()
    theta = RNG.normal(size=c.n_params)
    inv = c.inverse()
    assert inv.n_params == c.n_params
    U = _unitary_of(c, theta)
    V = _unitary_of(inv, theta)
    # the inverse circuit is the adjoint of the unitary (same theta)
    np.testing.assert_allclose(V, U.conj().T, atol=1e-10)
    assert inv.inverse() == c
    # and the engine agrees: the circuit followed by its inverse is the identity
    both = c + inv
    psi = qg.state(both, np.concatenate([theta, theta]), initial="011")
    np.testing.assert_allclose(psi, np.eye(8)[3], atol=1e-10)


def test_inverse_refuses_noise():
    c = qg.Circuit(1).ry(0).noise(0, qg.channels.dephasing(0.1))
    with pytest.raises(ValueError, match="noise channel 'dephasing' has no inverse"):
        c.inverse()


def test_compose_maps_qubits_and_renumbers_parameters():
    small = qg.Circuit(2).ry(0).crz(0, 1, offset=0.2).ry(1, param=0, scale=-1.0)
    big = qg.Circuit(3).rx(0).h(1)
    out = big.compose(small, qubits=[2, 0])
    assert out.n_params == 3 and big.n_params == 1 and len(big) == 2
    theta = RNG.normal(size=3)
    # reference: the same gates written out by hand on the mapped qubits
    hand = qg.Circuit(3).rx(0).h(1).ry(2).crz(2, 0, offset=0.2).ry(0, param=1, scale=-1.0)
    assert out == hand
    np.testing.assert_allclose(qg.state(out, theta), circuit_state(hand, theta), atol=1e-12)
    assert big + qg.Circuit(3).ry(2) == big.compose(qg.Circuit(3).ry(2))
    with pytest.raises(ValueError, match="qubits must be distinct"):
        big.compose(small, qubits=[1, 1])
    with pytest.raises(ValueError, match="one qubit of this circuit for each"):
        big.compose(small, qubits=[1])
    with pytest.raises(ValueError, match="out of range"):
        big.compose(small, qubits=[0, 3])


def _reference_expect(circuit, H, theta, v0):
    ops = circuit_ops(circuit, reference_angles(circuit, theta))
    psi = _apply_ops(ops, v0, circuit.n_qubits)
    return float(np.real(np.vdot(psi, observable_dense(H.terms, circuit.n_qubits) @ psi)))


@pytest.mark.parametrize("kind", ["bits", "vector"])
def test_initial_values_and_gradients_against_the_reference(kind):
    c = qg.Circuit(3).ry(0).cnot(0, 1).rx(2).crz(1, 2).ry(1, param=0, scale=0.5)
    H = qg.Observable({"ZZI": 1.0, "IXY": 0.5, "YII": -0.3})
    if kind == "bits":
        init, v0 = "101", np.eye(8)[5].astype(complex)
    else:
        v0 = RNG.normal(size=8) + 1j * RNG.normal(size=8)
        v0 /= np.linalg.norm(v0)
        init = v0
    theta = RNG.normal(size=c.n_params)
    f = lambda t: _reference_expect(c, H, t, v0)  # noqa: E731
    assert qg.expect(c, H, theta, initial=init) == pytest.approx(f(theta), abs=1e-12)
    # reference gradient: central differences of the dense simulator, step 1e-6 (error ~1e-10)
    h = 1e-6
    ref = np.array([(f(theta + h * e) - f(theta - h * e)) / (2 * h) for e in np.eye(theta.size)])
    for method in ("shift", "adjoint", "difference"):
        g = grad(lambda t: qg.expect(c, H, t, initial=init, gradient=method))(theta)
        np.testing.assert_allclose(g, ref, atol=1e-7)
    p = qg.probabilities(c, theta, initial=init)
    psi = _apply_ops(circuit_ops(c, reference_angles(c, theta)), v0, 3)
    np.testing.assert_allclose(p, np.abs(psi) ** 2, atol=1e-12)
    np.testing.assert_allclose(qg.state(c, theta, initial=init), psi, atol=1e-12)


def test_initial_is_checked():
    c = qg.Circuit(2).ry(0)
    t = np.zeros(1)
    for bad, msg in [("012", "bitstring"), ("1", "bitstring"), (np.ones(4) / 2 * 1.01, "normalised"),
                     (np.ones(3) / np.sqrt(3), "shape"), (np.array([np.nan, 0, 0, 0]), "finite"),
                     (3.0, "shape")]:
        with pytest.raises(ValueError, match="initial") as err:
            qg.expect(c, qg.Observable({"ZI": 1.0}), t, initial=bad)
        assert msg in str(err.value)


def test_compute_uncompute_overlap_against_the_reference():
    # |<psi(b)|psi(a)>|^2 is the probability of |0...0> after U(a) then U(b)^dagger
    c = qg.Circuit(3).h(0).ry(1).cnot(0, 1).rx(2).crz(1, 2).ry(0).rzz(0, 2)
    m = c.n_params
    a, b = RNG.normal(size=m), RNG.normal(size=m)
    zero = qg.Observable.from_matrix(np.diag(np.eye(8)[0]))
    value = qg.expect(c + c.inverse(), zero, np.concatenate([a, b]))
    ref = abs(np.vdot(circuit_state(c, b), circuit_state(c, a))) ** 2
    assert value == pytest.approx(ref, abs=1e-12)
    # and its gradient in a (a kernel's derivative) against differences of the reference
    h = 1e-6
    f = lambda x: abs(np.vdot(circuit_state(c, b), circuit_state(c, x))) ** 2  # noqa: E731
    ref_g = np.array([(f(a + h * e) - f(a - h * e)) / (2 * h) for e in np.eye(m)])
    g = grad(lambda x: qg.expect(c + c.inverse(), zero, anp.concatenate([x, b])))(a)
    np.testing.assert_allclose(g, ref_g, atol=1e-7)


def test_inverse_compose_and_drawing_carry_data_inputs():
    c = qg.Circuit(2).ry(0, input=0).ry(1).cnot(0, 1).rz(1, input=1, scale=2.0, offset=0.1)
    inv = c.inverse()
    assert inv.n_inputs == 2 and inv.inverse() == c
    x, t = np.array([0.4, -1.3]), np.array([0.8])
    psi = qg.state(c + inv, np.concatenate([t, t]), inputs=x)
    np.testing.assert_allclose(psi, [1, 0, 0, 0], atol=1e-12)
    assert "RZ(2·x1+0.1):" not in str(c) and "RZ(2·x1+0.1)" in str(c)
    assert "RZ(-2·x1-0.1)" in str(inv)
    assert qg.Circuit(3).compose(c, qubits=[2, 0]).n_inputs == 2
