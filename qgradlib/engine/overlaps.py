"""Overlap matrices of a bra and a ket over a window of consecutive qubits.

For states ``lam`` and ``psi`` on n qubits and a window of w qubits starting at ``lo``,

    S[i, j] = sum over the other qubits of conj(lam[.. i ..]) psi[.. j ..],   (D = 2**w)

so that ``<lam|M|psi> = sum_ij M[i, j] S[i, j]`` for every matrix M acting inside the window.
One overlap matrix is one read of each state, and it serves every gate in the window: the
adjoint method reads the derivatives of a layer of rotations from a few of them instead of
one pair of dot products a gate.

Two ways to compute it, both BLAS products that read each state once:

- `real_overlap`: ``Re S`` alone, as products of float views (the real and imaginary parts of
  an amplitude are neighbours in memory, so ``Re conj(a) b`` is a plain dot product of the
  two float views). This is all a generator with purely imaginary entries (Y, YZ, ...) needs:
  ``Im sum G_ij S_ij = sum Im(G_ij) Re(S_ij)`` when ``Re G = 0``. It needs a long enough
  stride below the window (`MIN_STRIDE`), or the products are too small for BLAS;
- `tail_overlap`: the whole complex S for a window that ends at the last qubit, one complex
  product ``lam^H psi`` a row with the states seen as (N / D, D) matrices (the conjugate
  transpose is taken inside BLAS, nothing is copied).
"""
from __future__ import annotations

import numpy as np

from .kernels import real_dtype

__all__ = ["real_overlap", "real_overlap_and_apply", "tail_overlap", "window_of", "MIN_STRIDE",
           "WIDTH", "CHUNK"]

# qubits of a window (overlap matrices of 16 x 16: wider ones cost more flops than reads)
WIDTH = 4
# amplitudes below the window at least: shorter slabs make products too small for BLAS
MIN_STRIDE = 4
# float entries of a row that `real_overlap_and_apply` takes at a time (512 KiB: the chunk
# is still in cache when the product reads it again)
CHUNK = 65536


def window_of(n: int, q: int, width: int = WIDTH) -> tuple:
    """The aligned window ``(lo, w)`` holding qubit ``q``: windows are counted from the last
    qubit (so the last one is always a full `tail_overlap` window), the first may be short.

    Examples
    --------
    >>> window_of(10, 9), window_of(10, 5), window_of(10, 1)
    ((6, 4), (2, 4), (0, 2))
    """
    if not 0 <= q < n:
        raise ValueError(f"qubit must be in 0..{n - 1}; got {q!r}")
    k = (n - 1 - q) // width
    hi = n - k * width
    lo = max(0, hi - width)
    return lo, hi - lo


def real_overlap(lam, psi, n: int, lo: int, w: int) -> np.ndarray:
    """``Re S`` (P, D, D) of rows ``lam``, ``psi`` (P, 2**n) over qubits ``lo .. lo+w-1``.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> lam, psi = rng.normal(size=(2, 1, 16)) + 1j * rng.normal(size=(2, 1, 16))
    >>> S = real_overlap(lam, psi, 4, 1, 2)
    >>> Y1 = np.kron(np.kron(np.eye(2), [[0, -1j], [1j, 0]]), np.eye(4))   # Y on qubit 1
    >>> bool(np.isclose(np.imag(np.vdot(lam[0], Y1 @ psi[0])),
    ...                 np.sum(np.kron([[0, -1], [1, 0]], np.eye(2)) * S[0])))
    True
    """
    P = lam.shape[0]
    D = 2 ** w
    L = 2 ** lo
    R2 = 2 * 2 ** (n - lo - w)            # float entries of a slab below the window
    fl = real_dtype(lam.dtype)
    a = lam.view(fl).reshape(P, L, D, R2)
    b = psi.view(fl).reshape(P, L, D, R2)
    S = np.zeros((P, D, D))
    # one BLAS product a slab, summed over slabs a chunk at a time (the (D, D) products of
    # all slabs at once would be as large as the states); float32 states sum in float64
    for rows, cols in _chunks(L, D, R2):
        S += np.matmul(a[:, rows, :, cols], np.swapaxes(b[:, rows, :, cols], -1, -2)).sum(
            axis=1, dtype=np.float64)
    return S


