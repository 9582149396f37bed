"""Observables: real combinations of Pauli strings, optionally plus a dense Hermitian matrix.

Examples
--------
>>> import qgradlib as qg
>>> H = qg.Observable({"ZZI": -1.0, "IZZ": -1.0}) - 0.5 * qg.Observable({"XII": 1.0})
>>> H.n_qubits, len(H.terms)
(3, 3)
>>> H.matrix().shape
(8, 8)
"""
from __future__ import annotations

from numbers import Real

import numpy as np
import scipy.sparse as sp
from autograd.tracer import Box, getval

from .paulis import masks, parse_pauli

__all__ = ["Observable", "commutator", "word_product"]


class Observable:
    """A Hermitian observable ``sum_k c_k P_k (+ D)``.

    Parameters
    ----------
    terms : dict of {str: float}
        Pauli strings, one letter per qubit (qubit 0 leftmost), with real coefficients.
        Repeated strings (after upper-casing) are summed.

    Notes
    -----
    Instances are immutable values: arithmetic returns new observables.
    """

    __slots__ = ("_terms", "_dense", "_n")

    def __init__(self, terms):
        if isinstance(terms, Observable):
            self._terms, self._dense, self._n = dict(terms._terms), terms._dense, terms._n
            return
        if not isinstance(terms, dict):
            raise TypeError("terms must be a dict of {Pauli string: real coefficient}, "
                            f"such as {{'ZZ': -1.0}}; got {type(terms).__name__}")
        if not terms:
            raise ValueError("terms must hold at least one Pauli string")
        n = None
        out = {}
        for word, c in terms.items():
            w = parse_pauli(word, n, "Pauli string")
            n = len(w)
            out[w] = out.get(w, 0.0) + _coefficient(c, f"coefficient of {word!r}")
        self._terms, self._dense, self._n = out, None, n

    @classmethod
    def from_matrix(cls, matrix) -> "Observable":
        """An observable from a Hermitian matrix of size 2**n, dense or scipy sparse.

        The matrix is kept dense (sparse input, such as `matrix`'s, is converted).

        Examples
        --------
        >>> import numpy as np
        >>> Observable.from_matrix(np.diag([1.0, 0.0])).n_qubits
        1
        >>> H = Observable({"XZ": 0.5})
        >>> bool(np.allclose(Observable.from_matrix(H.matrix()).dense, H.matrix().toarray()))
        True
        """
        from .gates import _hermitian

        if sp.issparse(matrix):
            if matrix.shape[0] > 2 ** MAX_DENSE_QUBITS:
                raise ValueError(f"matrix: a sparse matrix of {matrix.shape[0]} rows is stored dense "
                                 f"here, which is limited to {MAX_DENSE_QUBITS} qubits; give Pauli terms")
            matrix = matrix.toarray()
        m = _hermitian(matrix, "matrix")
        obj = cls.__new__(cls)
        obj._terms, obj._dense, obj._n = {}, m, int(m.shape[0]).bit_length() - 1
        obj._dense.setflags(write=False)
        return obj

    # -- files ----------------------------------------------------------------------------
    def to_json(self, indent=None) -> str:
        """The observable as JSON text in qgradlib's own versioned schema
        (`qgradlib.circuits.files`).

        Examples
        --------
        >>> H = Observable({"ZZ": -1.0, "XI": 0.5})
        >>> Observable.from_json(H.to_json()) == H
        True
        """
        from .files import observable_to_json

        return observable_to_json(self, indent)

    @classmethod
    def from_json(cls, text) -> "Observable":
        """An observable from `to_json` text; every field is checked, errors name the field."""
        from .files import observable_from_json

        return observable_from_json(cls, text)

    # -- read-only views ------------------------------------------------------------------
    @property
    def n_qubits(self) -> int:
        return self._n

    @property
    def terms(self) -> dict:
        """The Pauli part as a new dict {string: coefficient} (a dense part is not included)."""
        return dict(self._terms)

    @property
    def dense(self):
        """The dense part as a read-only ndarray, or None."""
        return self._dense

    @property
    def is_pauli(self) -> bool:
        """True when the observable is a pure Pauli sum (no dense part)."""
        return self._dense is None

    def matrix(self) -> sp.csr_matrix:
        """The full matrix as scipy.sparse CSR (built from index arithmetic)."""
        dim = 2 ** self._n
        idx = np.arange(dim)
        rows, cols, vals = [], [], []
        for word, c in self._terms.items():
            xq, zq, ny = masks(word)
            x = sum(1 << (self._n - 1 - q) for q in xq)
            z = sum(1 << (self._n - 1 - q) for q in zq)
            sign = 1.0 - 2.0 * (_popcount(idx & z).astype(np.int64) & 1)
            # P|i> = i**ny (-1)**pop(i&z) |i^x>: column i, row i^x
            rows.append(idx ^ x)
            cols.append(idx)
            vals.append(float(getval(c)) * (1j ** ny) * sign)
        m = sp.csr_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
                          shape=(dim, dim), dtype=complex) if rows else sp.csr_matrix((dim, dim), dtype=complex)
        if self._dense is not None:
            m = m + sp.csr_matrix(self._dense)
        return m.tocsr()

    # -- arithmetic -----------------------------------------------------------------------
    def _combine(self, other, sign):
        if not isinstance(other, Observable):
            return NotImplemented
        if other._n != self._n:
            raise ValueError(f"cannot combine observables on {self._n} and {other._n} qubits")
        out = Observable.__new__(Observable)
        out._n = self._n
        out._terms = dict(self._terms)
        for w, c in other._terms.items():
            out._terms[w] = out._terms.get(w, 0.0) + sign * c
        if self._dense is None and other._dense is None:
            out._dense = None
        else:
            a = self._dense if self._dense is not None else 0
            b = other._dense if other._dense is not None else 0
            out._dense = np.asarray(a + sign * b, dtype=complex)
            out._dense.setflags(write=False)
        return out

    def __add__(self, other):
        return self._combine(other, 1.0)

    def __sub__(self, other):
        return self._combine(other, -1.0)

    def __mul__(self, scalar):
        if isinstance(scalar, (complex, np.complexfloating)):
            raise TypeError(f"scalar must be real (observables are Hermitian); got {scalar!r}")
        if not isinstance(scalar, (Real, Box)) or isinstance(scalar, bool):
            return NotImplemented
        s = _coefficient(scalar, "scalar")
        out = Observable.__new__(Observable)
        out._n = self._n
        out._terms = {w: s * c for w, c in self._terms.items()}
        if self._dense is not None and isinstance(s, Box):
            raise TypeError("an observable with a dense part cannot take a traced scale factor "
                            "(only Pauli coefficients are differentiable)")
        out._dense = None if self._dense is None else s * self._dense
        if out._dense is not None:
            out._dense.setflags(write=False)
        return out

    __rmul__ = __mul__

    def __truediv__(self, scalar):
        if not isinstance(scalar, (Real, Box)) or isinstance(scalar, (bool, complex)):
            return NotImplemented
        if getval(scalar) == 0:
            raise ZeroDivisionError("cannot divide an observable by zero")
        return self * (1.0 / scalar)

    def __neg__(self):
        return self * -1.0

    def __matmul__(self, other):
        """The operator product ``self @ other`` by Pauli algebra (phases tracked).

        The product of two Hermitian operators is Hermitian exactly when they commute; then it
        is returned as an Observable (zero terms dropped), otherwise a ValueError says so and
        points to `qgradlib.commutator`. ``H @ H`` (for a variance) is always Hermitian.

        Examples
        --------
        >>> Z, X = Observable({"Z": 1.0}), Observable({"X": 1.0})
        >>> (Z @ Z).terms
        {'I': 1.0}
        >>> (Observable({"XX": 1.0}) @ Observable({"ZZ": 1.0})).terms   # XZ = -iY twice: -YY
        {'YY': -1.0}
        """
        if not isinstance(other, Observable):
            return NotImplemented
        real, imag, dense = _product(self, other)
        if dense is not None:
            if np.abs(dense - dense.conj().T).max() > _HERM_TOL * max(1.0, np.abs(dense).max()):
                raise ValueError(_NOT_HERMITIAN)
            return Observable.from_matrix(dense)
        scale = sum(abs(float(getval(c))) for c in self._terms.values()) * \
            sum(abs(float(getval(c))) for c in other._terms.values())
        if any(abs(float(getval(v))) > _HERM_TOL * max(1.0, scale) for v in imag.values()):
            raise ValueError(_NOT_HERMITIAN)
        return _from_terms(real, self._n)

    def __eq__(self, other):
        """Exactly the same operator data: the same nonzero Pauli coefficients and dense part."""
        if not isinstance(other, Observable):
            return NotImplemented
        return self._key() == other._key()

    def _key(self):
        terms = frozenset((w, float(getval(c))) for w, c in self._terms.items() if getval(c) != 0)
        dense = None
        if self._dense is not None and np.any(self._dense != 0):
            dense = self._dense.tobytes()
        return (self._n, terms, dense)

    def __hash__(self):
        return hash(self._key())

    @property
    def traced(self) -> bool:
        """True when some coefficient is an autograd value (being differentiated)."""
        return any(isinstance(c, Box) for c in self._terms.values())

    def __repr__(self):
        parts = [f"{w!r}: {float(getval(c)):g}" for w, c in self._terms.items()]
        if self._dense is not None:
            parts.append(f"dense {self._dense.shape[0]}x{self._dense.shape[0]}")
        return "Observable({" + ", ".join(parts) + "})"


