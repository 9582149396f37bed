"""Low-level kernels on batches of states (B, 2**n), chosen by where the qubits sit.

A state row reshaped to ``(2**lo, d, R)`` puts a gate on the contiguous qubits starting at
``lo`` into the middle axis. Three kernels cover every gate:

- dense: ``matmul`` of the (d, d) matrix with that view, one BLAS product per slab. Where
  ``R`` (the stride of the last target qubit) is large this is close to one read and one
  write of the state; where it is small the slabs are tiny, so instead the gate is widened to
  a block over the last few qubits and applied as one product with the state seen as
  ``(N / D, D)``. A real matrix acts on the float view of the state (half the flops);
- monomial (one nonzero a row: X, CNOT, SWAP, Y, and their products with phases): strided
  copies with a phase, one pass, any qubit positions;
- diagonal: in-place phase multiplies of strided views, skipping phases equal to one.

Every kernel writes into a caller-given ``out`` (or in place), so a circuit run can
alternate between two buffers instead of allocating a state per gate. Dense and monomial
kernels given ``out=psi`` work in place instead (`in_place`): the state is cut into pieces
along qubits the gate does not touch, each piece is a small state of its own, and only a
piece-sized temporary (`PIECE` amplitudes) is ever held next to the state.

The kernels follow the dtype of the state: complex128, or complex64 (``precision="single"``),
to which matrices, phases and diagonals are cast; a real matrix acts on the float32 or
float64 view.
"""
from __future__ import annotations

from functools import lru_cache

import numpy as np

__all__ = ["sort_qubits", "widen", "apply_dense", "apply_monomial", "apply_diag",
           "monomial_structure", "in_place", "in_place_scratch", "state_dtype", "real_dtype",
           "PRECISIONS", "TAIL_STRIDE", "PIECE"]

# below this stride (amplitudes) the slab products are too small for BLAS: use a tail block
TAIL_STRIDE = 8
# widest gap-filled block a non-adjacent gate is widened to (qubits)
MAX_SPAN = 3
# amplitudes of the pieces an in-place kernel works on (1 MiB of complex128: cache-sized)
PIECE = 2 ** 16

# the ``precision=`` option: amplitude dtype of the states
PRECISIONS = {"double": np.dtype(np.complex128), "single": np.dtype(np.complex64)}


def state_dtype(precision) -> np.dtype:
    """The amplitude dtype of a ``precision`` ("double": complex128, "single": complex64).

    Examples
    --------
    >>> state_dtype("single").name
    'complex64'
    """
    dt = PRECISIONS.get(precision) if isinstance(precision, str) else None
    if dt is None:
        raise ValueError(f"precision must be one of {', '.join(map(repr, PRECISIONS))}; got {precision!r}")
    return dt


def real_dtype(dtype) -> np.dtype:
    """float64 for complex128 states, float32 for complex64 (the dtype of their float view).

    Examples
    --------
    >>> real_dtype(np.complex64).name
    'float32'
    """
    return np.dtype(np.float32) if np.dtype(dtype) == np.complex64 else np.dtype(np.float64)


def _cast(a, dtype):
    """``a`` as ``dtype`` (complex64 states take complex64 matrices: a complex128 operand
    would make NumPy compute, and allocate, in double precision)."""
    a = np.asarray(a)
    if dtype == np.complex128 or a.dtype == dtype:
        return a
    return a.astype(dtype)


def sort_qubits(mat, qubits, diag=False):
    """Reorder the tensor factors of ``mat`` so the qubits ascend; returns
    ``(mat, sorted_qubits)``. ``mat`` is (d, d) or (B, d, d), or with ``diag`` (d,) or (B, d)."""
    qubits = tuple(qubits)
    k = len(qubits)
    order = sorted(range(k), key=lambda i: qubits[i])
    if order == list(range(k)):
        return mat, qubits
    sq = tuple(qubits[i] for i in order)
    mat = np.asarray(mat)
    nd = 1 if diag else 2
    lead = mat.shape[:mat.ndim - nd]
    nl = len(lead)
    t = mat.reshape(lead + (2,) * (nd * k))
    perm = list(range(nl))
    for r in range(nd):
        perm += [nl + r * k + i for i in order]
    return t.transpose(perm).reshape(mat.shape), sq


