"""Observables: matrices against kron-built ones, arithmetic, dense parts, and the exact
ground energy of the periodic transverse-field Ising chain against its free-fermion
closed form."""
import numpy as np
import pytest
import scipy.sparse
import scipy.sparse.linalg
from hypothesis import given, strategies as st

import qgradlib as qg
from reference import circuit_state, dense_expectation, observable_dense, pauli_dense

words = st.integers(1, 5).flatmap(
    lambda n: st.dictionaries(st.text("IXYZ", min_size=n, max_size=n),
                              st.floats(-3, 3, allow_nan=False), min_size=1, max_size=6))


def _dense(M):
    return M.toarray() if scipy.sparse.issparse(M) else np.asarray(M)


@given(words)
def test_matrix_against_kron(terms):
    obs = qg.Observable(terms)
    n = len(next(iter(terms)))
    M = obs.matrix()
    assert scipy.sparse.issparse(M) and M.shape == (2 ** n, 2 ** n)
    np.testing.assert_allclose(_dense(M), observable_dense(terms, n), atol=1e-12)


def test_single_letters_and_bit_order():
    # common practice: Pauli matrices; qubit 0 is the leftmost letter and kron factor
    np.testing.assert_array_equal(_dense(qg.Observable({"Y": 1.0}).matrix()), [[0, -1j], [1j, 0]])
    np.testing.assert_array_equal(_dense(qg.Observable({"Z": 1.0}).matrix()), np.diag([1, -1]))
    # Z on qubit 0 of 2: basis |q0 q1> = |10> (index 2) has eigenvalue -1
    np.testing.assert_array_equal(np.diag(_dense(qg.Observable({"ZI": 1.0}).matrix())),
                                  [1, 1, -1, -1])
    np.testing.assert_array_equal(_dense(qg.Observable({"XY": 1.0}).matrix()),
                                  np.kron(pauli_dense("X"), pauli_dense("Y")))


def test_repeated_strings_are_summed_and_lower_case_accepted():
    obs = qg.Observable({"zx": 1.5, "ZX": -0.5})
    assert obs.terms == {"ZX": 1.0}
    assert obs.n_qubits == 2


def test_arithmetic_matches_dense_arithmetic():
    rng = np.random.default_rng(11)
    A = {"XZI": 0.7, "IYY": -1.2, "ZZZ": 0.3}
    B = {"XZI": -0.2, "YII": 2.0}
    D = rng.normal(size=(8, 8)) + 1j * rng.normal(size=(8, 8))
    D = D + D.conj().T
    a, b, d = qg.Observable(A), qg.Observable(B), qg.Observable.from_matrix(D)
    MA, MB = observable_dense(A, 3), observable_dense(B, 3)
    cases = {
        "a+b": (a + b, MA + MB), "a-b": (a - b, MA - MB), "2.5a": (2.5 * a, 2.5 * MA),
        "a*-3": (a * -3, -3 * MA), "-b": (-b, -MB), "a+d": (a + d, MA + D),
        "d-b": (d - b, D - MB), "0.5(a+d)": (0.5 * (a + d), 0.5 * (MA + D)),
        "np.float64": (np.float64(2.0) * a, 2 * MA),
    }
    for label, (obs, M) in cases.items():
        assert isinstance(obs, qg.Observable), label
        np.testing.assert_allclose(_dense(obs.matrix()), M, atol=1e-12, err_msg=label)
    assert (a + b).terms == pytest.approx({"XZI": 0.5, "IYY": -1.2, "ZZZ": 0.3, "YII": 2.0})
    assert a + b == b + a and a - a == qg.Observable({"III": 0.0})
    assert (a + d).is_pauli is False and a.is_pauli
    assert (a + d).terms == a.terms                         # the dense part is held apart
    np.testing.assert_allclose((a + d).dense, D)


def test_from_matrix_round_trip_and_hermitian_part():
    rng = np.random.default_rng(12)
    M = rng.normal(size=(4, 4)) + 1j * rng.normal(size=(4, 4))
    M = M + M.conj().T
    obs = qg.Observable.from_matrix(M)
    assert obs.n_qubits == 2 and obs.terms == {}
    np.testing.assert_allclose(_dense(obs.matrix()), M, atol=1e-14)


def test_values_are_immutable():
    a = qg.Observable({"ZZ": 1.0})
    a.terms["ZZ"] = 5.0                 # a copy: the observable is unchanged
    assert a.terms == {"ZZ": 1.0}
    d = qg.Observable.from_matrix(np.eye(2))
    with pytest.raises(ValueError):
        d.dense[0, 0] = 3.0


