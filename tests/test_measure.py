"""Expectations and O|psi> by index arithmetic against dense matrices.

Reference: Observable.matrix() (a scipy.sparse CSR built from Kronecker products), applied
with plain matrix products; on many qubits, scipy.sparse Kronecker products of the Pauli
matrices built here.
"""
import numpy as np
import pytest
from hypothesis import given, strategies as st

import qgradlib as qg
from qgradlib.engine.measure import apply_observables, expectations


@st.composite
def observables(draw):
    n = draw(st.integers(1, 6))
    words = draw(st.lists(st.text("IXYZ", min_size=n, max_size=n), min_size=1, max_size=6))
    coeffs = draw(st.lists(st.floats(-2, 2), min_size=len(words), max_size=len(words)))
    return n, qg.Observable(dict(zip(words, coeffs)))


@given(observables(), st.integers(1, 3), st.integers(0, 2 ** 31))
def test_expectations_match_sparse_matrix(case, B, seed):
    n, H = case
    rng = np.random.default_rng(seed)
    psi = rng.normal(size=(B, 2 ** n)) + 1j * rng.normal(size=(B, 2 ** n))
    M = H.matrix()
    expected = np.real(np.einsum("bi,bi->b", psi.conj(), (M @ psi.T).T))
    assert np.allclose(expectations(psi, n, [H])[:, 0], expected, atol=1e-10)


@given(observables(), st.integers(1, 3), st.integers(0, 2 ** 31))
def test_weighted_observable_application_matches_sparse_matrix(case, B, seed):
    n, H = case
    rng = np.random.default_rng(seed)
    H2 = qg.Observable({"".join(rng.choice(list("IXYZ"), n)): 0.7})
    psi = rng.normal(size=(B, 2 ** n)) + 1j * rng.normal(size=(B, 2 ** n))
    w = rng.normal(size=(B, 2))
    expected = (w[:, 0, None] * (H.matrix() @ psi.T).T + w[:, 1, None] * (H2.matrix() @ psi.T).T)
    out = np.empty_like(psi)
    scratch = np.empty_like(psi)
    got = apply_observables(psi, n, [H, H2], w, out=out, scratch=scratch)
    assert got is out
    assert np.allclose(got, expected, atol=1e-10)


def test_observable_matrix_signs_are_plus_minus_one():
    # common practice: Y = [[0, -i], [i, 0]] and Z = diag(1, -1) (the matrix of a Pauli word)
    assert np.allclose(qg.Observable({"Y": 1.0}).matrix().toarray(), [[0, -1j], [1j, 0]])
    assert np.allclose(qg.Observable({"ZI": 1.0}).matrix().toarray(), np.diag([1, 1, -1, -1]))


def _sparse_word(word):
    # reference: the Pauli matrices (common practice) as scipy.sparse Kronecker products,
    # qubit 0 the leftmost factor; nothing of qgradlib's
    import scipy.sparse as sp

    single = {"I": sp.identity(2, format="csr"), "X": sp.csr_matrix([[0, 1], [1, 0]]),
              "Y": sp.csr_matrix(np.array([[0, -1j], [1j, 0]])), "Z": sp.csr_matrix([[1, 0], [0, -1]])}
    m = single[word[0]]
    for c in word[1:]:
        m = sp.kron(m, single[c], format="csr")
    return m


@pytest.mark.parametrize("n", [13, 19])
def test_one_letter_words_and_z_words_on_many_qubits_match_sparse_kronecker_products(n):
    # 13 qubits: past the laid-out readout of few qubits; 19: read in pieces (READ_PIECE).
    # Words with one X or Y letter take the dot product of two float views (any qubit but
    # the last), the others the general path
    rng = np.random.default_rng(n)
    words = {}
    for q in range(n):
        words["I" * q + "X" + "I" * (n - q - 1)] = float(rng.normal())
        words["I" * q + "Y" + "I" * (n - q - 1)] = float(rng.normal())
    for q in range(n - 1):
        words["I" * q + "ZZ" + "I" * (n - q - 2)] = float(rng.normal())
    words["Z" * n] = 0.3
    words["X" + "I" * (n - 2) + "Z"] = -0.4
    H = qg.Observable(words)
    psi = rng.normal(size=(2, 2 ** n)) + 1j * rng.normal(size=(2, 2 ** n))
    psi /= np.linalg.norm(psi, axis=1, keepdims=True)
    expected = np.zeros(2)
    for word, c in words.items():
        expected += c * np.real(np.einsum("bi,bi->b", psi.conj(), (_sparse_word(word) @ psi.T).T))
    assert np.max(np.abs(expectations(psi, n, [H])[:, 0] - expected)) <= 1e-12
