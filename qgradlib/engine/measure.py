"""Expectation values and marginal probabilities from batches of states, by index arithmetic.

For a Pauli word with X/Y letters on qubits ``x`` and Z/Y letters on qubits ``z``,
``<psi|P|psi> = i**nY * sum_i conj(psi[i ^ x]) (-1)**popcount(i & z) psi[i]``. Flipping the
bits of ``x`` is reversing those axes of the (2,)*n view, so no index array and no matrix is
built; terms that flip the same bits share one product ``conj(psi[i ^ x]) * psi[i]``.
"""
from __future__ import annotations

from collections import defaultdict

import numpy as np

from ..paulis import masks

__all__ = ["pauli_expectation", "expectations", "probabilities"]


def _flipped(t, xq):
    if not xq:
        return t
    sl = [slice(None)] * t.ndim
    for q in xq:
        sl[1 + q] = slice(None, None, -1)
    return t[tuple(sl)]


def _signed_sum(prod, n, zq):
    """sum_i prod[i] * (-1)**popcount(i & z) over all but the batch axis."""
    other = tuple(1 + q for q in range(n) if q not in zq)
    r = prod.sum(axis=other) if other else prod
    for _ in zq:
        # each remaining axis (in ascending qubit order) contributes a (+1, -1) weight
        r = r[:, 0, ...] - r[:, 1, ...]
    return r


def pauli_terms_expectation(psi: np.ndarray, n: int, terms: dict) -> np.ndarray:
    """sum_k c_k <psi|P_k|psi> for every row; returns (B,) float."""
    B = psi.shape[0]
    t = psi.reshape((B,) + (2,) * n)
    by_x = defaultdict(list)
    for word, c in terms.items():
        xq, zq, ny = masks(word)
        by_x[xq].append((zq, ny, c))
    total = np.zeros(B)
    for xq, group in by_x.items():
        prod = (np.abs(t) ** 2) if not xq else np.conj(_flipped(t, xq)) * t
        for zq, ny, c in group:
            val = _signed_sum(prod, n, zq)
            total += c * np.real((1j ** ny) * val)
    return total


def pauli_expectation(psi: np.ndarray, n: int, word: str) -> np.ndarray:
    """<psi|P|psi> of one Pauli word for every row; returns (B,)."""
    return pauli_terms_expectation(psi, n, {word: 1.0})


def expectations(psi: np.ndarray, n: int, observables) -> np.ndarray:
    """Expectation of each observable for every row; returns (B, K) float."""
    out = np.empty((psi.shape[0], len(observables)))
    for k, obs in enumerate(observables):
        v = pauli_terms_expectation(psi, n, obs.terms) if obs.terms else 0.0
        if obs.dense is not None:
            v = v + np.real(np.einsum("bi,ij,bj->b", psi.conj(), obs.dense, psi))
        out[:, k] = v
    return out


def probabilities(psi: np.ndarray, n: int, qubits=None) -> np.ndarray:
    """Marginal probabilities over ``qubits`` (first listed = most significant); (B, 2**k)."""
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


def _sign_tensor(n, zq):
    shape = [1] * n
    s = np.ones([1] * n)
    for q in zq:
        sh = list(shape)
        sh[q] = 2
        s = s * np.array([1.0, -1.0]).reshape(sh)
    return s


def apply_observable(psi: np.ndarray, n: int, obs) -> np.ndarray:
    """O psi for every row (the state the adjoint method starts its bra from)."""
    B = psi.shape[0]
    t = psi.reshape((B,) + (2,) * n)
    out = np.zeros_like(t)
    for word, c in obs.terms.items():
        xq, zq, ny = masks(word)
        term = t * _sign_tensor(n, zq)[None] if zq else t
        out += (c * 1j ** ny) * _flipped(term, xq)
    out = out.reshape(B, -1)
    if obs.dense is not None:
        out += psi @ obs.dense.T
    return out
