"""A dense reference simulator for the curvature tests, independent of qgradlib's engine.

Every gate is written out here as a full 2**n matrix (Kronecker products with identities,
then an axis permutation), unitaries come from scipy.linalg.expm and exact gate derivatives
from scipy.linalg.expm_frechet. Only the circuit's description (gate names, qubits, how each
angle is formed, and the user-supplied generator / drift / drive of custom gates) is read
from qgradlib; no qgradlib matrix, rule or kernel is used.
"""
from __future__ import annotations

from functools import reduce

import numpy as np
from scipy.linalg import expm, expm_frechet

I2 = np.eye(2, dtype=complex)
PX = np.array([[0, 1], [1, 0]], dtype=complex)
PY = np.array([[0, -1j], [1j, 0]], dtype=complex)
PZ = np.array([[1, 0], [0, -1]], dtype=complex)
ONE = np.diag([0.0, 1.0]).astype(complex)
LETTER = {"I": I2, "X": PX, "Y": PY, "Z": PZ}

GENERATORS = {
    "RX": PX / 2, "RY": PY / 2, "RZ": PZ / 2, "PHASE": -ONE,
    "CRX": np.kron(ONE, PX / 2), "CRY": np.kron(ONE, PY / 2), "CRZ": np.kron(ONE, PZ / 2),
    "CPHASE": -np.kron(ONE, ONE),
    "RXX": np.kron(PX, PX) / 2, "RYY": np.kron(PY, PY) / 2, "RZZ": np.kron(PZ, PZ) / 2,
}
_CNOT = np.eye(4, dtype=complex)[[0, 1, 3, 2]]
FIXED = {
    "H": np.array([[1, 1], [1, -1]], dtype=complex) / np.sqrt(2), "X": PX, "Y": PY, "Z": PZ,
    "S": np.diag([1, 1j]), "T": np.diag([1, np.exp(1j * np.pi / 4)]),
    "SX": np.array([[1 + 1j, 1 - 1j], [1 - 1j, 1 + 1j]]) / 2,
    "CNOT": _CNOT, "CZ": np.diag([1, 1, 1, -1]).astype(complex),
    "SWAP": np.eye(4, dtype=complex)[[0, 2, 1, 3]],
}


def word_matrix(word):
    return reduce(np.kron, [LETTER[c] for c in word])


def embed(mat, qubits, n):
    """``mat`` on ``qubits`` (first listed = most significant) as a 2**n matrix."""
    k = len(qubits)
    rest = [q for q in range(n) if q not in qubits]
    full = np.kron(mat, np.eye(2 ** len(rest)))          # axes ordered (qubits..., rest...)
    order = list(qubits) + rest
    t = full.reshape((2,) * (2 * n))
    inv = np.argsort(order)
    t = t.transpose(list(inv) + [n + i for i in inv])
    return t.reshape(2 ** n, 2 ** n) if k else full


def observable_matrix(obs):
    n = obs.n_qubits
    M = np.zeros((2 ** n, 2 ** n), dtype=complex)
    for w, c in obs.terms.items():
        M += c * word_matrix(w)
    if obs.dense is not None:
        M += np.asarray(obs.dense)
    return M


def _angle(op, theta):
    return op.angle if op.param is None else op.scale * theta[op.param] + op.offset


def _full_generator(op, n):
    """(A, B): the gate is expm(-1j (A + a B)) as full matrices."""
    g = op.gate
    if g.kind == "hamiltonian":
        return embed(np.asarray(g.drift), op.qubits, n), embed(word_matrix(g.drive), op.qubits, n)
    G = GENERATORS[g.name] if g.name in GENERATORS else np.asarray(g.generator)
    return np.zeros((2 ** n, 2 ** n)), embed(G, op.qubits, n)


def gate_and_derivative(op, theta, n):
    """Full unitary of ``op`` at ``theta`` and its derivative in the gate angle."""
    if not op.gate.parametric:
        return embed(FIXED[op.gate.name] if op.gate.name in FIXED else np.asarray(op.gate.unitary),
                     op.qubits, n), None
    A, B = _full_generator(op, n)
    a = _angle(op, theta)
    U, dU = expm_frechet(-1j * (A + a * B), -1j * B)
    return U, dU


