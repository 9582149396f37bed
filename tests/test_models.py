"""Models: spin-chain and MaxCut observables, layered and QAOA circuits, against outside references."""
from functools import reduce

import numpy as np
import pytest
import scipy.sparse.linalg as sla

import qgradlib as qg
from qgradlib import models

_P = {"I": np.eye(2), "X": np.array([[0, 1], [1, 0]]), "Y": np.array([[0, -1j], [1j, 0]]),
      "Z": np.diag([1.0, -1.0])}


def kron_word(word):
    # independent dense build: qubit 0 is the leftmost kron factor (big-endian convention)
    return reduce(np.kron, [_P[c] for c in word])


def kron_matrix(obs):
    return sum(c * kron_word(w) for w, c in obs.terms.items())


def test_observable_matrix_matches_kron_products_for_z_and_y_terms():
    # regression: the sparse build's parity sign once wrapped around in uint8 (255 for -1)
    H = qg.Observable({"ZIY": 0.7, "XZZ": -1.3, "IYI": 0.4, "ZZZ": 0.25})
    assert np.allclose(H.matrix().toarray(), kron_matrix(H), atol=1e-14)


# -- spin chains ----------------------------------------------------------------------------------
def test_ising_chain_terms_and_sign_convention():
    H = models.ising_chain(3, J=0.7, g=0.2)
    assert H.terms == {"ZZI": -0.7, "IZZ": -0.7, "ZIZ": -0.7, "XII": -0.2, "IXI": -0.2, "IIX": -0.2}
    assert "ZIZ" not in models.ising_chain(3, periodic=False).terms


@pytest.mark.parametrize("n,J,g", [(4, 1.0, 1.0), (6, 1.0, 0.5), (6, 0.8, 1.3)])
def test_ising_ground_energy_matches_pfeuty_and_eigsh(n, J, g):
    # Pfeuty, Annals of Physics 57, 79 (1970): free-fermion modes 2 sqrt(J^2 + g^2 - 2 J g cos k);
    # for even n the ground state has antiperiodic momenta k = (2m + 1) pi / n
    k = (2 * np.arange(n) + 1) * np.pi / n
    pfeuty = -np.sum(np.sqrt(J ** 2 + g ** 2 - 2 * J * g * np.cos(k)))
    H = models.ising_chain(n, J=J, g=g)
    assert sla.eigsh(H.matrix(), k=1, which="SA")[0][0] == pytest.approx(pfeuty, abs=1e-10)  # scipy eigsh
    assert np.allclose(H.matrix().toarray(), kron_matrix(H))


def test_heisenberg_two_site_singlet_energy():
    # common practice: sigma_1 . sigma_2 has eigenvalue -3 on the singlet and +1 on the triplet
    ev = np.linalg.eigvalsh(models.heisenberg_chain(2, J=1.5, periodic=False).matrix().toarray())
    assert np.allclose(ev, [-4.5, 1.5, 1.5, 1.5])


def test_heisenberg_ring_of_four():
    # from memory: the S = 1/2 antiferromagnetic ring of 4 sites has E0 = -2 J in spin operators,
    # i.e. -8 J with Pauli matrices; checked against scipy eigsh of an independent kron build
    H = models.heisenberg_chain(4, J=1.0)
    assert np.linalg.eigvalsh(kron_matrix(H))[0] == pytest.approx(-8.0, abs=1e-10)
    assert sla.eigsh(H.matrix(), k=1, which="SA")[0][0] == pytest.approx(-8.0, abs=1e-10)


def test_heisenberg_anisotropy_and_field_terms():
    H = models.heisenberg_chain(3, J=2.0, periodic=False, anisotropy=0.5, field=0.3)
    assert H.terms == {"XXI": 2.0, "YYI": 2.0, "ZZI": 1.0, "IXX": 2.0, "IYY": 2.0, "IZZ": 1.0,
                       "ZII": -0.3, "IZI": -0.3, "IIZ": -0.3}
    # the field along Z commutes with the XXZ chain: the total magnetisation is conserved
    # (common practice), so H is block diagonal in the number of 1 bits
    M = H.matrix().toarray()
    ones = np.array([bin(i).count("1") for i in range(8)])
    assert np.allclose(M[ones[:, None] != ones[None, :]], 0.0)


# -- maxcut ---------------------------------------------------------------------------------------
def test_maxcut_diagonal_is_minus_the_cut_of_each_basis_state():
    edges = [(0, 1), (1, 2), (0, 2), (2, 3)]
    w = [1.0, 2.0, 0.5, 1.5]
    C = models.maxcut(edges, w)
    diag = C.matrix().diagonal().real
    for index in range(16):
        bits = [(index >> (3 - q)) & 1 for q in range(4)]  # qubit 0 = most significant bit
        by_hand = sum(wt for (i, j), wt in zip(edges, w) if bits[i] != bits[j])
        assert diag[index] == pytest.approx(-by_hand)
        assert models.cut_value(edges, index, w) == pytest.approx(by_hand)
    assert np.allclose(C.matrix().toarray(), np.diag(diag))