def _chunks(L, D, R2):
    """Index pairs (slabs, columns) cutting a (., L, D, R2) view into pieces of about `CHUNK`
    floats a row: whole slabs when they are short, column blocks of a slab when long."""
    if R2 >= CHUNK // D:
        # a slab at a time, in column blocks (a product may buffer a strided output: it stays
        # chunk-sized, never state-sized)
        step = max(1, CHUNK // D)
        return [(slice(l, l + 1), slice(c, c + step)) for l in range(L) for c in range(0, R2, step)]
    step = max(1, CHUNK // (D * R2))
    return [(slice(l, l + step), slice(None)) for l in range(0, L, step)]


def real_overlap_and_apply(both, P: int, n: int, lo: int, w: int, mat, out) -> np.ndarray:
    """``Re S`` of ``lam = both[P:]`` and ``psi = both[:P]`` over qubits ``lo .. lo+w-1``
    (as `real_overlap`), and ``out = mat both`` on those qubits for every row (``mat`` real,
    (D, D)), in one sweep: chunk by chunk, the product reads what the overlap just read,
    from cache. Returns ``Re S`` (P, D, D).

    Examples
    --------
    >>> import numpy as np
    >>> from qgradlib.engine.kernels import apply_dense
    >>> rng = np.random.default_rng(2)
    >>> both = rng.normal(size=(2, 64)) + 1j * rng.normal(size=(2, 64))
    >>> m = np.linalg.qr(rng.normal(size=(4, 4)))[0]
    >>> out = np.empty_like(both)
    >>> S = real_overlap_and_apply(both, 1, 6, 2, 2, m, out)
    >>> bool(np.allclose(S, real_overlap(both[1:], both[:1], 6, 2, 2)))
    True
    >>> bool(np.allclose(out, apply_dense(both, 6, m, (2, 3), np.empty_like(both))))
    True
    """
    D = 2 ** w
    L = 2 ** lo
    R2 = 2 * 2 ** (n - lo - w)
    fl = real_dtype(both.dtype)
    mat = np.asarray(mat, dtype=fl)
    v = both.view(fl).reshape(2 * P, L, D, R2)
    o = out.view(fl).reshape(2 * P, L, D, R2)
    S = np.zeros((P, D, D))
    for rows, cols in _chunks(L, D, R2):
        a = v[:, rows, :, cols]
        S += np.matmul(a[P:], np.swapaxes(a[:P], -1, -2)).sum(axis=1, dtype=np.float64)
        np.matmul(mat, a, out=o[:, rows, :, cols])
    return S


def tail_overlap(lam, psi, n: int, w: int) -> np.ndarray:
    """The complex S (P, D, D) of rows ``lam``, ``psi`` (P, 2**n) over the last ``w`` qubits.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(1)
    >>> lam, psi = rng.normal(size=(2, 1, 8)) + 1j * rng.normal(size=(2, 1, 8))
    >>> S = tail_overlap(lam, psi, 3, 1)
    >>> X2 = np.kron(np.eye(4), [[0, 1], [1, 0]])
    >>> bool(np.isclose(np.vdot(lam[0], X2 @ psi[0]), S[0, 0, 1] + S[0, 1, 0]))
    True
    """
    from scipy.linalg.blas import cgemm, zgemm     # SciPy loads on first use, not at import

    gemm = cgemm if lam.dtype == np.complex64 else zgemm
    P = lam.shape[0]
    D = 2 ** w
    out = np.empty((P, D, D), dtype=complex)
    for p in range(P):
        # the transposed (N/D, D) views are Fortran-ordered: BLAS reads them without a copy
        a = lam[p].reshape(-1, D).T
        b = psi[p].reshape(-1, D).T
        out[p] = gemm(1.0, b, a, trans_b=2).T
    return out
