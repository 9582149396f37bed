"""Expectation values and marginal probabilities from batches of states, by index arithmetic.

For a Pauli word with X/Y letters on qubits ``x`` and Z/Y letters on qubits ``z``,
``<psi|P|psi> = i**nY * sum_i conj(psi[i ^ x]) (-1)**popcount(i & z) psi[i]``. Flipping the
bits of ``x`` is reversing those axes of the (2,)*n view, so no index array and no matrix is
built; terms that flip the same bits share one product ``conj(psi[i ^ x]) * psi[i]``.

A large state is read in pieces (`READ_PIECE` amplitudes): a piece fixes the bits of a few
qubits the group's words do not flip, so ``i ^ x`` stays inside it and the Z letters on the
fixed qubits are a sign; the products and ``|psi|**2`` are then piece-sized, not
state-sized. Complex64 states (``precision="single"``) are read in their own precision and
summed in float64.
"""
from __future__ import annotations

from collections import OrderedDict, defaultdict
from functools import lru_cache

import numpy as np

from ..circuits.paulis import masks
from .kernels import _views, apply_dense

__all__ = ["pauli_expectation", "expectations", "probabilities", "expectation_scratch",
           "observable_scratch", "READ_PIECE"]

# amplitudes a piece of a state read out at once (its products are half of it)
READ_PIECE = 2 ** 18


def _flipped(t, xq):
    if not xq:
        return t
    sl = [slice(None)] * t.ndim
    for q in xq:
        sl[1 + q] = slice(None, None, -1)
    return t[tuple(sl)]


def _signed_sum(prod, n, zq):
    """sum_i prod[i] * (-1)**popcount(i & z) over all but the batch axis.

    ``prod`` is (B, 2**n) or its (B, 2, ..., 2) view; the sum runs on a compact view with one
    axis per Z qubit, so it is one reduction pass whatever the word.
    """
    B = prod.shape[0]
    zq = sorted(zq)
    shape = [B]
    prev = 0
    for q in zq:
        shape += [2 ** (q - prev), 2]
        prev = q + 1
    shape.append(2 ** (n - prev))
    v = prod.reshape(shape)
    acc = np.complex128 if np.iscomplexobj(v) else np.float64
    r = v.sum(axis=tuple(range(1, len(shape), 2)), dtype=acc)   # (B, 2, ..., 2) over the Z qubits
    for _ in zq:
        r = r[:, 0, ...] - r[:, 1, ...]
    return r


def _z_group(t, n, group, B):
    p = t.reshape(B, -1, 1)
    p = p.view(p.real.dtype)                               # (B, N, 2): re, im
    p = np.einsum("bni,bni->bn", p, p)                     # |psi|^2, one pass, one array
    terms = tuple((zq, c) for zq, ny, c in group)
    narrow = all(max(zq) - min(zq) < _WINDOW for zq, _ in terms if zq)
    const, windows = _fixed_z_windows(terms) if narrow else _z_windows(list(terms), 1)
    total = const[0] * p.sum(axis=1, dtype=np.float64)
    for lo, w, small in windows:
        # marginal of |psi|^2 on the window (one reduction pass), dotted with its signs
        marg = p.reshape(B, 2 ** lo, 2 ** w, 2 ** (n - lo - w)).sum(axis=(1, 3), dtype=np.float64)
        total = total + marg @ small[0]
    return total


