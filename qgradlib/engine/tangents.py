"""Tangent states: the state's derivatives along gate angles, and generator covariances.

The metric tensor needs ``|d_i psi>`` (exact) or the covariance of the generators of each
layer in the state before that layer (Stokes, Izaac, Killoran and Carleo, Quantum 4, 269
(2020)); both are one walk over the circuit, here.

Examples
--------
>>> import numpy as np
>>> import qgradlib as qg
>>> c = qg.Circuit(1).ry(0)
>>> psi, D = state_derivatives(c, np.array([0.0]), (0,))
>>> np.round(D.real, 6).tolist()           # d/da (cos(a/2), sin(a/2)) at a = 0
[[0.0, 0.5]]
"""
from __future__ import annotations

import numpy as np

from ..rules.shift_rules import warn_approximate
from .adjoint import hamiltonian_derivative
from .memory import guard
from .statevector import apply_gate, apply_matrix, zero_states

__all__ = ["state_derivatives", "layer_covariances", "states_before", "effective_generator"]


def _derivative_matrix(gate, a):
    """dU/da for a Hamiltonian (exact) or function gate (central difference)."""
    if gate.kind == "hamiltonian":
        return hamiltonian_derivative(gate, a)
    warn_approximate(gate)
    h = 1e-6
    return (gate._matrices(np.array([a + h]))[0] - gate._matrices(np.array([a - h]))[0]) / (2 * h)


def state_derivatives(circuit, phi, columns):
    """psi (d,) and d psi / d phi_c (len(columns), d) in one pass over the circuit."""
    n = circuit.n_qubits
    guard(16 * (len(columns) + 1) * 2 ** n,
                 f"{len(columns) + 1} states of {n} qubits for the state derivatives")
    row = {c: i + 1 for i, c in enumerate(columns)}
    psi = zero_states(n, len(columns) + 1)
    col = -1
    for op in circuit.operations:
        g = op.gate
        if not g.parametric:
            psi = apply_gate(psi, n, g, op.qubits)
            continue
        col += 1
        a = phi[col]
        d = None
        if col in row and g.kind != "generator":
            d = apply_matrix(psi[:1], n, _derivative_matrix(g, a)[None], op.qubits)
        psi = apply_gate(psi, n, g, op.qubits, np.array([a]))
        if col in row:
            if d is None:   # dU/da = -i G U: the generator acts after the gate
                d = apply_matrix(psi[:1], n, -1j * np.asarray(g.generator), op.qubits)
            psi[row[col]] = d[0]
    return psi[0], psi[1:]


def layer_covariances(circuit, phi, columns, lays, diagonal=False):
    """Stokes et al.'s blocks: generator covariances in the state before each layer.

    ``lays`` are the circuit's layers (objects with ``columns`` and ``effective``, see
    `qgradlib.curvature.metric.layers`); returns the (len(columns), len(columns)) layerwise
    metric in gate-angle space, only the diagonal with ``diagonal=True``.
    """
    n = circuit.n_qubits
    pos = {c: i for i, c in enumerate(columns)}
    pops = circuit.parametric_operations
    g = np.zeros((len(columns), len(columns)))
    before = states_before(circuit, phi, [lay.columns[0] for lay in lays])
    for lay, psi in zip(lays, before):
        psi = psi[None]
        if lay.effective:
            c = lay.columns[0]
            op = pops[c]
            after = apply_gate(psi, n, op.gate, op.qubits, np.array([phi[c]]))
            k = apply_matrix(after, n, effective_generator(op.gate, phi[c]), op.qubits)
            g[pos[c], pos[c]] = np.real(np.vdot(k, k)) - np.real(np.vdot(after, k)) ** 2
            continue
        K = [apply_matrix(psi, n, np.asarray(pops[c].gate.generator), pops[c].qubits)[0]
             for c in lay.columns]
        mean = [np.real(np.vdot(psi[0], k)) for k in K]
        for a, ca in enumerate(lay.columns):
            for b, cb in enumerate(lay.columns):
                if diagonal and a != b:
                    continue
                g[pos[ca], pos[cb]] = np.real(np.vdot(K[a], K[b])) - mean[a] * mean[b]
    return g


def effective_generator(gate, a):
    """``K = i (dU/da) U^dagger`` of a Hamiltonian or function gate at angle ``a``: the
    Hermitian operator whose variance in the state after the gate is the gate's metric entry."""
    U = gate._matrices(np.array([a]))[0]
    K = 1j * _derivative_matrix(gate, a) @ U.conj().T
    return 0.5 * (K + K.conj().T)     # Hermitian exactly (a function gate's dU is a difference)


def states_before(circuit, phi, columns):
    """The state just before each parametric column in ``columns``: (len(columns), 2**n), one
    walk over the circuit."""
    n = circuit.n_qubits
    want = {c: i for i, c in enumerate(columns)}
    guard(16 * (len(columns) + 1) * 2 ** n, f"{len(columns) + 1} states of {n} qubits")
    out = np.zeros((len(columns), 2 ** n), dtype=complex)
    psi = zero_states(n, 1)
    col = -1
    for op in circuit.operations:
        if not op.gate.parametric:
            psi = apply_gate(psi, n, op.gate, op.qubits)
            continue
        col += 1
        if col in want:
            out[want[col]] = psi[0]
        psi = apply_gate(psi, n, op.gate, op.qubits, np.array([phi[col]]))
    return out
