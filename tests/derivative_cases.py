"""Circuits described once, built both as qgradlib circuits and as dense reference op lists.

The description is the reference's op tuple (see tests/reference/derivatives.py); `to_circuit`
turns it into a `qgradlib.Circuit` with the same gates, qubits and angle map.
"""
from __future__ import annotations

import numpy as np

import qgradlib as qg
from reference import derivatives as ref

ONE_QUBIT = ("RX", "RY", "RZ", "PHASE")
TWO_QUBIT = ("CRX", "CRY", "CRZ", "CPHASE", "RXX", "RYY", "RZZ")
FIXED_1 = ("H", "X", "Y", "Z", "S", "T", "SX")
FIXED_2 = ("CNOT", "CZ", "SWAP")


def to_circuit(ops, n, custom=None):
    """A qgradlib circuit for the reference ops; ``custom`` maps id(kind) -> qg.Gate."""
    c = qg.Circuit(n)
    for kind, qubits, spec in ops:
        gate = custom[id(kind)] if isinstance(kind, tuple) else qg.gates.STANDARD[kind]
        if spec is None:
            c.add(gate, qubits)
        elif isinstance(spec, tuple):
            param, scale, offset = spec
            c.add(gate, qubits, param, scale=scale, offset=offset)
        else:
            c.add(gate, qubits, angle=spec)
    return c


def scramble(n, rng):
    """Fixed gates that make the state generic (no accidental zero derivatives)."""
    ops = []
    for q in range(n):
        ops.append(("H", (q,), None))
        ops.append(("RY", (q,), float(rng.uniform(-np.pi, np.pi))))
        ops.append(("RZ", (q,), float(rng.uniform(-np.pi, np.pi))))
    for q in range(n - 1):
        ops.append(("CNOT", (q, q + 1), None))
    return ops


def random_pauli_observable(n, rng, k=4):
    """(qg.Observable, dense matrix) of a random real combination of k Pauli words."""
    terms = {}
    while len(terms) < k:
        w = "".join(rng.choice(list("IXYZ"), size=n))
        if set(w) != {"I"}:
            terms[w] = float(rng.normal())
    obs = qg.Observable(terms)
    dense = sum(c * ref.pauli(w) for w, c in terms.items())
    return obs, dense


def rotation_layers(n, layers=3):
    """Layers of RY, RX and RZ (one a qubit, rotating with the layer) with a CNOT ladder
    after each: every gate its own parameter, so the gate angles are theta itself."""
    c = qg.Circuit(n)
    for layer in range(layers):
        for q in range(n):
            [c.ry, c.rx, c.rz][(q + layer) % 3](q)
        for q in range(n - 1):
            c.cnot(q, q + 1)
    return c