def widen(mat, pos, width):
    """Embed a matrix on local qubits ``pos`` (ascending) into ``width`` qubits (identity on
    the rest). ``mat`` is (d, d) or (B, d, d)."""
    k = len(pos)
    if k == width:
        return np.ascontiguousarray(mat)
    idx = _widen_index(tuple(pos), width)
    lead = mat.shape[:-2]
    flat = mat.reshape(lead + (-1,))
    flat = np.concatenate([flat, np.zeros(lead + (1,), dtype=flat.dtype)], axis=-1)
    # fancy indexing may lay the result out in another order; BLAS takes a C-ordered block
    return np.ascontiguousarray(flat[..., idx])


@lru_cache(maxsize=512)
def _widen_index(pos, width):
    """Flat indices of a (d, d) matrix laid out on ``width`` qubits (d*d: a zero entry)."""
    k = len(pos)
    d = 2 ** k
    D = 2 ** width
    rest = [i for i in range(width) if i not in pos]
    rows = np.arange(D)

    def bits(v, qs):
        out = np.zeros_like(v)
        for q in qs:
            out = (out << 1) | ((v >> (width - 1 - q)) & 1)
        return out

    ri, ci = bits(rows, pos)[:, None], bits(rows, pos)[None, :]
    same = bits(rows, rest)[:, None] == bits(rows, rest)[None, :]
    idx = np.where(same, ri * d + ci, d * d)
    idx.setflags(write=False)
    return idx


def _view_shape(B, n, sq):
    """Shape (B, 2**a0, 2, 2**a1, 2, ..., 2**ak) of `_views` and its target axes."""
    shape = [B]
    axes = []
    prev = 0
    for q in sq:
        shape.append(2 ** (q - prev))
        axes.append(len(shape))
        shape.append(2)
        prev = q + 1
    shape.append(2 ** (n - prev))
    return shape, axes


def _views(arr, n, sq):
    """``arr`` (B, 2**n) as (B, 2**a0, 2, 2**a1, 2, ..., 2**ak) with target axes listed."""
    shape, axes = _view_shape(arr.shape[0], n, sq)
    return arr.reshape(shape), axes


def _index(axes, ndim, bits):
    idx = [slice(None)] * ndim
    for ax, b in zip(axes, bits):
        idx[ax] = b
    return tuple(idx)


def _bits(i, k):
    return [(i >> (k - 1 - j)) & 1 for j in range(k)]


def _is_real(mat):
    return not np.iscomplexobj(mat) or not np.any(mat.imag)


