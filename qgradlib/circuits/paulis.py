"""Pauli strings: parsing, dense matrices of single words, and bit masks.

A Pauli string has one letter per qubit, qubit 0 first. ``P|i> = i**nY * (-1)**popcount(i & z)
|i ^ x>`` with ``x`` the mask of X and Y letters and ``z`` the mask of Z and Y letters, which
is what lets expectation values be computed by index arithmetic instead of matrices.
"""
from __future__ import annotations

from functools import lru_cache, reduce

import numpy as np

_SINGLE = {
    "I": np.eye(2, dtype=complex),
    "X": np.array([[0, 1], [1, 0]], dtype=complex),
    "Y": np.array([[0, -1j], [1j, 0]], dtype=complex),
    "Z": np.array([[1, 0], [0, -1]], dtype=complex),
}


def parse_pauli(word, n_qubits=None, name="Pauli string") -> str:
    """Validate a Pauli word; return it upper-cased."""
    if not isinstance(word, str):
        raise TypeError(f"{name} must be a string of the letters I, X, Y, Z; got {type(word).__name__}")
    w = word.upper()
    bad = sorted(set(w) - set("IXYZ"))
    if not w or bad:
        raise ValueError(f"{name} {word!r} must be a non-empty string of the letters I, X, Y, Z"
                         + (f"; found {''.join(bad)!r}" if bad else ""))
    if n_qubits is not None and len(w) != n_qubits:
        raise ValueError(f"{name} {word!r} has {len(w)} letters; expected one per qubit ({n_qubits})")
    return w


def pauli_matrix(word: str) -> np.ndarray:
    """Dense matrix of one Pauli word (qubit 0 is the leftmost Kronecker factor)."""
    return reduce(np.kron, (_SINGLE[c] for c in parse_pauli(word)))


@lru_cache(maxsize=2 ** 16)
def masks(word: str):
    """(x_qubits, z_qubits, n_y) of a Pauli word (memoised: every readout asks again)."""
    x = tuple(q for q, c in enumerate(word) if c in "XY")
    z = tuple(q for q, c in enumerate(word) if c in "ZY")
    return x, z, word.count("Y")
