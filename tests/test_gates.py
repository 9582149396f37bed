"""Gate matrices against closed forms, against scipy.linalg.expm of their generators, and
unitarity; custom gates; spectra and frequencies.

The closed forms here are written as operator identities (projectors, Pauli sums,
``cos(a/2) I - i sin(a/2) P`` for an involutory P), while tests/reference writes the same
matrices entry by entry, so the two check each other as well as the package.
"""
import dataclasses

import numpy as np
import pytest
import scipy.linalg
from hypothesis import given, strategies as st

import qgradlib as qg
from qgradlib import gates
from reference import FIXED, GENERATORS, ROTATIONS

I, X = np.eye(2), np.array([[0, 1], [1, 0]], dtype=complex)
Y, Z = np.array([[0, -1j], [1j, 0]]), np.diag([1.0, -1.0]).astype(complex)
P0, P1 = np.diag([1.0, 0.0]), np.diag([0.0, 1.0])
kron = np.kron


def rotation(P, a):
    # expm(-i a P / 2) = cos(a/2) I - i sin(a/2) P for P @ P = I (common practice)
    return np.cos(a / 2) * np.eye(P.shape[0]) - 1j * np.sin(a / 2) * P


def controlled(U):
    # |0><0| (x) I + |1><1| (x) U, control on the first (more significant) qubit (common practice)
    return kron(P0, np.eye(2)) + kron(P1, U)


# common practice: the textbook definitions of the fixed gates
FIXED_CLOSED = {
    "H": (X + Z) / np.sqrt(2),
    "X": X, "Y": Y, "Z": Z,
    "S": np.diag([1, 1j]),
    "T": np.diag([1, np.exp(1j * np.pi / 4)]),
    "SX": np.exp(1j * np.pi / 4) * rotation(X, np.pi / 2),   # a square root of X
    "CNOT": controlled(X),
    "CZ": controlled(Z),
    "SWAP": (kron(I, I) + kron(X, X) + kron(Y, Y) + kron(Z, Z)) / 2,
}

# common practice: closed forms of the parametric gates, U(a) = expm(-1j a G)
ROT_CLOSED = {
    "RX": lambda a: rotation(X, a),
    "RY": lambda a: rotation(Y, a),
    "RZ": lambda a: rotation(Z, a),
    "PHASE": lambda a: np.diag([1, np.exp(1j * a)]),
    "CRX": lambda a: controlled(rotation(X, a)),
    "CRY": lambda a: controlled(rotation(Y, a)),
    "CRZ": lambda a: controlled(rotation(Z, a)),
    "CPHASE": lambda a: np.diag([1, 1, 1, np.exp(1j * a)]),
    "RXX": lambda a: rotation(kron(X, X), a),
    "RYY": lambda a: rotation(kron(Y, Y), a),
    "RZZ": lambda a: rotation(kron(Z, Z), a),
}

# common practice: the generators (PHASE(a) = diag(1, e^{ia}) = expm(-i a (-|1><1|)))
GEN_CLOSED = {
    "RX": X / 2, "RY": Y / 2, "RZ": Z / 2, "PHASE": -P1,
    "CRX": kron(P1, X / 2), "CRY": kron(P1, Y / 2), "CRZ": kron(P1, Z / 2),
    "CPHASE": -kron(P1, P1),
    "RXX": kron(X, X) / 2, "RYY": kron(Y, Y) / 2, "RZZ": kron(Z, Z) / 2,
}

ANGLES = [0.0, 0.37, -1.9, np.pi, 5.5, -13.0]
angles = st.floats(-50, 50, allow_nan=False, allow_infinity=False)


def test_every_standard_gate_is_covered():
    assert set(gates.STANDARD) == set(FIXED_CLOSED) | set(ROT_CLOSED)


@pytest.mark.parametrize("name", sorted(FIXED_CLOSED))
def test_fixed_gate_matrix_closed_form(name):
    g = gates.STANDARD[name]
    assert g.kind == "fixed" and not g.parametric
    assert g.n_qubits == int(np.log2(FIXED_CLOSED[name].shape[0]))
    np.testing.assert_allclose(g.matrix(), FIXED_CLOSED[name], atol=1e-14)
    np.testing.assert_allclose(FIXED[name], FIXED_CLOSED[name], atol=1e-14)  # the reference too


def test_fixed_gate_identities():
    # common practice: SX^2 = X, S^2 = Z, T^2 = S, H^2 = I
    m = {k: gates.STANDARD[k].matrix() for k in ("SX", "S", "T", "H", "X", "Z")}
    np.testing.assert_allclose(m["SX"] @ m["SX"], m["X"], atol=1e-14)
    np.testing.assert_allclose(m["S"] @ m["S"], m["Z"], atol=1e-14)
    np.testing.assert_allclose(m["T"] @ m["T"], m["S"], atol=1e-14)
    np.testing.assert_allclose(m["H"] @ m["H"], np.eye(2), atol=1e-14)


@pytest.mark.parametrize("name", sorted(ROT_CLOSED))
def test_parametric_gate_closed_form_and_expm(name):
    g = gates.STANDARD[name]
    G = GEN_CLOSED[name]
    assert g.kind == "generator" and g.parametric
    np.testing.assert_allclose(g.generator, G, atol=1e-15)
    np.testing.assert_allclose(GENERATORS[name], G, atol=1e-15)
    for a in ANGLES:
        closed = ROT_CLOSED[name](a)
        np.testing.assert_allclose(g.matrix(a), closed, atol=1e-13)
        # scipy.linalg.expm of the generator, the definition U(a) = expm(-1j a G)
        np.testing.assert_allclose(g.matrix(a), scipy.linalg.expm(-1j * a * G), atol=1e-12)
        np.testing.assert_allclose(ROTATIONS[name](a), closed, atol=1e-13)