def _split(n, qubits, N, B, piece):
    """How `in_place` cuts a state: None (one temporary of the whole batch), ``("rows", r)``
    (``r`` rows at a time), or ``("qubits", s, f)``: row by row, with the qubits
    ``s .. s+f-1`` (a run no target touches) fixed in each piece, so a piece is a state of
    ``n - f`` qubits."""
    if B * N <= piece:
        return None
    if N <= piece:
        return ("rows", max(1, piece // N))
    sq = sorted(set(qubits))
    runs = [(0, sq[0])] + [(a + 1, b - a - 1) for a, b in zip(sq, sq[1:])] + [(sq[-1] + 1, n - 1 - sq[-1])]
    need = (N // piece).bit_length() - 1          # N / piece is a power of two
    # the leading run gives contiguous pieces (no copy in): take it when it is long enough
    s, a = runs[0] if runs[0][1] >= need else max(runs, key=lambda r: r[1])
    if a == 0:
        return None
    return ("qubits", s, min(a, need))


def in_place_scratch(n, qubits, B=1, piece=None) -> int:
    """Amplitudes `in_place` holds besides the state for a gate on ``qubits`` (its input and
    output pieces, and the two a kernel on far-apart qubits makes); an upper bound.

    Examples
    --------
    >>> in_place_scratch(24, (0,)) / 2 ** 24        # four pieces of 2**16 next to 2**24
    0.015625
    """
    piece = PIECE if piece is None else piece
    N = 2 ** n
    how = _split(n, qubits, N, B, piece)
    if how is None:
        size = B * N
    elif how[0] == "rows":
        size = min(B, how[1]) * N
    else:
        size = 2 ** (n - how[2])
    return 4 * size


def in_place(psi, n, qubits, kernel, piece=None):
    """Apply a gate on ``qubits`` to ``psi`` (B, 2**n) in place, piece by piece.

    ``kernel(src, m, qubits, out, rows)`` writes the gate applied to ``src`` (a C-ordered
    (b, 2**m) state with the gate on ``qubits``) into ``out``; ``rows`` is the slice of the
    batch ``src`` holds (for per-row matrices). A piece fixes the bits of qubits the gate
    does not touch, so it is a state of its own and the gate acts on it alone; at most
    `PIECE` amplitudes (``piece``) are held beside ``psi``, whatever its size.

    Examples
    --------
    >>> import numpy as np
    >>> psi = np.arange(8, dtype=complex).reshape(1, 8)
    >>> flip = lambda src, m, qs, out, rows: apply_monomial(src, m, [1, 0], [1, 1], qs, out)
    >>> in_place(psi, 3, (1,), flip, piece=2).real.tolist()      # X on qubit 1
    [[2.0, 3.0, 0.0, 1.0, 6.0, 7.0, 4.0, 5.0]]
    """
    piece = PIECE if piece is None else piece
    B, N = psi.shape
    qubits = tuple(qubits)
    how = _split(n, qubits, N, B, piece)
    if how is None:
        res = np.empty_like(psi)
        kernel(psi, n, qubits, res, slice(None))
        psi[...] = res
        return psi
    if how[0] == "rows":
        r = how[1]
        buf = np.empty((min(r, B), N), dtype=psi.dtype)
        for b0 in range(0, B, r):
            b1 = min(B, b0 + r)
            kernel(psi[b0:b1], n, qubits, buf[:b1 - b0], slice(b0, b1))
            psi[b0:b1] = buf[:b1 - b0]
        return psi
    _, s, f = how
    m = n - f
    mapped = tuple(q if q < s else q - f for q in qubits)
    out = np.empty((1, 2 ** m), dtype=psi.dtype)
    src = None if s == 0 else np.empty_like(out)
    shape = (2 ** s, 2 ** f, 2 ** (n - s - f))
    for b in range(B):
        row = psi[b].reshape(shape)
        for j in range(2 ** f):
            sub = row[:, j, :]          # contiguous when s == 0
            if src is None:
                kernel(sub.reshape(1, -1), m, mapped, out, slice(b, b + 1))
            else:
                src.reshape(sub.shape)[...] = sub
                kernel(src, m, mapped, out, slice(b, b + 1))
            sub[...] = out.reshape(sub.shape)
    return psi


def _rows(mat, rows, per_row):
    return mat[rows] if per_row else mat


def apply_dense(psi, n, mat, qubits, out, real=None):
    """``out = mat psi`` on ``qubits``; mat (d, d) shared or (B, d, d) per row.

    ``psi`` and ``out`` are C-ordered complex arrays (B, 2**n) of one dtype (complex128 or
    complex64) that do not overlap, or ``out is psi`` to work in place (`in_place`);
    ``real`` says whether ``mat`` is real (computed when None).

    Examples
    --------
    >>> import numpy as np
    >>> psi = np.array([[1, 0, 0, 0]], dtype=complex)
    >>> X = np.array([[0, 1], [1, 0]], dtype=complex)
    >>> apply_dense(psi, 2, X, (0,), np.empty_like(psi)).real.tolist()
    [[0.0, 0.0, 1.0, 0.0]]
    >>> apply_dense(psi, 2, X, (1,), psi).real.tolist()            # in place
    [[0.0, 1.0, 0.0, 0.0]]
    """
    mat, sq = sort_qubits(mat, qubits)
    k = len(sq)
    lo, hi = sq[0], sq[-1]
    per_row = np.ndim(mat) == 3
    if hi - lo + 1 > k:
        if hi - lo + 1 > MAX_SPAN:
            mat = _cast(mat, psi.dtype)
            if out is psi:
                return in_place(psi, n, sq, lambda src, m_, qs, o, rows: _dense_far(
                    src, m_, _rows(mat, rows, per_row), qs, o))
            return _dense_far(psi, n, mat, sq, out)
        mat = widen(mat, [q - lo for q in sq], hi - lo + 1)
        sq = tuple(range(lo, hi + 1))
    if real is None:
        real = _is_real(mat)
    mat = _cast(np.ascontiguousarray(mat.real) if real else mat,
                real_dtype(psi.dtype) if real else psi.dtype)
    if out is psi:
        blocks = {}
        return in_place(psi, n, sq, lambda src, m_, qs, o, rows: _dense_span(
            src, m_, _rows(mat, rows, per_row), qs, o, real, blocks))
    return _dense_span(psi, n, mat, sq, out, real, {})


def _dense_span(psi, n, mat, sq, out, real, blocks):
    """`apply_dense` on the contiguous qubits ``sq``; ``mat`` real (float) when ``real``.
    ``blocks`` memoises the tail blocks of one gate over the pieces of an in-place call."""
    k = len(sq)
    lo, hi = sq[0], sq[-1]
    B = psi.shape[0]
    d = 2 ** k
    R = 2 ** (n - hi - 1)
    per_row = mat.ndim == 3
    # per-row matrices widened by two or more qubits cost more than small slab products
    if R < TAIL_STRIDE and n > k and not (per_row and n - lo - k >= 2):
        # widen to a block over the last qubits: one product with (N/D, D) rows
        w = n - lo
        blk = None if per_row else blocks.get(w)
        if blk is None:
            blk = widen(mat.astype(psi.dtype), list(range(k)), w)
            if not per_row:
                blocks[w] = blk
        D = 2 ** w
        if per_row:
            np.matmul(psi.reshape(B, -1, D), np.swapaxes(blk, -1, -2), out=out.reshape(B, -1, D))
        else:
            np.matmul(psi.reshape(-1, D), blk.T, out=out.reshape(-1, D))
        return out
    if real:
        fl = real_dtype(psi.dtype)
        v = psi.view(fl)
        o = out.view(fl)
        R2 = 2 * R
    else:
        v, o, R2 = psi, out, R
    if per_row:
        np.matmul(mat[:, None], v.reshape(B, 2 ** lo, d, R2), out=o.reshape(B, 2 ** lo, d, R2))
    else:
        np.matmul(mat, v.reshape(B * 2 ** lo, d, R2), out=o.reshape(B * 2 ** lo, d, R2))
    return out


# rows of a far gate's moved copy at a time: its temporaries stay in cache (bytes)
FAR_BYTES = 2 ** 20


def _dense_far(psi, n, mat, sq, out):
    """Qubits far apart: move them to the front, one product, move back (two extra passes),
    a cache-sized block of rows at a time."""
    B = psi.shape[0]
    step = max(1, FAR_BYTES // psi[:1].nbytes)
    if B > step:
        for lo in range(0, B, step):
            m = mat[lo:lo + step] if mat.ndim == 3 else mat
            _dense_far(psi[lo:lo + step], n, m, sq, out[lo:lo + step])
        return out
    k = len(sq)
    t = psi.reshape((B,) + (2,) * n)
    axes = [1 + q for q in sq]
    front = np.moveaxis(t, axes, range(1, k + 1)).reshape(B, 2 ** k, -1)
    res = mat @ front
    res = res.reshape((B,) + (2,) * n)
    out.reshape((B,) + (2,) * n)[...] = np.moveaxis(res, range(1, k + 1), axes)
    return out


def monomial_structure(mat, tol=0.0):
    """For a matrix with at most one nonzero per row: ``(cols, phases)`` with
    ``mat[i, cols[i]] = phases[i]`` (cols -1 for an all-zero row); None otherwise."""
    m = np.asarray(mat)
    nz = np.abs(m) > tol
    counts = nz.sum(axis=-1)
    if np.any(counts > 1):
        return None
    cols = np.where(counts == 1, np.argmax(nz, axis=-1), -1)
    phases = np.where(cols >= 0, m[np.arange(m.shape[0]), np.maximum(cols, 0)], 0)
    return cols, phases


def apply_monomial(psi, n, cols, phases, qubits, out):
    """``out[i-block] = phases[i] * psi[cols[i]-block]`` on ``qubits``; phases (d,) or (B, d).

    Examples
    --------
    >>> import numpy as np
    >>> psi = np.array([[1, 0, 0, 0]], dtype=complex)
    >>> out = apply_monomial(psi, 2, [1, 0], [1j, 1j], (1,), np.empty_like(psi))
    >>> out.tolist()
    [[0j, 1j, 0j, 0j]]
    >>> apply_monomial(out, 2, [1, 0], [1, 1], (0,), out).tolist()   # in place (out is psi)
    [[0j, 0j, 0j, 1j]]
    """
    phases = _cast(phases, psi.dtype)
    if out is psi:
        per_row = phases.ndim == 2
        return in_place(psi, n, qubits, lambda src, m, qs, o, rows: apply_monomial(
            src, m, cols, _rows(phases, rows, per_row), qs, o))
    qubits = tuple(qubits)
    k = len(qubits)
    d = 2 ** k
    order = sorted(range(k), key=lambda i: qubits[i])
    sq = tuple(qubits[i] for i in order)
    t, axes = _views(psi, n, sq)
    o, _ = _views(out, n, sq)
    ndim = t.ndim
    per_row = phases.ndim == 2
    for i in range(d):
        bi = _bits(i, k)
        oi = o[_index(axes, ndim, [bi[j] for j in order])]
        c = int(cols[i])
        if c < 0:
            oi[...] = 0
            continue
        bc = _bits(c, k)
        vi = t[_index(axes, ndim, [bc[j] for j in order])]
        if per_row:
            np.multiply(vi, phases[:, i].reshape((-1,) + (1,) * (vi.ndim - 1)), out=oi)
            continue
        p = phases[i]
        if p == 1:
            np.copyto(oi, vi)
        elif p == -1:
            np.negative(vi, out=oi)
        else:
            np.multiply(vi, p, out=oi)
    return out


def _broadcast_diag(psi, n, diag, sq):
    """In-place multiply by a diagonal on ascending qubits ``sq``, on a compact view: each
    run of consecutive target qubits is one axis of the phase tensor, each gap one
    broadcast axis (real phases act on the float view, half the arithmetic)."""
    B = psi.shape[0]
    per_row = diag.ndim == 2
    runs = []
    for q in sq:
        if runs and runs[-1][1] == q:
            runs[-1][1] = q + 1
        else:
            runs.append([q, q + 1])
    vshape, dshape = [B], [diag.shape[0] if per_row else 1]
    prev = 0
    for lo, hi in runs:
        if lo > prev:
            vshape.append(2 ** (lo - prev))
            dshape.append(1)
        vshape.append(2 ** (hi - lo))
        dshape.append(2 ** (hi - lo))
        prev = hi
    if prev < n:
        vshape.append(2 ** (n - prev))
        dshape.append(1)
    d = diag.reshape(dshape)
    if not np.any(d.imag):
        d = _cast(d.real, real_dtype(psi.dtype))
        vshape[-1] *= 2
        if dshape[-1] > 1:
            d = np.repeat(d, 2, axis=-1)
        v = psi.view(real_dtype(psi.dtype)).reshape(vshape)
    else:
        d = _cast(d, psi.dtype)
        v = psi.reshape(vshape)
    v *= d
    return psi


def apply_diag(psi, n, diag, qubits):
    """Multiply by ``diag`` ((d,) or (B, d)) on ``qubits``, in place; returns psi.

    Examples
    --------
    >>> import numpy as np
    >>> psi = np.full((1, 4), 0.5, dtype=complex)
    >>> apply_diag(psi, 2, np.array([1, 1, 1, -1]), (0, 1)).real.tolist()
    [[0.5, 0.5, 0.5, -0.5]]
    """
    diag, sq = sort_qubits(np.asarray(diag), qubits, diag=True)
    if psi.dtype != np.complex128:
        diag = diag.astype(psi.dtype)
    k = len(sq)
    per_row = diag.ndim == 2
    if k > 2 or 2 ** (n - sq[-1] - 1) < TAIL_STRIDE or per_row:
        return _broadcast_diag(psi, n, diag, sq)
    t, axes = _views(psi, n, sq)
    ndim = t.ndim
    for i in range(2 ** k):
        p = diag[i]
        if p == 1:
            continue
        vi = t[_index(axes, ndim, _bits(i, k))]
        if p == -1:
            np.negative(vi, out=vi)
        else:
            vi *= p
    return psi
