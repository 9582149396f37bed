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

from . import display
from .paulis import masks, parse_pauli

__all__ = ["Observable"]


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

    Examples
    --------
    >>> import qgradlib as qg
    >>> H = qg.Observable({"ZZ": -1.0, "XI": 0.5, "xi": 0.25})   # repeated strings are summed
    >>> H.n_qubits, H.terms
    (2, {'ZZ': -1.0, 'XI': 0.75})
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
            out[w] = out.get(w, 0.0) + _real(c, f"coefficient of {word!r}")
        self._terms, self._dense, self._n = out, None, n

    @classmethod
    def from_matrix(cls, matrix) -> "Observable":
        """An observable from a dense Hermitian matrix of size 2**n.

        Examples
        --------
        >>> import numpy as np
        >>> Observable.from_matrix(np.diag([1.0, 0.0])).n_qubits
        1
        """
        from .gates import _hermitian

        m = _hermitian(matrix, "matrix")
        obj = cls.__new__(cls)
        obj._terms, obj._dense, obj._n = {}, m, int(m.shape[0]).bit_length() - 1
        obj._dense.setflags(write=False)
        return obj

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
            vals.append(c * (1j ** ny) * sign)
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
        if not isinstance(scalar, Real) or isinstance(scalar, bool):
            return NotImplemented
        s = _real(scalar, "scalar")
        out = Observable.__new__(Observable)
        out._n = self._n
        out._terms = {w: s * c for w, c in self._terms.items()}
        out._dense = None if self._dense is None else s * self._dense
        if out._dense is not None:
            out._dense.setflags(write=False)
        return out

    __rmul__ = __mul__

    def __neg__(self):
        return self * -1.0

    def __eq__(self, other):
        if not isinstance(other, Observable) or other._n != self._n:
            return NotImplemented if not isinstance(other, Observable) else False
        return (self - other)._is_zero()

    def _is_zero(self):
        if any(abs(c) > 1e-14 for c in self._terms.values()):
            return False
        return self._dense is None or np.abs(self._dense).max() <= 1e-14

    __hash__ = None

    def _repr_html_(self, limit=12):
        """The terms as a table (the largest ``limit`` by magnitude), for notebooks."""
        order = sorted(self._terms.items(), key=lambda kv: (-abs(kv[1]), kv[0]))
        rows = [[w, c] for w, c in order[:limit]]
        note = f"and {len(order) - limit} smaller terms" if len(order) > limit else None
        if self._dense is not None:
            note = ((note + "; ") if note else "") + f"plus a dense {self._dense.shape[0]}x" \
                f"{self._dense.shape[0]} Hermitian part"
        title = f"Observable on {display.plural(self._n, 'qubit')}, {display.plural(len(order), 'Pauli term')}"
        return display.display(title, display.table(["Pauli string", "coefficient"], rows)
                               if rows else "", note=note)

    def __repr__(self):
        parts = [f"{w!r}: {c:g}" for w, c in self._terms.items()]
        if self._dense is not None:
            parts.append(f"dense {self._dense.shape[0]}x{self._dense.shape[0]}")
        return "Observable({" + ", ".join(parts) + "})"


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