def test_maxcut_ground_energy_is_minus_best_cut():
    # an odd ring of 5 cannot be 2-coloured: its best cut is 4 of 5 edges (common practice);
    # scipy eigsh on the cost observable
    C = models.maxcut(models.ring(5))
    assert sla.eigsh(C.matrix(), k=1, which="SA")[0][0] == pytest.approx(-4.0, abs=1e-10)


# -- circuits -------------------------------------------------------------------------------------
def test_qaoa_p1_expectation_matches_published_formula():
    # Wang, Hadfield, Jiang and Rieffel, Phys. Rev. A 97, 022304 (2018): for a triangle-free
    # graph, p = 1 gives <C_uv> = 1/2 + (1/4) sin(4 beta) sin(gamma) (cos^d_u gamma + cos^d_v gamma)
    # with d_u, d_v the degrees minus one; on a ring d = 1, so <C> = n (1/2 + sin 4b sin 2g / 4)
    rng = np.random.default_rng(3)
    E = models.ring(6)
    c = models.qaoa(E, p=1)
    C = models.maxcut(E)
    for gamma, beta in rng.uniform(-np.pi, np.pi, size=(5, 2)):
        expected_cut = 6 * (0.5 + 0.25 * np.sin(4 * beta) * np.sin(2 * gamma))
        assert -qg.expect(c, C, np.array([gamma, beta])) == pytest.approx(expected_cut, abs=1e-12)


def test_qaoa_weighted_single_edge():
    # same formula, one edge (d_u = d_v = 0), weight w: <C> = w (1/2 + (1/2) sin 4b sin(w g))
    # (the cost layer is exp(-i g C), so a weight scales the angle)
    w, gamma, beta = 1.7, 0.4, 0.3
    c = models.qaoa([(0, 1)], p=1, weights=[w])
    val = -qg.expect(c, models.maxcut([(0, 1)], [w]), np.array([gamma, beta]))
    assert val == pytest.approx(w * (0.5 + 0.5 * np.sin(4 * beta) * np.sin(w * gamma)), abs=1e-12)


def test_qaoa_parameter_layout():
    c = models.qaoa(models.ring(4), p=3)
    assert c.n_params == 6
    A, _ = c.angle_map()
    # each gamma drives the 4 edge gates of its layer, each beta the 4 mixer gates
    assert np.array_equal((A != 0).sum(axis=0), [4] * 6)


def test_layered_product_state_and_counts():
    # one final layer of RY only: a product state with <Z_q> = cos theta_q (common practice)
    c = models.layered(3, 0)
    th = np.array([0.3, 1.1, -0.7])
    zs = [qg.Observable({w: 1.0}) for w in ("ZII", "IZI", "IIZ")]
    assert np.allclose(qg.expect(c, zs, th), np.cos(th))
    c = models.layered(4, 2, rotations=("rx", "rz"), entangler="cnot", periodic=True)
    names = [op.gate.name for op in c.operations]
    assert c.n_params == 4 * 2 * 3 and names.count("CNOT") == 2 * 4
    assert models.layered(4, 2, entangler=None).n_params == 12


def test_bad_model_input_is_refused_clearly():
    with pytest.raises(ValueError, match="n must be an int >= 2"):
        models.ising_chain(1)
    with pytest.raises(ValueError, match="periodic chain needs n >= 3"):
        models.ising_chain(2)
    with pytest.raises(TypeError, match="g must be a finite real"):
        models.ising_chain(3, g=np.nan)
    with pytest.raises(ValueError, match="appears twice"):
        models.maxcut([(0, 1), (1, 0)])
    with pytest.raises(ValueError, match="joins a vertex to itself"):
        models.maxcut([(1, 1)])
    with pytest.raises(ValueError, match="one entry per edge"):
        models.maxcut([(0, 1)], weights=[1.0, 2.0])
    with pytest.raises(ValueError, match="too small"):
        models.maxcut([(0, 3)], n=3)
    with pytest.raises(TypeError, match="edges must be"):
        models.maxcut(5)
    with pytest.raises(ValueError, match="rotations"):
        models.layered(3, 1, rotations=("ryy",))
    with pytest.raises(ValueError, match="entangler"):
        models.layered(3, 1, entangler="iswap")
    with pytest.raises(ValueError, match="p must be an int >= 1"):
        models.qaoa(models.ring(3), p=0)
    with pytest.raises(ValueError, match="bits must hold"):
        models.cut_value(models.ring(3), [0, 1])
