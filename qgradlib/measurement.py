"""Measurement settings and finite-shot estimates.

A device measures Pauli terms by rotating each qubit into the eigenbasis of its letter and
reading out bits in the computational basis. Terms whose letters agree on every qubit where
both act (qubit-wise commuting) share one setting. Sampling a setting with ``s`` shots is
drawing basis-state counts from a multinomial over the rotated state's probabilities.

Examples
--------
>>> import qgradlib as qg
>>> H = qg.Observable({"ZZI": 1.0, "IZZ": 1.0, "XII": 0.5, "IXI": 0.5})
>>> [s.basis for s in measurement_settings(H)]
['ZZZ', 'XXI']
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .engine.measure import probabilities
from .engine.statevector import apply_matrix
from .observables import Observable

__all__ = ["Setting", "measurement_settings", "sample_estimate", "make_rng"]

_H = np.array([[1, 1], [1, -1]], dtype=complex) / np.sqrt(2)
_ROT = {"X": _H, "Y": _H @ np.diag([1, -1j])}


@dataclass(frozen=True)
class Setting:
    """One measurement setting: a basis letter per qubit and the terms it measures."""

    basis: str
    terms: tuple  # ((word, coefficient), ...)


def measurement_settings(observable: Observable) -> list:
    """Group the Pauli terms into qubit-wise commuting settings (greedy, largest first).

    The identity term needs no setting. A dense part, if any, is not included here: it is
    measured in its own eigenbasis (one more setting).
    """
    groups = []  # [basis list, terms]
    items = sorted(observable.terms.items(), key=lambda kv: -abs(kv[1]))
    for word, c in items:
        if set(word) == {"I"}:
            continue
        for basis, terms in groups:
            if all(b == "I" or w == "I" or b == w for b, w in zip(basis, word)):
                for q, w in enumerate(word):
                    if w != "I":
                        basis[q] = w
                terms.append((word, c))
                break
        else:
            groups.append([list(word), [(word, c)]])
    return [Setting("".join(b), tuple(t)) for b, t in groups]


def n_settings(observable: Observable) -> int:
    """Measurement settings a device needs for one estimate of ``observable``."""
    return max(1, len(measurement_settings(observable)) + (observable.dense is not None))


def make_rng(seed):
    """A numpy Generator from an int, a Generator or None."""
    if isinstance(seed, np.random.Generator):
        return seed
    if seed is None or (isinstance(seed, (int, np.integer)) and not isinstance(seed, bool)):
        return np.random.default_rng(seed)
    raise TypeError(f"seed must be an int, a numpy.random.Generator or None; got {type(seed).__name__}")


def _parities(n, qubits):
    idx = np.arange(2 ** n)
    mask = sum(1 << (n - 1 - q) for q in qubits)
    bits = idx & mask
    par = np.zeros(idx.shape, dtype=np.int64)
    while np.any(bits):
        par ^= bits & 1
        bits >>= 1
    return 1.0 - 2.0 * par


def setting_counts(psi_row, n, setting, shots, rng):
    """Basis-state counts (2**n,) from ``shots`` readouts in ``setting``'s basis."""
    psi = psi_row.reshape(1, -1)
    for q, b in enumerate(setting.basis):
        if b in _ROT:
            psi = apply_matrix(psi, n, _ROT[b], (q,))
    p = probabilities(psi, n)[0]
    p = np.clip(p, 0, None)
    return rng.multinomial(shots, p / p.sum())


def sample_estimate(psi_row, n, observable: Observable, shots: int, rng) -> float:
    """Finite-shot estimate of <observable>: ``shots`` readouts in each setting."""
    total = observable.terms.get("I" * n, 0.0)
    for setting in measurement_settings(observable):
        counts = setting_counts(psi_row, n, setting, shots, rng)
        for word, c in setting.terms:
            support = [q for q, w in enumerate(word) if w != "I"]
            total += c * float(counts @ _parities(n, support)) / shots
    if observable.dense is not None:
        ev, vec = np.linalg.eigh(observable.dense)
        p = np.clip(np.abs(vec.conj().T @ psi_row) ** 2, 0, None)
        counts = rng.multinomial(shots, p / p.sum())
        total += float(counts @ ev) / shots
    return total