_HERM_TOL = 1e-12
_NOT_HERMITIAN = ("the product of these observables is not Hermitian (they do not commute), so it "
                  "is no observable; qgradlib.commutator(H, G) gives the Hermitian -i[H, G], and "
                  "qgradlib.commutator(H, G, anti=True) gives {H, G} = H@G + G@H")
MAX_DENSE_QUBITS = 14

# single-letter products a*b = phase * c, the phase as a power of i
_TIMES = {("I", p): (0, p) for p in "IXYZ"}
_TIMES.update({(p, "I"): (0, p) for p in "XYZ"})
_TIMES.update({(p, p): (0, "I") for p in "XYZ"})
_TIMES.update({("X", "Y"): (1, "Z"), ("Y", "Z"): (1, "X"), ("Z", "X"): (1, "Y"),
               ("Y", "X"): (3, "Z"), ("Z", "Y"): (3, "X"), ("X", "Z"): (3, "Y")})


def word_product(a: str, b: str):
    """``(k, word)`` with ``P_a P_b = i**k P_word`` (Pauli algebra, letter by letter).

    Examples
    --------
    >>> word_product("XY", "YY")     # XY = iZ on qubit 0, YY = I on qubit 1
    (1, 'ZI')
    """
    k, out = 0, []
    for x, y in zip(a, b):
        dk, c = _TIMES[(x, y)]
        k += dk
        out.append(c)
    return k % 4, "".join(out)


