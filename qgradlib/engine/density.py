"""The density-matrix path: noisy circuits on the statevector kernels.

A density matrix ``rho`` of n qubits is stored as a state of 2n qubits, ``rho[i, j]`` at
index ``i * 2**n + j``: qubits 0..n-1 carry the row index, qubits n..2n-1 the column index.
Then ``U rho U^dagger`` is ``U`` on qubits ``q`` and ``conj(U)`` on qubits ``n + q``, and a
channel with Kraus operators ``K_k`` is the matrix ``sum_k K_k (x) conj(K_k)`` on qubits
``q + (n + q)``; both are calls of `apply_matrix` / `apply_diagonal` on the 2n-qubit vector.

Measurements read the diagonal and chosen off-diagonals by index arithmetic:
``Tr(rho P) = i**nY * sum_j (-1)**popcount(j & z) rho[j, j ^ x]`` for a Pauli word with
X/Y mask ``x`` and Z/Y mask ``z``; no 4**n matrix is built.
"""
from __future__ import annotations

from collections import defaultdict

import numpy as np

from .threads import limited
from ..circuits.paulis import masks
from .measure import probabilities as _state_marginals
from .memory import guard_states
from .statevector import apply_diagonal, apply_matrix, zero_states

__all__ = ["density_states", "zero_densities", "apply_unitary", "apply_channel", "run_density",
           "density_expectations", "density_probabilities", "diagonal", "marginal"]


def density_states() -> int:
    """Density matrices per row alive at the peak of `run_density`: the current one, the two
    products of `apply_unitary` (``U rho``, then ``U rho U^dagger``) and a kernel buffer.
    The memory guard's estimate: change it with `run_density`."""
    return 4


def zero_densities(n: int, batch: int = 1) -> np.ndarray:
    """``batch`` copies of |0...0><0...0| vectorised, shape (batch, 4**n)."""
    guard_states(n, batch * density_states(), f"a density-matrix run of {batch} row(s)", density=True)
    # |0><0| vectorised is the 2n-qubit zero state
    return zero_states(2 * n, batch)


def apply_unitary(rho, n, mat, qubits, diag=False):
    """``U rho U^dagger`` row-wise; ``mat`` is (d, d) or (B, d, d), or a diagonal (d,)/(B, d)."""
    cols = tuple(n + q for q in qubits)
    if diag:
        rho = apply_diagonal(rho, 2 * n, mat, tuple(qubits))
        return apply_diagonal(rho, 2 * n, np.conj(mat), cols)
    rho = apply_matrix(rho, 2 * n, mat, tuple(qubits))
    return apply_matrix(rho, 2 * n, np.conj(mat), cols)


def apply_channel(rho, n, channel, qubits):
    """``sum_k K_k rho K_k^dagger`` on ``qubits`` for every row."""
    qs = tuple(qubits)
    return apply_matrix(rho, 2 * n, channel.superoperator(), qs + tuple(n + q for q in qs))


def _gate(rho, n, gate, qubits, a):
    """Apply a gate at per-row angles ``a`` (B,) or None (fixed)."""
    if not gate.parametric:
        if gate.diagonal:
            return apply_unitary(rho, n, np.diag(gate.unitary), qubits, diag=True)
        return apply_unitary(rho, n, gate.unitary, qubits)
    shared = np.all(a == a[0])
    a = a[:1] if shared else a
    if gate.diagonal:
        d = gate.diagonal_values(a)
        return apply_unitary(rho, n, d[0] if shared else d, qubits, diag=True)
    m = gate._matrices(a)
    return apply_unitary(rho, n, m[0] if shared else m, qubits)


@limited
def run_density(circuit, phi, inserts=None) -> np.ndarray:
    """Final density matrices for gate angles ``phi`` (B, G); returns (B, 4**n) vectorised.

    ``inserts`` carries the split points of Hamiltonian gates, as in `statevector.run`.
    """
    from ..circuits.gates import hamiltonian_matrices

    phi = np.asarray(phi, dtype=float)
    B = phi.shape[0]
    n = circuit.n_qubits
    rho = zero_densities(n, B)
    col = 0
    for op in circuit.operations:
        g = op.gate
        if g.kind == "channel":
            rho = apply_channel(rho, n, g, op.qubits)
            continue
        if not g.parametric:
            rho = _gate(rho, n, g, op.qubits, None)
            continue
        a = phi[:, col]
        if g.kind == "hamiltonian" and inserts is not None and any(col in row for row in inserts):
            mats = np.concatenate([hamiltonian_matrices(g, a[b:b + 1], row.get(col, ()))
                                   for b, row in enumerate(inserts)])
            rho = apply_unitary(rho, n, mats, op.qubits)
        else:
            rho = _gate(rho, n, g, op.qubits, a)
        col += 1
    return rho


def _signs(n, zq):
    """(-1)**popcount(j & z) for j in 0..2**n-1, as float (2**n,)."""
    j = np.arange(2 ** n)
    s = np.ones(2 ** n)
    for q in zq:
        s *= 1.0 - 2.0 * ((j >> (n - 1 - q)) & 1)
    return s


def diagonal(rho, n) -> np.ndarray:
    """Real diagonal of every vectorised ``rho``: the basis-state probabilities, (B, 2**n)."""
    D = 2 ** n
    return np.real(rho.reshape(-1, D, D).diagonal(axis1=1, axis2=2)).copy()


def density_expectations(rho, n, observables) -> np.ndarray:
    """``Tr(rho O)`` of each observable for every row; returns (B, K) float."""
    D = 2 ** n
    r = rho.reshape(-1, D, D)
    j = np.arange(D)
    out = np.zeros((r.shape[0], len(observables)))
    for k, obs in enumerate(observables):
        by_x = defaultdict(list)
        for word, c in obs.terms.items():
            xq, zq, ny = masks(word)
            by_x[sum(1 << (n - 1 - q) for q in xq)].append((zq, ny, c))
        for x, group in by_x.items():
            off = r[:, j, j ^ x]   # rho[j, j ^ x]: one (off-)diagonal, 2**n entries a row
            for zq, ny, c in group:
                out[:, k] += c * np.real((1j ** ny) * (off @ _signs(n, zq)))
        if obs.dense is not None:
            out[:, k] += np.real(np.einsum("bij,ji->b", r, obs.dense))
    return out


def marginal(p, n, qubits=None) -> np.ndarray:
    """Marginals (B, 2**k) over ``qubits`` of probability rows ``p`` (B, 2**n).

    Reuses the statevector marginaliser on amplitudes ``sqrt(p)`` (``|sqrt(p)|**2 = p``).
    """
    return _state_marginals(np.sqrt(np.clip(p, 0.0, None)), n, qubits)


def density_probabilities(rho, n, qubits=None) -> np.ndarray:
    """Marginal probabilities over ``qubits`` (first listed = most significant); (B, 2**k)."""
    p = np.clip(diagonal(rho, n), 0.0, None)
    return p if qubits is None else marginal(p, n, qubits)
