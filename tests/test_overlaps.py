"""Window overlap matrices of a bra and a ket against dense Kronecker-product matrices.

Reference: the full 2**n x 2**n matrices built with numpy.kron and contracted with
numpy.vdot (plain dense linear algebra, independent of the strided views under test), and
rotations built with scipy.linalg.expm.
"""
import numpy as np
import pytest
import scipy.linalg

from qgradlib.engine import overlaps
from qgradlib.engine.kernels import apply_dense

Y = np.array([[0, -1j], [1j, 0]])


def _states(n, seed, rows=1, dtype=np.complex128):
    rng = np.random.default_rng(seed)
    lam = rng.normal(size=(rows, 2 ** n)) + 1j * rng.normal(size=(rows, 2 ** n))
    psi = rng.normal(size=(rows, 2 ** n)) + 1j * rng.normal(size=(rows, 2 ** n))
    return lam.astype(dtype), psi.astype(dtype)


def _embed(m, n, lo, w):
    """``m`` on qubits lo .. lo+w-1 of n, as a dense matrix (numpy.kron)."""
    return np.kron(np.kron(np.eye(2 ** lo), m), np.eye(2 ** (n - lo - w)))


def _dense_overlap(lam, psi, n, lo, w):
    """S[p, i, j] = <lam_p| (|i><j| on the window) |psi_p>, one dense matrix an entry."""
    D = 2 ** w
    S = np.empty((lam.shape[0], D, D), dtype=complex)
    for i in range(D):
        for j in range(D):
            E = np.zeros((D, D))
            E[i, j] = 1
            big = _embed(E, n, lo, w)
            S[:, i, j] = [np.vdot(a, big @ b) for a, b in zip(lam, psi)]
    return S


@pytest.mark.parametrize("lo, w", [(0, 2), (1, 3), (2, 4), (3, 1)])
@pytest.mark.parametrize("chunk", [8, 2 ** 16])
def test_real_overlap_is_the_real_part_of_the_dense_overlap(lo, w, chunk, monkeypatch):
    # a small chunk cuts the states into many pieces (columns and slabs): the same sums
    monkeypatch.setattr(overlaps, "CHUNK", chunk)
    n = 7
    lam, psi = _states(n, seed=lo + 10 * w, rows=2)
    S = overlaps.real_overlap(lam, psi, n, lo, w)
    # reference: dense Kronecker-product matrices (numpy.kron, numpy.vdot)
    assert np.allclose(S, _dense_overlap(lam, psi, n, lo, w).real, atol=1e-12)


def test_real_overlap_gives_the_derivative_of_a_y_rotation():
    n, q = 6, 2
    lam, psi = _states(n, seed=3)
    lo, w = overlaps.window_of(n, q)
    S = overlaps.real_overlap(lam, psi, n, lo, w)
    G = _embed(Y / 2, 1, 0, 1)
    Gw = np.kron(np.kron(np.eye(2 ** (q - lo)), G), np.eye(2 ** (lo + w - q - 1)))
    # reference: d/da Re <lam|expm(-i a Y/2)|psi> at a = 0 is Im <lam|Y/2|psi>, the rotation
    # built with scipy.linalg.expm on the full register, differentiated by central differences
    f = lambda a: np.vdot(lam[0], _embed(scipy.linalg.expm(-1j * a * Y / 2), n, q, 1) @ psi[0]).real  # noqa: E731
    h = 1e-5
    numeric = (f(h) - f(-h)) / (2 * h)
    assert np.isclose(np.sum(np.imag(Gw) * S[0]), numeric, atol=1e-8)


@pytest.mark.parametrize("w", [1, 2, 3])
def test_tail_overlap_equals_the_dense_overlap(w):
    n = 6
    lam, psi = _states(n, seed=w, rows=2)
    # reference: dense Kronecker-product matrices (numpy.kron, numpy.vdot)
    assert np.allclose(overlaps.tail_overlap(lam, psi, n, w),
                       _dense_overlap(lam, psi, n, n - w, w), atol=1e-12)


@pytest.mark.parametrize("lo", [0, 2, 3])
@pytest.mark.parametrize("chunk", [16, 2 ** 16])
def test_overlap_and_apply_in_one_sweep(lo, chunk, monkeypatch):
    monkeypatch.setattr(overlaps, "CHUNK", chunk)
    n, w, P = 7, 3, 2
    lam, psi = _states(n, seed=20 + lo, rows=P)
    both = np.concatenate([psi, lam])
    before = both.copy()
    rng = np.random.default_rng(lo)
    # three RY rotations, each scipy.linalg.expm(-i a Y/2), as one real 8 x 8 product
    m = np.eye(1)
    for a in rng.uniform(0, 2 * np.pi, size=w):
        m = np.kron(m, scipy.linalg.expm(-1j * a * Y / 2).real)
    out = np.empty_like(both)
    S = overlaps.real_overlap_and_apply(both, P, n, lo, w, m, out)
    # reference: dense Kronecker-product matrices (numpy.kron) applied to every row
    big = _embed(m, n, lo, w)
    assert np.allclose(out, before @ big.T, atol=1e-12)
    assert np.allclose(S, _dense_overlap(lam, psi, n, lo, w).real, atol=1e-12)
    assert np.array_equal(both, before)            # the input is only read
    # and the product agrees with the kernels' own dense product (the general engine)
    assert np.allclose(out, apply_dense(before, n, m, tuple(range(lo, lo + w)), np.empty_like(both)),
                       atol=1e-13)


def test_single_precision_states_sum_in_double():
    n = 8
    lam, psi = _states(n, seed=7, dtype=np.complex64)
    S = overlaps.real_overlap(lam, psi, n, 2, 3)
    assert S.dtype == np.float64
    # reference: the same overlap of the double-precision copies, dense matrices
    ref = _dense_overlap(lam.astype(complex), psi.astype(complex), n, 2, 3).real
    assert np.allclose(S, ref, rtol=1e-5, atol=1e-4)
    T = overlaps.tail_overlap(lam, psi, n, 2)
    assert np.allclose(T, _dense_overlap(lam.astype(complex), psi.astype(complex), n, 6, 2),
                       rtol=1e-5, atol=1e-4)


def test_windows_cover_the_register_from_the_last_qubit():
    for n in (1, 4, 5, 9, 16):
        seen = [overlaps.window_of(n, q) for q in range(n)]
        # every qubit in its own window, windows of at most WIDTH, the last one ending at n - 1
        assert all(lo <= q < lo + w <= n and w <= overlaps.WIDTH for q, (lo, w) in enumerate(seen))
        assert seen[-1][0] + seen[-1][1] == n
        assert len(set(seen)) == -(-n // overlaps.WIDTH)
    with pytest.raises(ValueError, match="qubit"):
        overlaps.window_of(4, 4)