def _product(a, b):
    """Real and imaginary coefficients of ``a @ b`` by word, or its dense matrix."""
    if a._n != b._n:
        raise ValueError(f"cannot multiply observables on {a._n} and {b._n} qubits")
    if a._dense is not None or b._dense is not None:
        return None, None, (a.matrix() @ b.matrix()).toarray()
    real, imag = {}, {}
    for wa, ca in a._terms.items():
        for wb, cb in b._terms.items():
            k, w = word_product(wa, wb)
            v = ca * cb
            # i**k: 1, i, -1, -i
            acc, sign = (real, 1.0) if k in (0, 2) else (imag, 1.0)
            if k in (2, 3):
                sign = -1.0
            acc[w] = acc.get(w, 0.0) + sign * v
    return real, imag, None


def _from_terms(terms, n):
    out = Observable.__new__(Observable)
    out._n = n
    out._terms = {w: c for w, c in terms.items() if isinstance(c, Box) or c != 0.0}
    out._dense = None
    return out


def commutator(a, b, anti=False):
    """``-i [a, b] = -i (a b - b a)``, Hermitian for Hermitian ``a`` and ``b``; with
    ``anti=True`` the anticommutator ``{a, b} = a b + b a``.

    ``[a, b] = i * commutator(a, b)``: the factor ``-i`` makes the result an observable (its
    expectation value is real). For instance ``d/da <expm(ia G) H expm(-ia G)>`` at ``a = 0``
    is ``<i[G, H]> = <commutator(H, G)>``.

    Examples
    --------
    >>> X, Y = Observable({"X": 1.0}), Observable({"Y": 1.0})
    >>> commutator(X, Y).terms          # [X, Y] = 2iZ, so -i[X, Y] = 2Z
    {'Z': 2.0}
    >>> commutator(X, Y, anti=True).terms
    {}
    """
    if not isinstance(a, Observable) or not isinstance(b, Observable):
        raise TypeError("commutator takes two Observables; got "
                        f"{type(a).__name__} and {type(b).__name__}")
    ra, ia, da = _product(a, b)
    rb, ib, db = _product(b, a)
    if da is not None:
        m = (-1j * (da - db)) if not anti else (da + db)
        return Observable.from_matrix((m + m.conj().T) / 2)
    if anti:
        words = set(ra) | set(rb)
        return _from_terms({w: ra.get(w, 0.0) + rb.get(w, 0.0) for w in words}, a._n)
    # -i (a b - b a): the real parts cancel, -i * (i * imag) = imag
    words = set(ia) | set(ib)
    return _from_terms({w: ia.get(w, 0.0) - ib.get(w, 0.0) for w in words}, a._n)


def _coefficient(c, name):
    # autograd values pass through: expectation values are differentiable in them
    return c if isinstance(c, Box) and isinstance(getval(c), (Real, np.floating, np.ndarray)) \
        and np.ndim(getval(c)) == 0 else _real(c, name)


def _real(c, name):
    if isinstance(c, (complex, np.complexfloating)) and not isinstance(c, Real):
        raise TypeError(f"{name} must be real (observables are Hermitian); got {c!r}")
    if isinstance(c, bool) or not isinstance(c, (Real, np.floating, np.integer)):
        raise TypeError(f"{name} must be a real number; got {type(c).__name__}")
    v = float(c)
    if not np.isfinite(v):
        raise ValueError(f"{name} must be finite; got {c!r}")
    return v


def _popcount(a):
    a = np.asarray(a, dtype=np.int64)
    # bitwise_count returns uint8, in which 1 - 2 * 1 wraps to 255: give back signed ints
    if hasattr(np, "bitwise_count"):
        return np.bitwise_count(a).astype(np.int64)
    return np.vectorize(lambda v: bin(v).count("1"), otypes=[np.int64])(a)
