"""Adjoint differentiation: one forward pass, one backward pass with bra and ket states.

With ``psi_k`` the state after gate k and ``lam_k = U_{k+1}^dag ... U_N^dag O psi_N``,
``dE/da_k = 2 Re <lam_k| dU_k/da |psi_{k-1}>``; for ``U = expm(-1j a G)`` this is
``2 Im <lam_k| G |psi_k>`` (Jones and Gacon, arXiv:2009.02823 (2020)). The bra and ket are
undone together, in one batched call per gate. Exact, but a device cannot run it.
"""
from __future__ import annotations

import numpy as np

from .statevector import apply_diagonal, apply_matrix, run

__all__ = ["adjoint_gradient", "hamiltonian_derivative"]


def hamiltonian_derivative(gate, a: float) -> np.ndarray:
    """d/da expm(-1j (W + a P)) by the Daleckii-Krein formula (exact)."""
    from ..paulis import pauli_matrix

    P = pauli_matrix(gate.drive)
    ev, vec = np.linalg.eigh(gate.drift + a * P)
    mu = -1j * ev
    e = np.exp(mu)
    diff = mu[:, None] - mu[None, :]
    close = np.abs(diff) < 1e-12
    gamma = np.where(close, e[:, None], (e[:, None] - e[None, :]) / np.where(close, 1.0, diff))
    return vec @ (gamma * (vec.conj().T @ (-1j * P) @ vec)) @ vec.conj().T


def _function_derivative(gate, a, h=1e-6):
    return (gate._matrices(np.array([a + h]))[0] - gate._matrices(np.array([a - h]))[0]) / (2 * h)


def _undo(both, n, gate, qubits, a2):
    """Apply U(a)^dagger row-wise; a2 are the angles of the stacked rows (or None)."""
    if not gate.parametric:
        if gate.diagonal:
            return apply_diagonal(both, n, np.conj(np.diag(gate.unitary)), qubits)
        return apply_matrix(both, n, gate.unitary.conj().T, qubits)
    shared = np.all(a2 == a2[0])
    a = a2[:1] if shared else a2
    if gate.diagonal:
        d = np.conj(gate.diagonal_values(a))
        return apply_diagonal(both, n, d[0] if shared else d, qubits)
    m = np.conj(np.swapaxes(gate._matrices(a), -1, -2))
    return apply_matrix(both, n, m[0] if shared else m, qubits)


def adjoint_gradient(circuit, phi, apply_observable, columns=None) -> np.ndarray:
    """dE/dphi for every row of ``phi`` (P, G), where ``E = <psi|O|psi>``.

    ``apply_observable(psi) -> O psi`` row-wise (the observable may differ by row).
    Columns not in ``columns`` are left at zero.
    """
    phi = np.asarray(phi, dtype=float)
    P, G = phi.shape
    n = circuit.n_qubits
    want = set(range(G)) if columns is None else set(columns)
    psi = run(circuit, phi)
    lam = apply_observable(psi)
    both = np.concatenate([psi, lam])
    del psi, lam
    grad = np.zeros((P, G))
    col = G
    for op in reversed(circuit.operations):
        g = op.gate
        if not g.parametric:
            both = _undo(both, n, g, op.qubits, None)
            continue
        col -= 1
        a = phi[:, col]
        a2 = np.concatenate([a, a])
        if col not in want:
            both = _undo(both, n, g, op.qubits, a2)
            continue
        if g.kind == "generator":
            mu = apply_matrix(both[:P], n, g.generator, op.qubits)
            grad[:, col] = 2 * np.imag(np.einsum("bi,bi->b", both[P:].conj(), mu))
            del mu
            both = _undo(both, n, g, op.qubits, a2)
        else:
            lam_k = both[P:].copy()
            both = _undo(both, n, g, op.qubits, a2)
            if g.kind == "function":
                from ..gates import warn_approximate
                warn_approximate(g)      # the matrix derivative is a finite difference here too
            deriv = hamiltonian_derivative if g.kind == "hamiltonian" else _function_derivative
            D = np.stack([deriv(g, x) for x in a])
            dpsi = apply_matrix(both[:P], n, D, op.qubits)
            grad[:, col] = 2 * np.real(np.einsum("bi,bi->b", lam_k.conj(), dpsi))
    return grad
