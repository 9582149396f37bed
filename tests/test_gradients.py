"""Gradients of every method against exact derivatives from dense matrices.

Reference: tests/reference/derivatives.py, which differentiates each gate with
scipy.linalg.expm_frechet (and, as a cross-check, with the closed form dU/da = -1j G U) on
dense Kronecker-product matrices, independently of the package.
"""
import warnings

import numpy as np
import pytest
from autograd import grad, jacobian
from hypothesis import given, strategies as st

import qgradlib as qg
from derivative_cases import (FIXED_1, FIXED_2, ONE_QUBIT, TWO_QUBIT, random_pauli_observable,
                              scramble, to_circuit)
from reference import derivatives as ref

METHODS = ("shift", "adjoint", "difference")
TOL = {"shift": 1e-10, "adjoint": 1e-10, "difference": 1e-7}


def _grad(c, obs, theta, method, **kw):
    return grad(lambda t: qg.expect(c, obs, t, gradient=method, **kw))(theta)


def test_reference_closed_form_agrees_with_expm_frechet():
    # the two exact routes of the reference agree: expm_frechet vs dU/da = -1j G U
    rng = np.random.default_rng(0)
    for name in ONE_QUBIT + TWO_QUBIT:
        a = rng.uniform(-3, 3)
        np.testing.assert_allclose(ref.gate_derivative(name, a),
                                   ref.gate_derivative(name, a, "closed"), atol=1e-12)


@pytest.mark.parametrize("name", ONE_QUBIT + TWO_QUBIT)
@pytest.mark.parametrize("method", METHODS)
def test_every_standard_gate_against_expm_frechet(name, method):
    # exact derivative from scipy.linalg.expm_frechet on dense matrices
    rng = np.random.default_rng(sum(map(ord, name)))
    n = 3
    qubits = (1,) if name in ONE_QUBIT else (2, 0)        # reversed, non-adjacent qubits
    ops = scramble(n, rng) + [(name, qubits, (0, 1.0, 0.0)), ("RX", (1,), (1, 1.0, 0.0)),
                              ("CNOT", (0, 1), None), (name, qubits[::-1], (2, 1.0, 0.0))]
    c = to_circuit(ops, n)
    obs, M = random_pauli_observable(n, rng)
    theta = rng.uniform(-np.pi, np.pi, size=3)
    exact = ref.gradient(ops, theta, n, M)
    assert np.abs(exact).max() > 1e-3                      # a non-trivial check
    np.testing.assert_allclose(_grad(c, obs, theta, method), exact, atol=TOL[method])
    # the closed form dU/da = -1j G U gives the same numbers
    np.testing.assert_allclose(ref.gradient(ops, theta, n, M, "closed"), exact, atol=1e-12)


@pytest.mark.parametrize("name", FIXED_1 + FIXED_2)
def test_fixed_gates_inside_differentiated_circuits(name):
    # values and gradients through each fixed gate, against the dense reference (expm_frechet)
    rng = np.random.default_rng(7)
    n = 2
    qubits = (0,) if name in FIXED_1 else (1, 0)
    ops = [("RY", (0,), (0, 1.0, 0.0)), ("RX", (1,), (1, 1.0, 0.0)), (name, qubits, None),
           ("RY", (1,), (2, 1.0, 0.0)), ("CRZ", (1, 0), (0, 0.7, 0.0))]
    c = to_circuit(ops, n)
    obs, M = random_pauli_observable(n, rng)
    theta = rng.uniform(-np.pi, np.pi, size=3)
    assert np.isclose(qg.expect(c, obs, theta), ref.expectation(ops, theta, n, M), atol=1e-12)
    for method in METHODS:
        np.testing.assert_allclose(_grad(c, obs, theta, method), ref.gradient(ops, theta, n, M),
                                   atol=TOL[method])


def test_shared_and_scaled_parameters_with_offsets():
    # chain rule A.T @ dE/dphi, against expm_frechet derivatives of the dense circuit
    rng = np.random.default_rng(3)
    n = 3
    ops = scramble(n, rng) + [
        ("RY", (0,), (0, 1.0, 0.0)), ("RZ", (1,), (0, 2.0, 0.1)), ("CRX", (0, 2), (0, -0.5, 0.2)),
        ("RXX", (1, 2), (1, 3.0, -0.4)), ("RX", (2,), 0.3), ("PHASE", (2,), (1, -1.5, 0.0)),
        ("CRY", (2, 1), (0, 0.25, 1.0))]
    c = to_circuit(ops, n)
    assert c.n_params == 2
    obs, M = random_pauli_observable(n, rng)
    theta = np.array([0.37, -1.1])
    for method in METHODS:
        np.testing.assert_allclose(_grad(c, obs, theta, method), ref.gradient(ops, theta, n, M),
                                   atol=TOL[method])