def test_expectation_is_linear_in_the_observable():
    c = qg.Circuit(3).h(0).ry(1).cnot(0, 2).crx(1, 2).rxx(2, 0)
    theta = np.array([0.4, -1.1, 0.8])
    a, b = qg.Observable({"XIZ": 1.0, "YYI": -0.4}), qg.Observable({"IZX": 0.9})
    d = qg.Observable.from_matrix(np.diag(np.arange(8.0)))
    obs = 2.0 * a - b + d
    ref = dense_expectation(circuit_state(c, theta), _dense(obs.matrix()))
    assert np.isclose(qg.expect(c, obs, theta), ref, atol=1e-12)
    parts = qg.expect(c, [a, b, d], theta)
    assert np.isclose(qg.expect(c, obs, theta), parts @ [2.0, -1.0, 1.0], atol=1e-12)


# -- transverse-field Ising ring -----------------------------------------------------------
def ising_ring(N, J, g):
    """H = -J sum_i Z_i Z_{i+1} - g sum_i X_i with Z_N = Z_0 (periodic)."""
    terms = {}
    for i in range(N):
        zz = ["I"] * N
        zz[i] = zz[(i + 1) % N] = "Z"
        x = ["I"] * N
        x[i] = "X"
        terms["".join(zz)] = terms.get("".join(zz), 0.0) - J
        terms["".join(x)] = -g
    return qg.Observable(terms)


def free_fermion_ground_energy(N, J, g, momenta="antiperiodic"):
    """Pfeuty, Annals of Physics 57, 79 (1970), Eqs. (2.9)-(2.15) in our notation.

    Jordan-Wigner fermions diagonalise H as sum_k eps_k (eta_k^dag eta_k - 1/2) with
    eps_k = 2 sqrt(J^2 + g^2 - 2 J g cos k), so E0 = -sum_k sqrt(J^2 + g^2 - 2 J g cos k).
    On a ring the boundary bond carries the parity P = prod_i X_i: in the even sector
    (P = +1) the fermions are antiperiodic, k = +-(2j - 1) pi / N, j = 1..N/2 (N even).
    The ground state lies in that sector: H is stoquastic in the Z basis (off-diagonal
    entries -g <= 0) and connected, so its ground state has positive amplitudes
    (Perron-Frobenius) and P, which permutes basis states, maps it to itself with +1.
    ``momenta="periodic"`` gives the wrong set k = 2 pi j / N, to show the check can fail.
    """
    if momenta == "antiperiodic":
        k = np.array([s * (2 * j - 1) * np.pi / N for j in range(1, N // 2 + 1) for s in (1, -1)])
    else:
        k = 2 * np.pi * np.arange(N) / N
    return -np.sum(np.sqrt(J ** 2 + g ** 2 - 2 * J * g * np.cos(k)))


@pytest.mark.parametrize("N, J, g", [(4, 1.0, 0.3), (6, 1.0, 1.0), (8, 0.8, 1.7),
                                     (10, 1.0, 0.9), (12, 1.0, 1.0), (6, 1.3, 0.5)])
def test_ising_ring_ground_energy_against_pfeuty(N, J, g):
    H = ising_ring(N, J, g)
    # scipy.sparse.linalg.eigsh on Observable.matrix()
    E0 = scipy.sparse.linalg.eigsh(H.matrix(), k=1, which="SA")[0][0]
    # Pfeuty, Annals of Physics 57, 79 (1970): free-fermion closed form, antiperiodic sector
    assert abs(E0 - free_fermion_ground_energy(N, J, g)) < 1e-9
    # the wrong momentum set misses by more than the tolerance: this check can fail
    assert abs(E0 - free_fermion_ground_energy(N, J, g, "periodic")) > 1e-5


def test_ising_limits_from_memory():
    # from memory: g = 0 gives -N J (aligned spins); J = 0 gives -N g (all along +X).
    # Checked another way: the closed form above reduces to the same values.
    for N in (4, 6):
        for J, g in ((1.0, 0.0), (0.0, 1.5)):
            E0 = np.linalg.eigvalsh(_dense(ising_ring(N, J, g).matrix()))[0]
            assert np.isclose(E0, -N * max(J, g))
            assert np.isclose(free_fermion_ground_energy(N, J, g), -N * max(J, g))