def state_and_derivatives(circuit, theta):
    """psi (d,) and d psi / d theta (m, d), by the product rule over the operations."""
    n, m = circuit.n_qubits, circuit.n_params
    theta = np.asarray(theta, dtype=float)
    psi = np.zeros(2 ** n, dtype=complex)
    psi[0] = 1.0
    dpsi = np.zeros((m, 2 ** n), dtype=complex)
    for op in circuit.operations:
        U, dU = gate_and_derivative(op, theta, n)
        new_d = dpsi @ U.T
        if dU is not None and op.param is not None:
            new_d[op.param] += op.scale * (dU @ psi)
        psi, dpsi = U @ psi, new_d
    return psi, dpsi


def expectation(circuit, obs, theta):
    psi, _ = state_and_derivatives(circuit, theta)
    return float(np.real(psi.conj() @ observable_matrix(obs) @ psi))


def gradient(circuit, obs, theta):
    psi, dpsi = state_and_derivatives(circuit, theta)
    return 2 * np.real(dpsi.conj() @ observable_matrix(obs) @ psi)


def hessian_fd(circuit, obs, theta, h=1e-5):
    """Central differences of the exact gradient (error ~ h**2 and eps / h)."""
    theta = np.asarray(theta, dtype=float)
    E = np.eye(theta.size)
    H = np.stack([(gradient(circuit, obs, theta + h * e) - gradient(circuit, obs, theta - h * e))
                  / (2 * h) for e in E])
    return (H + H.T) / 2


def third_fd(circuit, obs, theta, h=1e-3):
    """d_j d_k of the exact gradient by second central differences; (m, m, m)."""
    theta = np.asarray(theta, dtype=float)
    m = theta.size
    E = np.eye(m)
    g = lambda t: gradient(circuit, obs, t)  # noqa: E731
    T = np.zeros((m, m, m))
    for j in range(m):
        for k in range(m):
            T[:, j, k] = (g(theta + h * E[j] + h * E[k]) - g(theta + h * E[j] - h * E[k])
                          - g(theta - h * E[j] + h * E[k]) + g(theta - h * E[j] - h * E[k])) / (4 * h * h)
    return T


def metric(circuit, theta):
    """Re(<d_i psi|d_j psi> - <d_i psi|psi><psi|d_j psi>)."""
    psi, dpsi = state_and_derivatives(circuit, theta)
    v = dpsi.conj() @ psi                     # <d_i psi|psi>
    return np.real(dpsi.conj() @ dpsi.T - np.outer(v, v.conj()))


def probabilities_and_derivatives(circuit, theta, qubits=None):
    """Marginal probabilities on ``qubits`` (first = most significant) and their gradient."""
    n = circuit.n_qubits
    psi, dpsi = state_and_derivatives(circuit, theta)
    p = np.abs(psi) ** 2
    dp = 2 * np.real(dpsi * psi.conj()[None, :])
    if qubits is None:
        return p, dp
    qubits = list(qubits)
    rest = [q for q in range(n) if q not in qubits]

    def marg(v):
        t = v.reshape((-1,) + (2,) * n)
        t = t.transpose([0] + [1 + q for q in qubits] + [1 + q for q in rest])
        return t.reshape(t.shape[0], 2 ** len(qubits), -1).sum(axis=2)
    return marg(p[None])[0], marg(dp)


def layer_covariance(circuit, theta, columns):
    """Generator covariance <K_i K_j> - <K_i><K_j> in the state just before the first of the
    parametric operations ``columns`` (Stokes, Izaac, Killoran and Carleo, Quantum 4, 269
    (2020)): the prefix of the circuit is simulated with full matrices."""
    n = circuit.n_qubits
    pops = [op for op in circuit.operations if op.gate.parametric]
    first = pops[columns[0]]
    psi = np.zeros(2 ** n, dtype=complex)
    psi[0] = 1.0
    for op in circuit.operations:
        if op is first:
            break
        psi = gate_and_derivative(op, theta, n)[0] @ psi
    K = [_full_generator(pops[c], n)[1] for c in columns]
    mean = [np.real(psi.conj() @ k @ psi) for k in K]
    return np.array([[np.real(psi.conj() @ a @ b @ psi) - ma * mb for b, mb in zip(K, mean)]
                     for a, ma in zip(K, mean)])


def expm_check():
    """expm of a Pauli rotation, to keep the helper honest about its conventions."""
    return np.allclose(expm(-1j * 0.3 * PX / 2),
                       np.cos(0.15) * I2 - 1j * np.sin(0.15) * PX)
