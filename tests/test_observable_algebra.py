"""Observable algebra (products, commutators, division, exact equality), variance, counts and
differentiable coefficients, checked against dense matrices built by numpy.kron (tests/reference)."""
import numpy as np
import pytest
import scipy.sparse
from autograd import grad
from hypothesis import given, strategies as st

import qgradlib as qg
from reference import circuit_state, observable_dense

words = st.dictionaries(st.text("IXYZ", min_size=2, max_size=2),
                        st.floats(-2, 2, allow_nan=False).map(lambda v: round(v, 3)),
                        min_size=1, max_size=4)


def _m(H):
    return H.matrix().toarray()


@given(words, words)
def test_products_against_dense_matrices(a, b):
    A, B = qg.Observable(a), qg.Observable(b)
    MA, MB = observable_dense(a, 2), observable_dense(b, 2)
    prod = MA @ MB
    if np.allclose(prod, prod.conj().T, atol=1e-12):
        np.testing.assert_allclose(_m(A @ B), prod, atol=1e-12)
    else:
        with pytest.raises(ValueError, match="not Hermitian"):
            A @ B
    np.testing.assert_allclose(_m(qg.commutator(A, B)), -1j * (MA @ MB - MB @ MA), atol=1e-12)
    np.testing.assert_allclose(_m(qg.commutator(A, B, anti=True)), MA @ MB + MB @ MA, atol=1e-12)
    np.testing.assert_allclose(_m(A @ A), MA @ MA, atol=1e-12)


def test_pauli_phases_and_simplification():
    # common practice: XY = iZ, YZ = iX, ZX = iY; the products of a Pauli with itself is I
    X, Y, Z = (qg.Observable({p: 1.0}) for p in "XYZ")
    assert qg.commutator(X, Y).terms == {"Z": 2.0}         # -i [X, Y] = -i (2iZ)
    assert qg.commutator(Y, Z).terms == {"X": 2.0}
    assert qg.commutator(Z, X).terms == {"Y": 2.0}
    assert (X @ X).terms == {"I": 1.0}
    H = qg.Observable({"ZZ": 1.0, "XI": 0.5})
    # ZZ.XI + XI.ZZ cancels (they anticommute): only the identity is left
    assert (H @ H).terms == {"II": 1.25}


def test_scalar_arithmetic_and_exact_equality():
    H = qg.Observable({"ZI": 1.0, "IX": -0.5})
    assert H / 2 == 0.5 * H and -H == H * -1
    assert H + H - H == H
    assert H != qg.Observable({"ZI": 1.0, "IX": -0.5 + 1e-15})
    assert hash(H) == hash(qg.Observable({"IX": -0.5, "ZI": 1.0}))
    assert H - H == qg.Observable({"II": 0.0})
    with pytest.raises(ZeroDivisionError):
        H / 0
    with pytest.raises(TypeError):
        H * 1j


def test_from_matrix_takes_sparse_and_dense():
    H = qg.Observable({"XZ": 0.5, "YY": -1.0})
    for m in (H.matrix(), H.matrix().toarray(), scipy.sparse.coo_matrix(H.matrix())):
        G = qg.Observable.from_matrix(m)
        np.testing.assert_allclose(G.dense, observable_dense(H.terms, 2), atol=1e-15)
    with pytest.raises(ValueError, match="Hermitian"):
        qg.Observable.from_matrix(scipy.sparse.csr_matrix(np.array([[0, 1], [0, 0]])))


def test_variance_and_its_gradient_against_the_reference():
    c = qg.Circuit(2).ry(0).cnot(0, 1).rx(1).ry(0)
    H = qg.Observable({"ZZ": 1.0, "XI": 0.5, "IY": -0.3})
    M = observable_dense(H.terms, 2)

    def ref(t):
        psi = circuit_state(c, t)
        return float(np.real(np.vdot(psi, M @ M @ psi) - np.vdot(psi, M @ psi) ** 2))

    t = np.array([0.3, -0.7, 1.1])
    assert qg.variance(c, H, t) == pytest.approx(ref(t), abs=1e-12)
    h = 1e-6    # central differences of the reference, error ~1e-10
    g_ref = np.array([(ref(t + h * e) - ref(t - h * e)) / (2 * h) for e in np.eye(3)])
    for method in ("shift", "adjoint"):
        np.testing.assert_allclose(grad(lambda x: qg.variance(c, H, x, gradient=method))(t),
                                   g_ref, atol=1e-7)


def test_term_lists_and_traced_coefficients():
    c = qg.Circuit(2).ry(0).cnot(0, 1).rx(1)
    t = np.array([0.3, 0.5])
    words_ = ["ZZ", "XI", "IY"]
    terms = [qg.Observable({w: 1.0}) for w in words_]
    values = qg.expect(c, terms, t)
    psi = circuit_state(c, t)
    ref = [np.real(np.vdot(psi, observable_dense({w: 1.0}, 2) @ psi)) for w in words_]
    np.testing.assert_allclose(values, ref, atol=1e-12)

    def energy(w):
        return qg.expect(c, qg.Observable({"ZZ": w[0], "XI": w[1], "IY": w[2]}), t)

    w = np.array([0.7, -0.2, 0.4])
    assert energy(w) == pytest.approx(float(np.dot(w, ref)), abs=1e-12)
    # the energy is linear in the coefficients: its gradient is the vector of term values
    np.testing.assert_allclose(grad(energy)(w), ref, atol=1e-12)
    # both at once: coefficients and angles, against the reference's differences in theta
    both = grad(lambda tw: qg.expect(c, qg.Observable({"ZZ": tw[2], "XI": tw[3]}), tw[:2]))
    g = both(np.array([0.3, 0.5, 0.7, -0.2]))
    np.testing.assert_allclose(g[2:], ref[:2], atol=1e-12)
    with pytest.raises(TypeError, match="cannot differentiate observable coefficients"):
        grad(lambda w: qg.estimate(c, qg.Observable({"ZZ": w[0]}), t, shots=10, seed=0).value)(w)


def test_counts_agree_with_sample():
    c = qg.Circuit(3).h(0).cnot(0, 1).ry(2)
    t = np.array([0.9])
    got = qg.counts(c, t, shots=400, seed=7)
    idx = qg.sample(c, t, shots=400, seed=7)
    assert sum(got.values()) == 400
    assert got == {format(i, "03b"): int(k) for i, k in enumerate(np.bincount(idx, minlength=8)) if k}
    # qubit 0 leftmost: X on qubit 0 of 3 reads "100"
    assert qg.counts(qg.Circuit(3).x(0), np.zeros(0), shots=3, seed=0) == {"100": 3}
    batch = qg.counts(c, np.array([[0.0], [np.pi]]), shots=10, seed=1)
    assert [sorted({k[-1] for k in d}) for d in batch] == [["0"], ["1"]]
