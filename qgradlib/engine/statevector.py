"""Statevector kernels on batches of states, shape (B, 2**n).

Gates act on reshaped views: a k-qubit matrix multiplies the axes of its qubits, a diagonal
gate multiplies by its phases broadcast along those axes. No full-size matrix is ever built.
"""
from __future__ import annotations

import numpy as np

from .memory import guard

__all__ = ["zero_states", "apply_matrix", "apply_diagonal", "apply_gate", "run"]


def zero_states(n_qubits: int, batch: int = 1) -> np.ndarray:
    """``batch`` copies of |0...0>, shape (batch, 2**n)."""
    nbytes = batch * (2 ** n_qubits) * 16
    guard(nbytes, f"a batch of {batch} state(s) of {n_qubits} qubits")
    psi = np.zeros((batch, 2 ** n_qubits), dtype=complex)
    psi[:, 0] = 1.0
    return psi


def apply_matrix(psi: np.ndarray, n: int, mat: np.ndarray, qubits) -> np.ndarray:
    """Apply a (d, d) or per-row (B, d, d) matrix to ``qubits``; returns a new array."""
    B = psi.shape[0]
    k = len(qubits)
    if k == 1:
        q = qubits[0]
        v = psi.reshape(B, 2 ** q, 2, 2 ** (n - q - 1))
        m = mat if mat.ndim == 2 else mat[:, None, None, :, :]
        if mat.ndim == 2:
            out = np.empty_like(v)
            np.multiply(m[0, 0], v[:, :, 0], out=out[:, :, 0])
            out[:, :, 0] += m[0, 1] * v[:, :, 1]
            np.multiply(m[1, 0], v[:, :, 0], out=out[:, :, 1])
            out[:, :, 1] += m[1, 1] * v[:, :, 1]
        else:
            m = mat.reshape(B, 1, 2, 2, 1)
            out = np.empty_like(v)
            out[:, :, 0] = m[:, :, 0, 0] * v[:, :, 0] + m[:, :, 0, 1] * v[:, :, 1]
            out[:, :, 1] = m[:, :, 1, 0] * v[:, :, 0] + m[:, :, 1, 1] * v[:, :, 1]
        return out.reshape(B, -1)
    axes = [1 + q for q in qubits]
    t = psi.reshape((B,) + (2,) * n)
    t = np.moveaxis(t, axes, range(1, k + 1)).reshape(B, 2 ** k, -1)
    t = mat @ t
    t = t.reshape((B,) + (2,) * n)
    return np.ascontiguousarray(np.moveaxis(t, range(1, k + 1), axes)).reshape(B, -1)


def apply_diagonal(psi: np.ndarray, n: int, diag: np.ndarray, qubits) -> np.ndarray:
    """Multiply by a (d,) or per-row (B, d) diagonal on ``qubits``, in place; returns psi."""
    B = psi.shape[0]
    k = len(qubits)
    d = np.asarray(diag).reshape((-1,) + (2,) * k)
    order = np.argsort(qubits)
    d = np.transpose(d, [0] + [1 + int(i) for i in order])
    shape = [d.shape[0]] + [1] * n
    for q in qubits:
        shape[1 + q] = 2
    t = psi.reshape((B,) + (2,) * n)
    t *= d.reshape(shape)
    return psi


def apply_gate(psi, n, gate, qubits, angles=None):
    """Apply ``gate`` (angles: None, or per-row array of shape (B,) or (1,))."""
    if not gate.parametric:
        if gate.diagonal:
            return apply_diagonal(psi, n, np.diag(gate.unitary), qubits)
        return apply_matrix(psi, n, gate.unitary, qubits)
    a = np.asarray(angles, dtype=float).reshape(-1)
    shared = a.size == 1 or np.all(a == a[0])
    if shared:
        a = a[:1]
    if gate.diagonal:
        dv = gate.diagonal_values(a)
        return apply_diagonal(psi, n, dv[0] if shared else dv, qubits)
    mats = gate._matrices(a)
    return apply_matrix(psi, n, mats[0] if shared else mats, qubits)


def run(circuit, phi: np.ndarray, inserts=None, psi=None) -> np.ndarray:
    """Final states for gate angles ``phi`` of shape (B, G); returns (B, 2**n).

    ``inserts`` (optional, one entry a row) holds split points of Hamiltonian gates: a dict
    {column: ((r, t), ...)} per row, used by the stochastic shift rule.
    """
    from ..gates import hamiltonian_matrices

    phi = np.asarray(phi, dtype=float)
    B = phi.shape[0]
    n = circuit.n_qubits
    if psi is None:
        psi = zero_states(n, B)
    col = 0
    for op in circuit.operations:
        g = op.gate
        if not g.parametric:
            psi = apply_gate(psi, n, g, op.qubits)
            continue
        a = phi[:, col]
        if g.kind == "hamiltonian" and inserts is not None and any(col in row for row in inserts):
            mats = np.concatenate([hamiltonian_matrices(g, a[b:b + 1], row.get(col, ()))
                                   for b, row in enumerate(inserts)])
            psi = apply_matrix(psi, n, mats, op.qubits)
        else:
            psi = apply_gate(psi, n, g, op.qubits, a)
        col += 1
    return psi