@pytest.mark.parametrize("name", sorted(ROT_CLOSED))
def test_batched_matrix_matches_scalar(name):
    g = gates.STANDARD[name]
    a = np.array(ANGLES)
    m = g.matrix(a)
    assert m.shape == (a.size, g.dim, g.dim) and m.dtype == complex
    for k, x in enumerate(a):
        np.testing.assert_allclose(m[k], ROT_CLOSED[name](x), atol=1e-13)


@pytest.mark.parametrize("name", sorted(ROT_CLOSED))
@given(a=angles)
def test_unitary_at_random_angles(name, a):
    U = gates.STANDARD[name].matrix(a)
    np.testing.assert_allclose(U.conj().T @ U, np.eye(U.shape[0]), atol=1e-12)


def _random_hermitian(rng, d):
    A = rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d))
    return (A + A.conj().T) / 2


@given(seed=st.integers(0, 2**32 - 1), a=angles, k=st.integers(1, 3))
def test_custom_generator_gate_against_expm(seed, a, k):
    rng = np.random.default_rng(seed)
    M = _random_hermitian(rng, 2 ** k)
    g = qg.Gate.from_generator("mixer", generator=M)
    assert g.n_qubits == k and g.parametric and not g.diagonal
    U = g.matrix(a)
    np.testing.assert_allclose(U, scipy.linalg.expm(-1j * a * M), atol=1e-10)  # scipy expm
    np.testing.assert_allclose(U.conj().T @ U, np.eye(2 ** k), atol=1e-10)


def test_custom_diagonal_generator_takes_phase_path_and_matches_expm():
    D = np.diag([0.0, 1.0, 2.7, -0.4])
    g = qg.Gate.from_generator("detune", D)
    assert g.diagonal
    a = np.array([0.3, -2.0, 9.1])
    m = g.matrix(a)
    for k, x in enumerate(a):
        np.testing.assert_allclose(m[k], scipy.linalg.expm(-1j * x * D), atol=1e-13)  # scipy expm
    np.testing.assert_allclose(g.diagonal_values(a), np.exp(-1j * np.outer(a, np.diag(D))), atol=1e-13)


def test_custom_fixed_gate():
    U = scipy.linalg.expm(-1j * 0.7 * kron(X, Y))     # unitary by construction
    g = qg.Gate.fixed("entangler", U)
    assert g.kind == "fixed" and g.n_qubits == 2 and not g.parametric
    np.testing.assert_allclose(g.matrix(), U, atol=1e-15)
    with pytest.raises(ValueError, match="unitary"):
        qg.Gate.fixed("entangler", U + 1e-3)


def test_gates_are_frozen_values():
    g = gates.RX
    with pytest.raises(dataclasses.FrozenInstanceError):
        g.name = "other"
    with pytest.raises(ValueError):  # the generator array is read-only
        g.generator[0, 0] = 1.0
    m = g.matrix(0.2)
    m[0, 0] = 99.0                   # the returned matrix is the caller's to change
    assert g.matrix(0.2)[0, 0] != 99.0


def _positive_differences(ev):
    # independent of the package: every distinct positive difference of eigenvalues
    d = sorted({round(float(a - b), 9) for a in ev for b in ev if a - b > 1e-9})
    return np.array(d)


@pytest.mark.parametrize("name", sorted(ROT_CLOSED))
def test_spectrum_and_frequencies(name):
    g = gates.STANDARD[name]
    ev = np.linalg.eigvalsh(GEN_CLOSED[name])
    np.testing.assert_allclose(np.sort(g.spectrum), np.sort(ev), atol=1e-12)
    np.testing.assert_allclose(g.frequencies, _positive_differences(ev), atol=1e-9)


def test_frequencies_of_known_gates():
    # common practice: Pauli rotations have the single frequency 1; controlled rotations
    # have 1/2 and 1 (eigenvalues 0, 0, +-1/2), hence their four-term rule
    assert gates.RX.frequencies.tolist() == [1.0]
    assert gates.PHASE.frequencies.tolist() == [1.0]
    np.testing.assert_allclose(gates.CRY.frequencies, [0.5, 1.0])
    assert gates.CRX.shift_rule.n_terms == 4
    g = qg.Gate.from_generator("hop", np.diag([0.0, 1.0, 2.7, 0.0]))
    np.testing.assert_allclose(g.frequencies, [1.0, 1.7, 2.7])


@pytest.mark.parametrize("name", ["RX", "RY", "RZ", "RXX", "RYY", "RZZ", "PHASE"])
def test_two_term_rule_of_single_frequency_gates(name):
    # common practice: shifts +-pi/2 with coefficients +-1/2
    r = gates.STANDARD[name].shift_rule
    pairs = sorted(zip(r.shifts.tolist(), r.coefficients.tolist()))
    np.testing.assert_allclose(pairs, [(-np.pi / 2, -0.5), (np.pi / 2, 0.5)], atol=1e-12)


@pytest.mark.parametrize("name", sorted(ROT_CLOSED))
def test_period_is_a_period_up_to_global_phase(name):
    g = gates.STANDARD[name]
    T = g.period
    a = 0.81
    U, V = g.matrix(a), g.matrix(a + T)
    phase = np.vdot(U.ravel(), V.ravel()) / g.dim
    assert abs(abs(phase) - 1) < 1e-12
    np.testing.assert_allclose(V, phase * U, atol=1e-12)
    # and T is the smallest such: half of it is not a period
    W = g.matrix(a + T / 2)
    assert not np.allclose(np.abs(np.vdot(U.ravel(), W.ravel())) / g.dim, 1.0)


def test_fixed_gate_has_no_spectrum():
    with pytest.raises(ValueError, match="spectrum"):
        gates.H.spectrum
