"""Engine kernels against a plain numpy.einsum contraction, for every qubit position and batch.

The reference reshapes the state to (B, 2, ..., 2) and contracts the gate tensor with the
target axes by numpy.einsum (a reference library routine, independent of the kernels).
"""
import string

import numpy as np
import pytest
from hypothesis import given, strategies as st

from qgradlib.engine import apply_diagonal, apply_matrix
from qgradlib.engine.kernels import apply_monomial, monomial_structure


def einsum_reference(psi, n, mat, qubits):
    """(B, 2**n) state, (d, d) or (B, d, d) matrix on ``qubits`` (first = most significant)."""
    B = psi.shape[0]
    k = len(qubits)
    letters = string.ascii_letters
    state = [letters[i] for i in range(n)]
    outs = [letters[n + i] for i in range(k)]
    result = list(state)
    for j, q in enumerate(qubits):
        result[q] = outs[j]
    per_row = mat.ndim == 3
    g = mat.reshape(((B,) if per_row else ()) + (2,) * (2 * k))
    gsub = ("Z" if per_row else "") + "".join(outs) + "".join(state[q] for q in qubits)
    expr = f"{gsub},Z{''.join(state)}->Z{''.join(result)}"
    return np.einsum(expr, g, psi.reshape((B,) + (2,) * n)).reshape(B, -1)


def _unitary(rng, d, lead=()):
    z = rng.normal(size=lead + (d, d)) + 1j * rng.normal(size=lead + (d, d))
    q, r = np.linalg.qr(z)
    return q


@st.composite
def cases(draw, k):
    n = draw(st.integers(k, 7))
    qubits = tuple(draw(st.permutations(range(n)))[:k])
    B = draw(st.integers(1, 3))
    per_row = draw(st.booleans())
    real = draw(st.booleans())
    seed = draw(st.integers(0, 2 ** 32 - 1))
    return n, qubits, B, per_row, real, seed


def _state(rng, B, n):
    return rng.normal(size=(B, 2 ** n)) + 1j * rng.normal(size=(B, 2 ** n))


def _check_matrix(case, d, use_out):
    n, qubits, B, per_row, real, seed = case
    rng = np.random.default_rng(seed)
    psi = _state(rng, B, n)
    m = _unitary(rng, d, (B,) if per_row else ())
    if real:
        m = m.real + 0j
    before = psi.copy()
    out = np.empty_like(psi) if use_out else None
    got = apply_matrix(psi, n, m, qubits, out=out)
    assert out is None or got is out
    assert np.allclose(got, einsum_reference(before, n, m, qubits), atol=1e-12)
    assert np.array_equal(psi, before)  # out of place: the input is untouched


@given(cases(1), st.booleans())
def test_single_qubit_matrix_matches_einsum(case, use_out):
    _check_matrix(case, 2, use_out)


@given(cases(2), st.booleans())
def test_two_qubit_matrix_matches_einsum_any_pair_and_order(case, use_out):
    _check_matrix(case, 4, use_out)


@given(cases(3), st.booleans())
def test_three_qubit_matrix_matches_einsum(case, use_out):
    _check_matrix(case, 8, use_out)


@given(cases(2), st.sampled_from(["shared", "rows", "signs"]))
def test_diagonal_in_place_matches_einsum(case, kind):
    n, qubits, B, _, _, seed = case
    rng = np.random.default_rng(seed)
    psi = _state(rng, B, n)
    if kind == "signs":
        d = rng.choice([-1.0, 1.0], size=4).astype(complex)
    else:
        d = np.exp(1j * rng.normal(size=(B, 4) if kind == "rows" else 4))
    mats = np.einsum("...i,ij->...ij", d, np.eye(4))
    expected = einsum_reference(psi, n, mats, qubits)
    got = apply_diagonal(psi, n, d, qubits)
    assert got is psi  # in place
    assert np.allclose(psi, expected, atol=1e-12)


@given(cases(2), st.booleans())
def test_monomial_copy_kernel_matches_einsum(case, per_row_phases):
    n, qubits, B, _, _, seed = case
    rng = np.random.default_rng(seed)
    psi = _state(rng, B, n)
    perm = rng.permutation(4)
    phases = np.exp(1j * rng.normal(size=(B, 4) if per_row_phases else 4))
    mats = np.zeros(phases.shape[:-1] + (4, 4), dtype=complex)
    mats[..., np.arange(4), perm] = phases
    out = np.empty_like(psi)
    apply_monomial(psi, n, perm, phases, qubits, out)
    assert np.allclose(out, einsum_reference(psi, n, mats, qubits), atol=1e-12)


def test_monomial_structure_recognises_permutations_with_phases_only():
    # common practice: CNOT and SWAP are permutation matrices, a Hadamard is not
    cnot = np.array([[1, 0, 0, 0], [0, 1, 0, 0], [0, 0, 0, 1], [0, 0, 1, 0]], dtype=complex)
    cols, ph = monomial_structure(cnot)
    assert cols.tolist() == [0, 1, 3, 2] and np.allclose(ph, 1)
    assert monomial_structure(np.array([[1, 1], [1, -1]]) / np.sqrt(2)) is None
    cols, ph = monomial_structure(np.array([[0, -1j], [1j, 0]]))
    assert cols.tolist() == [1, 0] and np.allclose(ph, [-1j, 1j])


def test_strided_and_real_inputs_are_handled_or_refused():
    rng = np.random.default_rng(0)
    n = 3
    big = _state(rng, 2, n + 1)
    psi = big[:, ::2]                      # a strided view of a (2, 8) batch
    m = _unitary(rng, 2)
    expected = einsum_reference(np.ascontiguousarray(psi), n, m, (1,))
    assert np.allclose(apply_matrix(psi, n, m, (1,)), expected, atol=1e-12)
    d = np.exp(1j * rng.normal(size=2))
    expected = einsum_reference(np.ascontiguousarray(psi), n, np.diag(d), (2,))
    apply_diagonal(psi, n, d, (2,))         # in place, through the strided view
    assert np.allclose(psi, expected, atol=1e-12)
    real = np.ones((1, 4))
    apply_diagonal(real, 2, np.array([1.0, -1.0]), (0,))
    assert real.tolist() == [[1.0, 1.0, -1.0, -1.0]]
    with pytest.raises(TypeError, match="complex"):
        apply_diagonal(np.ones((1, 4)), 2, np.array([1.0, 1j]), (0,))
    with pytest.raises(ValueError, match="out must be"):
        apply_matrix(np.ones((1, 4), complex), 2, m, (0,), out=np.empty((1, 3), complex))
