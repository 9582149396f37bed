"""The benchmark workloads: a layered ansatz and a transverse-field Ising chain.

Layer = RY on every qubit, then CZ on (0, 1), (1, 2), ...; m = n * layers parameters.
"""
from __future__ import annotations

import numpy as np

import qgradlib as qg

__all__ = ["layered", "ring", "deep_narrow", "ising", "ising_terms", "angles"]


def layered(n: int, layers: int, trainable: int | None = None) -> qg.Circuit:
    """The layered circuit; only the first ``trainable`` RY angles are parameters (others fixed)."""
    c = qg.Circuit(n)
    k = 0
    rng = np.random.default_rng(7)
    for _ in range(layers):
        for q in range(n):
            if trainable is None or k < trainable:
                c.ry(q)
            else:
                c.ry(q, angle=float(rng.uniform(0, 2 * np.pi)))
            k += 1
        for q in range(n - 1):
            c.cz(q, q + 1)
    return c


def ring(n: int, layers: int) -> qg.Circuit:
    """Layers of RY on every qubit and CZ around the ring: 2 n gates and n parameters a layer."""
    c = qg.Circuit(n)
    for _ in range(layers):
        for q in range(n):
            c.ry(q)
        for q in range(n):
            c.cz(q, (q + 1) % n)
    return c


def ising_terms(n: int, field: float = 0.5) -> dict:
    """-sum Z_i Z_{i+1} - field * sum X_i as {Pauli word: coefficient}."""
    terms = {"I" * q + "ZZ" + "I" * (n - q - 2): -1.0 for q in range(n - 1)}
    terms.update({"I" * q + "X" + "I" * (n - q - 1): -field for q in range(n)})
    return terms


def ising(n: int, field: float = 0.5) -> qg.Observable:
    return qg.Observable(ising_terms(n, field))


def angles(circuit: qg.Circuit, seed: int = 0) -> np.ndarray:
    return np.random.default_rng(seed).uniform(0, 2 * np.pi, size=circuit.n_params)


def deep_narrow(n: int = 4, gates: int = 10_000, params: int = 1_641, seed: int = 11) -> qg.Circuit:
    """A long circuit on few qubits: ``gates`` gates, ``params`` of them trainable rotations
    (RX, RY, RZ or CRY, evenly spread), the others H, S, CNOT or CZ, drawn with ``seed``."""
    rng = np.random.default_rng(seed)
    c = qg.Circuit(n)
    trainable = set(np.linspace(0, gates - 1, params).round().astype(int).tolist())
    for k in range(gates):
        q = int(rng.integers(n))
        r = (q + 1 + int(rng.integers(n - 1))) % n
        if k in trainable:
            kind = int(rng.integers(4))
            if kind == 3:
                c.cry(q, r)
            else:
                (c.rx, c.ry, c.rz)[kind](q)
        else:
            kind = int(rng.integers(4))
            if kind == 0:
                c.h(q)
            elif kind == 1:
                c.s(q)
            elif kind == 2:
                c.cnot(q, r)
            else:
                c.cz(q, r)
    return c