def _random_hermitian_with_spectrum(eigs, rng):
    d = len(eigs)
    q, _ = np.linalg.qr(rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d)))
    return q @ np.diag(eigs) @ q.conj().T


@pytest.mark.parametrize("eigs, n_terms", [
    ([-1.0, 0.0, 0.0, 1.0], 4),          # frequencies 1, 2: equidistant, R = 2
    ([0.0, 0.5, 1.0, 1.5], 6),           # frequencies 0.5, 1, 1.5: equidistant, R = 3
    ([0.0, 1.0, 2.7, 0.0], 6),           # frequencies 1, 1.7, 2.7: not equidistant
])
@pytest.mark.parametrize("diagonal", [True, False])
def test_custom_generators(eigs, n_terms, diagonal):
    # custom gates U(a) = expm(-1j a G), against expm_frechet on the dense circuit
    rng = np.random.default_rng(11)
    G = np.diag(eigs).astype(complex) if diagonal else _random_hermitian_with_spectrum(eigs, rng)
    gate = qg.Gate.from_generator("mix", G)
    assert gate.shift_rule.n_terms == n_terms
    kind = ("gen", G)
    n = 3
    ops = scramble(n, rng) + [(kind, (0, 2), (0, 1.0, 0.0)), ("RY", (1,), (1, 1.0, 0.0)),
                              (kind, (1, 0), (1, -0.7, 0.2))]
    c = to_circuit(ops, n, {id(kind): gate})
    obs, M = random_pauli_observable(n, rng)
    theta = np.array([0.9, -0.4])
    exact = ref.gradient(ops, theta, n, M)
    for method in METHODS:
        np.testing.assert_allclose(_grad(c, obs, theta, method), exact, atol=TOL[method] * 10)


def test_custom_rule_given_by_the_user_is_used():
    # a user rule (here the equidistant rule for frequencies 1 and 2 written by hand from
    # Wierichs, Izaac, Wang and Lin, Quantum 6, 677 (2022), eq. (24)) replaces the derived one
    x = np.array([1, 3, 5, 7]) * np.pi / 4
    cf = np.array([1, -1, 1, -1]) / (8 * np.sin(x / 2) ** 2)
    rule = qg.ShiftRule(x, cf)
    G = np.diag([-1.0, 0.0, 0.0, 1.0])
    gate = qg.Gate.from_generator("mine", G, shift_rule=rule)
    assert gate.shift_rule is rule
    kind = ("gen", G)
    rng = np.random.default_rng(2)
    ops = scramble(2, rng) + [(kind, (0, 1), (0, 1.0, 0.0))]
    c = to_circuit(ops, 2, {id(kind): gate})
    obs, M = random_pauli_observable(2, rng)
    theta = np.array([0.3])
    with qg.Ledger() as book:
        g = _grad(c, obs, theta, "shift")
    np.testing.assert_allclose(g, ref.gradient(ops, theta, 2, M), atol=1e-10)
    assert book.by_purpose["mine"] == 4 * qg.shots.n_settings(obs)


def test_euler_rotations_are_exact_for_zyz_and_xyx():
    # euler(q) = RZ(a), then RY(b), then RZ(c): against expm_frechet of the dense product
    rng = np.random.default_rng(5)
    c = qg.Circuit(2).h(0).cnot(0, 1).euler(0).euler(1, axes="xyx")
    ops = [("H", (0,), None), ("CNOT", (0, 1), None),
           ("RZ", (0,), (0, 1.0, 0.0)), ("RY", (0,), (1, 1.0, 0.0)), ("RZ", (0,), (2, 1.0, 0.0)),
           ("RX", (1,), (3, 1.0, 0.0)), ("RY", (1,), (4, 1.0, 0.0)), ("RX", (1,), (5, 1.0, 0.0))]
    obs, M = random_pauli_observable(2, rng, k=6)
    theta = rng.uniform(-np.pi, np.pi, size=6)
    assert c.n_params == 6
    for method in ("shift", "adjoint"):
        np.testing.assert_allclose(_grad(c, obs, theta, method), ref.gradient(ops, theta, 2, M),
                                   atol=1e-10)