def _pieces(t, n, xq, group, B, piece):
    """A group's value summed over pieces of the (B, 2, ..., 2) view ``t``: each fixes the
    bits of the first qubits outside ``xq`` (so no flip leaves the piece), its Z letters on
    them become a sign of the coefficient, and the rest is a group on the other qubits."""
    f = max(0, (B * 2 ** n // piece).bit_length() - 1)
    fixed = [q for q in range(n) if q not in xq][:f]
    if not fixed:
        return _x_group(t, n, xq, group, B) if xq else _z_group(t, n, group, B)
    rest = [q for q in range(n) if q not in fixed]
    where = {q: i for i, q in enumerate(rest)}
    sub_x = tuple(where[q] for q in xq)
    total = np.zeros(B)
    for bits in range(2 ** len(fixed)):
        val = {q: (bits >> (len(fixed) - 1 - i)) & 1 for i, q in enumerate(fixed)}
        idx = (slice(None),) + tuple(val[q] if q in val else slice(None) for q in range(n))
        sub = []
        for zq, ny, c in group:
            sign = -1.0 if sum(val.get(q, 0) for q in zq) % 2 else 1.0
            sub.append((tuple(where[q] for q in zq if q in where), ny, sign * c))
        m = len(rest)
        total += _x_group(t[idx], m, sub_x, sub, B) if xq else _z_group(t[idx], m, sub, B)
    return total


def _x_group(t, n, xq, group, B):
    """Terms flipping the bits ``xq``: products over half the index space (the other half
    is their complex conjugate)."""
    x0 = xq[0]
    if _reads_one_flip(n, xq, [zq for zq, _, _ in group]):
        return _one_flip(t, n, x0, group, B)
    sl = [slice(None)] * t.ndim
    sl[1 + x0] = 0
    half = t[tuple(sl)]                                   # bit x0 = 0
    other = _flipped(t, xq)[tuple(sl)]                     # psi[i ^ x] on that half
    prod = np.conjugate(other)
    np.multiply(prod, half, out=prod)
    m = n - 1
    total = np.zeros(B)
    for zq, ny, c in group:
        odd = len(set(zq) & set(xq)) % 2
        zh = [q - (q > x0) for q in zq if q != x0]       # Z qubits on the half (x0 removed)
        val = _signed_sum(prod, m, zh) if zh else prod.reshape(B, -1).sum(axis=1, dtype=np.complex128)
        # sum over both halves: prod + (-1)^{|z & x|} conj(prod)
        full = 2j * val.imag if odd else 2 * val.real
        total += c * np.real((1j ** ny) * full)
    return total


def _reads_one_flip(n, xq, zqs) -> bool:
    """Whether `_one_flip` reads the words flipping ``xq`` whose Z/Y qubits are ``zqs``: one
    flipped qubit, not the last, and no Z letter elsewhere."""
    return len(xq) == 1 and xq[0] < n - 1 and all(set(zq) <= set(xq) for zq in zqs)


def _one_flip(t, n, q, group, B):
    """`_x_group` for words whose only letter is on qubit ``q`` (X, Y), not the last one:
    ``sum conj(psi[i ^ x]) psi[i]`` over the half with bit q clear is a dot product of two
    views of the float state (real and imaginary parts neighbours in memory), read once,
    nothing allocated. (On the last qubit the views alternate every two floats, which NumPy
    reads slower than the general path's product.)"""
    v = t.reshape(B, 2 ** q, 2, -1).view(t.real.dtype)     # (B, L, 2, 2R): bit q, re/im pairs
    lo, hi = v[:, :, 0], v[:, :, 1]
    re = np.einsum("blr,blr->b", lo, hi, dtype=np.float64)  # Re conj(psi1) psi0
    total = np.zeros(B)
    im = None
    for zq, ny, c in group:
        if not zq:                       # X: both halves, 2 Re
            total += c * 2 * re
            continue
        if im is None:                   # Im conj(psi1) psi0, for the Y letter
            a = lo.reshape(B, lo.shape[1], -1, 2)
            b = hi.reshape(B, hi.shape[1], -1, 2)
            im = (np.einsum("blr,blr->b", b[..., 0], a[..., 1], dtype=np.float64)
                  - np.einsum("blr,blr->b", b[..., 1], a[..., 0], dtype=np.float64))
        # Y = i X Z: as `_x_group`, i**ny times the odd half-sum 2i Im
        total += c * np.real((1j ** ny) * 2j * im)
    return total


def pauli_terms_expectation(psi: np.ndarray, n: int, terms: dict, piece=None) -> np.ndarray:
    """sum_k c_k <psi|P_k|psi> for every row; returns (B,) float64. A state of more than
    ``piece`` (default `READ_PIECE`) amplitudes is read in pieces."""
    B = psi.shape[0]
    t = psi.reshape((B,) + (2,) * n)
    by_x = defaultdict(list)
    for word, c in terms.items():
        xq, zq, ny = masks(word)
        by_x[xq].append((zq, ny, c))
    piece = READ_PIECE if piece is None else piece
    total = np.zeros(B)
    for xq, group in by_x.items():
        total += _pieces(t, n, xq, group, B, piece)
    return total


def pauli_expectation(psi: np.ndarray, n: int, word: str) -> np.ndarray:
    """<psi|P|psi> of one Pauli word for every row; returns (B,).

    Examples
    --------
    >>> import numpy as np
    >>> from qgradlib.engine import pauli_expectation
    >>> plus = np.full((1, 2), 2 ** -0.5, dtype=complex)
    >>> np.round(pauli_expectation(plus, 1, "X"), 12).tolist(), np.round(pauli_expectation(plus, 1, "Z"), 12).tolist()
    ([1.0], [0.0])
    """
    return pauli_terms_expectation(psi, n, {word: 1.0})


# few qubits: observables are laid out once as phase vectors per flip pattern (`_readout`)
READOUT_QUBITS = 12
_READOUT_ENTRIES = 2 ** 21      # at most this many phase entries a set of observables
_READOUTS: "OrderedDict" = OrderedDict()   # ids of the observables, n -> (observables, layout)


def _readout(n, observables):
    """``[(flip index (N,) or None, phases (K, N), phases at the flipped index (K, N))]``:
    every word with X/Y letters on qubits ``x`` read as ``<psi|P|psi> = sum_i conj(psi[i ^
    x]) phase(i) psi[i]`` with ``phase(i) = i**nY (-1)**popcount(i & z)``, words of one flip
    pattern summed into one vector. None on many qubits, with a dense part, or when the
    vectors would be large. Memoised (observables are immutable values)."""
    if n > READOUT_QUBITS:
        return None
    key = (n,) + tuple(id(o) for o in observables)
    hit = _READOUTS.get(key)
    if hit is not None and all(a is b for a, b in zip(hit[0], observables)):
        _READOUTS.move_to_end(key)
        return hit[1]
    if any(o.dense is not None for o in observables):
        return None
    N = 2 ** n
    K = len(observables)
    index = np.arange(N)
    groups = {}
    for k, obs in enumerate(observables):
        for word, c in obs.terms.items():
            xq, zq, ny = masks(word)
            if xq not in groups:
                if (len(groups) + 1) * K * N > _READOUT_ENTRIES:
                    return None
                groups[xq] = np.zeros((K, N), dtype=complex)
            zbits = sum(1 << (n - 1 - q) for q in zq)
            sign = 1.0 - 2.0 * (np.bitwise_count(index & zbits) & 1)
            groups[xq][k] += (c * (1j ** ny)) * sign
    layout = []
    for xq, W in groups.items():
        if not xq:
            layout.append((None, np.ascontiguousarray(W.real.T), None, None))
            continue
        flip = index ^ sum(1 << (n - 1 - q) for q in xq)
        layout.append((flip, np.ascontiguousarray(W.T), np.ascontiguousarray(W[:, flip]),
                       _halved(W, flip, xq, n)))
    _READOUTS[key] = (tuple(observables), layout)
    while len(_READOUTS) > 64:
        _READOUTS.popitem(last=False)
    return layout


def _halved(W, flip, xq, n):
    """For a pattern that flips one qubit q: ``(q, Wh)``, Wh (N/2, K) the phases on the
    indices j with bit q set (in the order of ``psi.reshape(B, L, 2, R)[:, :, 1, :]``),
    ``W[j] + conj(W[j ^ x])``, so that ``Re sum_i conj(psi[i ^ x]) W[i] psi[i]`` is
    ``Re sum_j conj(psi[j ^ x]) Wh[j] psi[j]`` over half the indices, read from two views of
    the state without a gather. None for other patterns."""
    if len(xq) != 1:
        return None
    q = next(iter(xq))
    L, R = 2 ** q, 2 ** (n - q - 1)
    j = (np.arange(L)[:, None] * 2 * R + R + np.arange(R)[None, :]).reshape(-1)
    return q, np.ascontiguousarray((W[:, j] + np.conj(W[:, flip[j]])).T)


def _read_values(psi, layout, K):
    """(B, K) expectation values from a `_readout` layout: one product a flip pattern."""
    B = psi.shape[0]
    out = np.zeros((B, K))
    for flip, W, _, half in layout:
        if flip is None:
            f = psi.reshape(B, -1, 1).view(psi.real.dtype)
            out += np.einsum("bni,bni->bn", f, f) @ W          # |psi|**2, one array
            continue
        if half is not None:
            # one flipped qubit: the two halves of the state as views, half the products
            q, Wh = half
            v = psi.reshape(B, 2 ** q, 2, -1)
            prod = np.conj(v[:, :, 0, :])
            prod *= v[:, :, 1, :]
            out += (prod.reshape(B, -1) @ Wh).real
            continue
        prod = np.take(psi, flip, axis=1)
        np.conjugate(prod, out=prod)
        prod *= psi
        out += (prod @ W).real
    return out


def expectations(psi: np.ndarray, n: int, observables) -> np.ndarray:
    """Expectation of each observable for every row; returns (B, K) float.

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> from qgradlib.engine import expectations
    >>> psi = np.array([[1.0, 0.0, 0.0, 0.0]], dtype=complex)          # |00>
    >>> expectations(psi, 2, [qg.Observable({"ZI": 1.0}), qg.Observable({"XX": 1.0})]).tolist()
    [[1.0, 0.0]]
    """
    layout = _readout(n, observables)
    if layout is not None:
        return _read_values(psi, layout, len(observables))
    out = np.empty((psi.shape[0], len(observables)))
    for k, obs in enumerate(observables):
        v = pauli_terms_expectation(psi, n, obs.terms) if obs.terms else 0.0
        if obs.dense is not None:
            v = v + np.real(np.einsum("bi,ij,bj->b", psi.conj(), obs.dense, psi))
        out[:, k] = v
    return out


def probabilities(psi: np.ndarray, n: int, qubits=None) -> np.ndarray:
    """Marginal probabilities over ``qubits`` (first listed = most significant); (B, 2**k).

    Examples
    --------
    >>> import numpy as np
    >>> from qgradlib.engine import probabilities
    >>> psi = np.array([[0.0, 0.6, 0.0, 0.8]], dtype=complex)          # qubit 1 is |1>
    >>> np.round(probabilities(psi, 2, [0]), 4).tolist(), np.round(probabilities(psi, 2, [1]), 4).tolist()
    ([[0.36, 0.64]], [[0.0, 1.0]])
    """
    B = psi.shape[0]
    p = np.abs(psi) ** 2
    if qubits is None:
        return p
    qubits = list(qubits)
    t = p.reshape((B,) + (2,) * n)
    other = tuple(1 + q for q in range(n) if q not in qubits)
    if other:
        t = t.sum(axis=other)
    kept = sorted(qubits)
    t = np.transpose(t, [0] + [1 + kept.index(q) for q in qubits])
    return t.reshape(B, -1)


def _z_window_scratch(n, observables):
    """States a row of the sign vectors `_z_windows` builds: a few float vectors of 2**w for
    the widest window w (a Z word wider than ``_WINDOW`` qubits is a window of its own)."""
    spans = [max(zq) - min(zq) + 1 for obs in observables for word in obs.terms
             for xq, zq, _ in [masks(word)] if zq and not xq]
    if not spans:
        return 0.0
    w = min(n, max(max(spans), _WINDOW))
    return 2.0 * 2.0 ** (w - n)


def expectation_scratch(n: int, observables) -> float:
    """States a row that `expectations` allocates beyond the states it reads: ``|psi|**2`` or
    a half-size product with its reshaped copy (1, or a piece of `READ_PIECE` amplitudes for
    a larger state), the Z windows' sign vectors, and for a dense part the conjugate and the
    einsum's product (2). The memory guard's estimate (`qgradlib.engine.memory`): change it
    with `expectations`."""
    dense = any(o.dense is not None for o in observables)
    product = min(1.0, READ_PIECE / 2.0 ** n) if _products(n, observables) else 0.0
    return product + _z_window_scratch(n, observables) + (2.0 if dense else 0.0)


def _products(n, observables) -> bool:
    """Whether reading out ``observables`` forms a product or ``|psi|**2`` array (a flip
    pattern `_one_flip` does not read, or Z words); on few qubits the layout of `_readout`
    always does."""
    if n <= READOUT_QUBITS:
        return True
    by_x = defaultdict(list)
    for obs in observables:
        for word in obs.terms:
            xq, zq, _ = masks(word)
            by_x[xq].append(zq)
    return any(not xq or not _reads_one_flip(n, xq, zqs) for xq, zqs in by_x.items())


def observable_scratch(n: int, observables) -> float:
    """States a row that `apply_observables` allocates beyond ``out`` and ``scratch``: the Z
    windows' sign vectors and a dense part's product (1). The memory guard's estimate."""
    dense = any(o.dense is not None for o in observables)
    if len(observables) > 1 and _readout(n, observables) is not None:
        return 1.0      # the weighted phases of one flip pattern, a state a row
    return _z_window_scratch(n, observables) + (1.0 if dense else 0.0)


def _negate_where_set(t, zq):
    """Multiply the (B, 2, ..., 2) view ``t`` by (-1)**popcount(i & z), in place."""
    for q in zq:
        sl = [slice(None)] * t.ndim
        sl[1 + q] = 1
        v = t[tuple(sl)]
        np.negative(v, out=v)


_BLOCK = 4      # width of the aligned qubit blocks that gather non-diagonal words
_WINDOW = 10    # widest window of qubits whose Z words are summed on a small vector first


def _z_windows(terms, B):
    """Z words ``(z_qubits, c)`` (c a float or (B,) array) summed on small windows of at most
    ``_WINDOW`` qubits: ``(constant (B,), [(lo, w, values (B, 2**w)), ...])``."""
    const = np.zeros(B)
    groups = []
    for zq, c in sorted(terms, key=lambda t: min(t[0]) if t[0] else -1):
        c = np.broadcast_to(np.asarray(c, dtype=float), (B,))
        if not zq:
            const = const + c
            continue
        lo, hi = min(zq), max(zq)
        if groups and hi < groups[-1][0] + _WINDOW and lo >= groups[-1][0]:
            groups[-1][1].append((zq, c))
        else:
            groups.append((lo, [(zq, c)]))
    windows = []
    for lo, items in groups:
        w = max(max(zq) for zq, _ in items) - lo + 1
        small = np.zeros((B,) + (2,) * w)
        for zq, c in items:
            sign = np.ones((1,) * (w + 1))
            for q in zq:
                sh = [1] * (w + 1)
                sh[1 + q - lo] = 2
                sign = sign * np.array([1.0, -1.0]).reshape(sh)
            small += c.reshape((B,) + (1,) * w) * sign
        windows.append((lo, w, small.reshape(B, 2 ** w)))
    return const, windows


@lru_cache(maxsize=256)
def _fixed_z_windows(terms):
    """`_z_windows` of Z words with float coefficients, each spanning fewer than `_WINDOW`
    qubits (vectors of at most 2**_WINDOW floats), memoised: an observable is read out again
    on every call, and building its sign vectors took a Python loop over its words. The
    vectors are read-only: they are shared."""
    const, windows = _z_windows(list(terms), 1)
    for _, _, small in windows:
        small.setflags(write=False)
    const.setflags(write=False)
    return const, windows


# registers up to this size keep the diagonal of an observable's Z words: at most 512 KiB,
# within the memory guard's fixed allowance for a call (`qgradlib.engine.memory.OVERHEAD`)
_KEPT_DIAGONAL = 16


@lru_cache(maxsize=8)
def _unit_diagonal(key):
    """The real diagonal (2**n,) of Z words ``key = (n, (z qubits, c), ...)``, read-only."""
    n, terms = key[0], key[1:]
    d = np.empty((1, 2 ** n))
    _z_diagonal(d, n, [(((), zq, 0), c) for zq, c in terms], 1)
    d = d[0]
    d.setflags(write=False)
    return d


def _z_diagonal(d, n, diag_terms, B):
    """``d[b, i] = sum_t c_t[b] (-1)**popcount(i & z_t)``, one broadcast pass a window."""
    const, windows = _z_windows([(zq, c) for (xq, zq, ny), c in diag_terms], B)
    d[...] = const.reshape(B, 1)
    for lo, w, small in windows:
        d.reshape(B, 2 ** lo, 2 ** w, 2 ** (n - lo - w))[...] += small.reshape(B, 1, 2 ** w, 1)


@lru_cache(maxsize=4096)
def _pauli_block(word):
    from ..circuits.paulis import pauli_matrix

    m = pauli_matrix(word)
    m.setflags(write=False)
    return m


def _blocks(coef, n):
    """Non-diagonal words grouped by the aligned block of ``_BLOCK`` qubits that holds them
    (when a block gathers two or more): {start: (width, matrix (D, D) or (B, D, D))}, rest."""
    groups, rest = {}, []
    for word, c in coef.items():
        xq, zq, ny = masks(word)
        if not xq:
            continue
        sup = sorted(set(xq) | set(zq))
        b0 = sup[0] // _BLOCK * _BLOCK
        if sup[-1] < b0 + _BLOCK:
            groups.setdefault(b0, []).append(word)
        else:
            rest.append(word)
    blocks = {}
    for b0, words in groups.items():
        if len(words) < 2:
            rest.extend(words)
            continue
        w = min(_BLOCK, n - b0)
        mats = sum(np.asarray(coef[wd])[..., None, None] * _pauli_block(wd[b0:b0 + w]) for wd in words)
        if mats.ndim == 3 and np.all(mats == mats[:1]):
            mats = mats[0]
        blocks[b0] = (w, mats)
    return blocks, rest


def apply_observables(psi, n, observables, weights=None, out=None, scratch=None):
    """``sum_k weights[:, k] * O_k psi`` for every row, written into ``out``.

    ``weights`` is (B, K) (default ones); ``scratch`` an array like ``psi`` that may be
    overwritten (allocated when not given). Terms are combined word by word first, so a
    word shared by several observables costs one pass.

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> psi = np.array([[1, 0]], dtype=complex)
    >>> apply_observables(psi, 1, [qg.Observable({"X": 2.0})]).real.tolist()
    [[0.0, 2.0]]
    """
    B = psi.shape[0]
    K = len(observables)
    w = np.ones((B, K)) if weights is None else np.asarray(weights, dtype=float).reshape(B, K)
    layout = _readout(n, observables)
    if layout is not None:
        return _apply_layout(psi, layout, w, out, scratch)
    coef = {}
    for k, obs in enumerate(observables):
        for word, c in obs.terms.items():
            coef[word] = coef.get(word, 0.0) + c * w[:, k]
    if out is None:
        out = np.empty_like(psi)
    if scratch is None and coef:
        scratch = np.empty_like(psi)
    written = False
    diag_terms = [(masks(wd), c) for wd, c in coef.items() if not masks(wd)[0]]
    if (diag_terms and weights is None and n <= _KEPT_DIAGONAL
            and all(max(m[1]) - min(m[1]) < _WINDOW for m, _ in diag_terms if m[1])):
        # unweighted (the adjoint forward pass): the diagonal of the observable, memoised
        key = (n,) + tuple((m[1], float(c[0])) for m, c in diag_terms)
        np.multiply(psi, _unit_diagonal(key), out=out)
        written = True
    elif diag_terms:
        # all Z-only words as one real diagonal, built in the scratch memory
        N = 2 ** n
        d = scratch.view(scratch.real.dtype).reshape(B, 2 * N)[:, :N]
        _z_diagonal(d, n, diag_terms, B)
        np.multiply(psi, d, out=out)
        written = True
    blocks, rest = _blocks(coef, n)
    for b0, (w, mats) in blocks.items():
        # several words inside one aligned block of qubits: one dense product on the block
        target = scratch if written else out
        apply_dense(psi, n, mats, tuple(range(b0, b0 + w)), target)
        if written:
            out += target
        written = True
    for word in rest:
        c = coef[word]
        xq, zq, ny = masks(word)
        # (P psi)[j] = i**ny (-1)**popcount((j ^ x) & z) psi[j ^ x]
        odd = len(set(zq) & set(xq)) % 2
        qs = tuple(sorted(set(xq) | set(zq)))
        tv, axes = _views(psi, n, qs)
        target = scratch if written else out
        ov, _ = _views(target, n, qs)
        sl = [slice(None)] * tv.ndim
        for q in xq:
            sl[axes[qs.index(q)]] = slice(None, None, -1)
        factor = (c * (1j ** ny) * (-1.0 if odd else 1.0)).reshape((B,) + (1,) * (tv.ndim - 1))
        np.multiply(tv[tuple(sl)], factor, out=ov)
        for q in zq:
            sl = [slice(None)] * ov.ndim
            sl[axes[qs.index(q)]] = 1
            v = ov[tuple(sl)]
            np.negative(v, out=v)
        if written:
            out += target
        written = True
    if not written:
        out[...] = 0
    for k, obs in enumerate(observables):
        if obs.dense is not None:
            out += w[:, k, None] * (psi @ obs.dense.T)
    return out


def _apply_layout(psi, layout, w, out, scratch):
    """``out = sum_k w[:, k] O_k psi`` from a `_readout` layout:
    ``(P psi)[j] = phase(j ^ x) psi[j ^ x]``, the phases at the flipped index laid out."""
    if out is None:
        out = np.empty_like(psi)
    if scratch is None:
        scratch = np.empty_like(psi)
    first = True
    for flip, W, Wf, _ in layout:
        target = out if first else scratch
        if flip is None:
            if w.shape[1] == 1:
                np.multiply(psi, W[:, 0], out=target)
                target *= w
            else:
                np.multiply(psi, w @ W.T, out=target)
        else:
            np.take(psi, flip, axis=1, out=target, mode="clip")
            if w.shape[1] == 1:
                target *= Wf[0]
                target *= w
            else:
                target *= w @ Wf
        if not first:
            out += target
        first = False
    if first:
        out[...] = 0
    return out


def observable_pieces(n: int, obs):
    """``O psi = sum_k phases_k * psi[flip_k]`` (``psi`` itself where flip is None) for one
    observable on few qubits: ``[(flip (N,) intp or None, phases (N,))]``, one a flip pattern
    of its words; None where `_readout` has no layout (many qubits, a dense part).

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> pieces = observable_pieces(1, qg.Observable({"X": 2.0, "Z": 0.5}))
    >>> psi = np.array([0.6, 0.8j])
    >>> lam = sum(ph * (psi if f is None else psi[f]) for f, ph in pieces)
    >>> bool(np.allclose(lam, np.array([[0.5, 2.0], [2.0, -0.5]]) @ psi))
    True
    """
    layout = _readout(n, [obs])
    if layout is None:
        return None
    return [(None, W[:, 0].copy()) if flip is None else (flip, Wf[0].copy())
            for flip, W, Wf, _ in layout]


def apply_observable(psi: np.ndarray, n: int, obs, out=None, scratch=None) -> np.ndarray:
    """O psi for every row (the state the adjoint method starts its bra from)."""
    return apply_observables(psi, n, [obs], None, out, scratch)