@pytest.mark.parametrize("axes", ["zyz", "zxz", "xyx", "yzy"])
def test_euler_rotations_reach_a_random_unitary(axes):
    # Nielsen and Chuang, Theorem 4.1 (and its axis-permuted forms): every single-qubit
    # unitary is exp(i alpha) R_a(t1) R_b(t2) R_a(t3); find the angles by least squares on the
    # fidelity and check |<U0|V>|^2 = 1 against a Haar-random U (scipy.stats.unitary_group)
    import scipy.optimize
    import scipy.stats
    U = scipy.stats.unitary_group.rvs(2, random_state=3)
    c = qg.Circuit(1).euler(0, axes=axes)
    target = U[:, 0]                       # U|0>: the state the rotations must prepare
    infidelity = lambda t: 1 - abs(np.vdot(target, qg.state(c, t))) ** 2  # noqa: E731
    best = min((scipy.optimize.minimize(infidelity, x0, method="BFGS")
                for x0 in np.random.default_rng(1).uniform(-3, 3, (6, 3))), key=lambda r: r.fun)
    assert best.fun < 1e-10


@pytest.mark.parametrize("axes", ["zzy", "xy", "abc", 3, "xyzx"])
def test_euler_refuses_bad_axes_by_name(axes):
    with pytest.raises(ValueError, match="axes"):
        qg.Circuit(1).euler(0, axes=axes)


def _function_gate():
    # RY written as a plain matrix function: no generator is known to the library
    return qg.Gate.from_function("wobble", lambda a: ref.gate_matrix("RY", a), 1)


@pytest.mark.parametrize("method", ["shift", "adjoint"])
def test_from_function_warns_that_it_is_approximate(method):
    gate = _function_gate()
    c = qg.Circuit(1).h(0).add(gate, 0)
    Z = qg.Observable({"X": 1.0})
    theta = np.array([0.4])
    with pytest.warns(UserWarning) as rec:
        g = _grad(c, Z, theta, method)
    text = " ".join(str(w.message) for w in rec)
    assert "approximate" in text and "finite difference" in text and "wobble" in text
    # d/da <X> after H, RY(a) is -sin(a) (exact: expm_frechet on the dense circuit agrees)
    exact = ref.gradient([("H", (0,), None), ("RY", (0,), (0, 1.0, 0.0))], theta, 1, ref.PX)
    assert np.isclose(exact[0], -np.sin(0.4))
    assert abs(g[0] - exact[0]) < 1e-7          # close, but a finite difference
    # the exact value itself does not warn
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        qg.expect(c, Z, theta)


def test_probabilities_jacobian_against_expm_frechet():
    rng = np.random.default_rng(9)
    n = 3
    ops = scramble(n, rng) + [("CRY", (0, 1), (0, 1.0, 0.0)), ("RZZ", (1, 2), (1, 1.0, 0.0)),
                              ("H", (2,), None), ("RX", (2,), (0, -1.0, 0.5))]
    c = to_circuit(ops, n)
    theta = np.array([0.8, -0.3])
    for qubits in (None, [2, 0]):
        exact = ref.probabilities_jacobian(ops, theta, n, qubits)
        for method in METHODS:
            J = jacobian(lambda t: qg.probabilities(c, t, qubits=qubits, gradient=method))(theta)
            np.testing.assert_allclose(J, exact, atol=TOL[method])


# -- random circuits: shift and adjoint agree (hypothesis) -----------------------------------
_NAMES = ONE_QUBIT + TWO_QUBIT + FIXED_1 + FIXED_2


@st.composite
def circuits(draw):
    n = draw(st.integers(1, 3))
    names = [x for x in _NAMES if x in ONE_QUBIT + FIXED_1 or n >= 2]
    length = draw(st.integers(1, 8))
    ops, m = [], 0
    for _ in range(length):
        name = draw(st.sampled_from(names))
        k = 1 if name in ONE_QUBIT + FIXED_1 else 2
        qubits = tuple(draw(st.permutations(range(n)))[:k])
        if name in FIXED_1 + FIXED_2:
            ops.append((name, qubits, None))
            continue
        share = m > 0 and draw(st.booleans())
        param = draw(st.integers(0, m - 1)) if share else m
        m = max(m, param + 1)
        scale = draw(st.sampled_from([1.0, -1.0, 2.0, 0.5]))
        ops.append((name, qubits, (param, scale, 0.0)))
    theta = draw(st.lists(st.floats(-np.pi, np.pi), min_size=m, max_size=m))
    word = draw(st.text("IXYZ", min_size=n, max_size=n).filter(lambda w: set(w) != {"I"}))
    return n, ops, np.array(theta, dtype=float), word


@given(circuits())
def test_shift_and_adjoint_agree_on_random_circuits(case):
    # shift rule vs adjoint to 1e-9; both also against expm_frechet (dense reference)
    n, ops, theta, word = case
    c = to_circuit(ops, n)
    obs = qg.Observable({word: 1.0})
    if c.n_params == 0:
        return
    gs = _grad(c, obs, theta, "shift")
    ga = _grad(c, obs, theta, "adjoint")
    np.testing.assert_allclose(gs, ga, atol=1e-9)
    np.testing.assert_allclose(ga, ref.gradient(ops, theta, n, ref.pauli(word)), atol=1e-9)


def test_bad_gradient_options_name_the_argument():
    c = qg.Circuit(1).ry(0)
    Z = qg.Observable({"Z": 1.0})
    with pytest.raises(ValueError, match="gradient"):
        qg.expect(c, Z, np.array([0.1]), gradient="backprop")
    with pytest.raises(ValueError, match="shots"):
        qg.expect(c, Z, np.array([0.1]), gradient="adjoint", shots=10)
    with pytest.raises(ValueError, match="step"):
        qg.expect(c, Z, np.array([0.1]), gradient="difference", step=-1.0)
    with pytest.raises(ValueError, match="step"):
        qg.expect(c, Z, np.array([0.1]), gradient="difference", step=1e-15)
    with pytest.raises(ValueError, match="stencil"):
        qg.expect(c, Z, np.array([0.1]), stencil="backward")


def test_forward_differences_and_steps():
    # forward differences: error ~ h |f''| / 2; central: ~ h**2 |f'''| / 6 (common practice)
    rng = np.random.default_rng(12)
    ops = scramble(2, rng) + [("RY", (0,), (0, 1.0, 0.0)), ("CRZ", (0, 1), (1, 1.0, 0.0))]
    c = to_circuit(ops, 2)
    obs, M = random_pauli_observable(2, rng)
    theta = np.array([0.5, 1.1])
    exact = ref.gradient(ops, theta, 2, M)
    norm = sum(abs(v) for v in obs.terms.values())      # bounds every derivative of <obs>
    for h in (1e-2, 1e-4):
        fwd = _grad(c, obs, theta, "difference", stencil="forward", step=h)
        cen = _grad(c, obs, theta, "difference", step=h)
        assert np.abs(fwd - exact).max() < h * norm / 2 + 1e-9
        assert np.abs(cen - exact).max() < h ** 2 * norm / 6 + 1e-9
    # the forward error is really first order: not also below the central bound at h = 1e-2
    fwd = _grad(c, obs, theta, "difference", stencil="forward", step=1e-2)
    assert np.abs(fwd - exact).max() > 1e-2 ** 2 * norm / 6


def test_function_gate_with_shots_uses_a_noise_safe_step():
    # with shots the default step is 0.1 (as for gradient="difference"), not 1e-5: 1e5 times less noise.
    # <X> after H, RY(a) is cos(a), derivative -sin(a) (expm_frechet reference below); with
    # 4000 shots per value the estimate's standard deviation is below 1/(0.2 sqrt(2 * 4000))
    # = 0.056, plus a truncation bias ~ 0.1**2 / 6; |error| < 0.3 fails with probability < 1e-6
    gate = _function_gate()
    c = qg.Circuit(1).h(0).add(gate, 0)
    theta = np.array([0.4])
    exact = ref.gradient([("H", (0,), None), ("RY", (0,), (0, 1.0, 0.0))], theta, 1, ref.PX)
    with pytest.warns(UserWarning, match="approximate"):
        g = _grad(c, qg.Observable({"X": 1.0}), theta, "shift", shots=4000, seed=2)
    assert abs(g[0] - exact[0]) < 0.3
