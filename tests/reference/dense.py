"""An independent dense statevector simulator, the yardstick for the engine's tests.

It shares no code with ``qgradlib.engine`` or ``qgradlib.circuits.gates``: it keeps its own table of
closed-form gate matrices and generators (written out entry by entry, `# common practice`),
builds every operator as a full 2**n x 2**n matrix with ``numpy.kron`` and a permutation
matrix, and multiplies. Slow and obvious on purpose. From a `qgradlib.Circuit` it reads only
the data of each operation: gate name, qubits, param, scale, offset, angle (and, for custom
gates, the user's own matrix or generator). Standard gates are recognised by name, so custom
gates in tests must not reuse a standard gate's name.

Conventions: big-endian basis index (qubit 0 is the most significant bit and the leftmost
Kronecker factor); ``U(a) = expm(-1j * a * G)``.
"""
from __future__ import annotations

from functools import reduce

import numpy as np
import scipy.linalg

__all__ = ["PAULI", "FIXED", "ROTATIONS", "GENERATORS", "embed", "dense_state",
           "dense_expectation", "dense_marginals", "pauli_dense", "observable_dense", "reference_angles",
           "reference_angle_map", "circuit_ops", "circuit_state", "state_derivatives",
           "angle_gradient", "theta_gradient"]

I2 = np.eye(2, dtype=complex)
PAULI = {
    "I": I2,
    "X": np.array([[0, 1], [1, 0]], dtype=complex),
    "Y": np.array([[0, -1j], [1j, 0]], dtype=complex),
    "Z": np.array([[1, 0], [0, -1]], dtype=complex),
}
_r2 = np.sqrt(2.0)

# Fixed gates, entry by entry (common practice). Two-qubit gates: first qubit = control.
FIXED = {
    "H": np.array([[1, 1], [1, -1]]) / _r2,
    "X": PAULI["X"],
    "Y": PAULI["Y"],
    "Z": PAULI["Z"],
    "S": np.array([[1, 0], [0, 1j]]),
    "T": np.array([[1, 0], [0, (1 + 1j) / _r2]]),
    "SX": np.array([[1 + 1j, 1 - 1j], [1 - 1j, 1 + 1j]]) / 2,
    "CNOT": np.array([[1, 0, 0, 0], [0, 1, 0, 0], [0, 0, 0, 1], [0, 0, 1, 0]]),
    "CZ": np.diag([1, 1, 1, -1]),
    "SWAP": np.array([[1, 0, 0, 0], [0, 0, 1, 0], [0, 1, 0, 0], [0, 0, 0, 1]]),
}
FIXED = {k: np.asarray(v, dtype=complex) for k, v in FIXED.items()}


def _rx(a):
    c, s = np.cos(a / 2), np.sin(a / 2)
    return np.array([[c, -1j * s], [-1j * s, c]])


def _ry(a):
    c, s = np.cos(a / 2), np.sin(a / 2)
    return np.array([[c, -s], [s, c]], dtype=complex)


def _rz(a):
    return np.array([[np.exp(-0.5j * a), 0], [0, np.exp(0.5j * a)]])


def _controlled(u):
    out = np.eye(4, dtype=complex)
    out[2:, 2:] = u
    return out


def _rxx(a):
    c, s = np.cos(a / 2), -1j * np.sin(a / 2)
    return np.array([[c, 0, 0, s], [0, c, s, 0], [0, s, c, 0], [s, 0, 0, c]])


def _ryy(a):
    c, s = np.cos(a / 2), -1j * np.sin(a / 2)
    # Y (x) Y has entries -1 on the anti-diagonal corners and +1 in the middle
    return np.array([[c, 0, 0, -s], [0, c, s, 0], [0, s, c, 0], [-s, 0, 0, c]])


def _rzz(a):
    m, p = np.exp(-0.5j * a), np.exp(0.5j * a)
    return np.diag([m, p, p, m])


# Parametric gates: closed-form matrices of the angle (common practice).
ROTATIONS = {
    "RX": _rx,
    "RY": _ry,
    "RZ": _rz,
    "PHASE": lambda a: np.diag([1, np.exp(1j * a)]),
    "CRX": lambda a: _controlled(_rx(a)),
    "CRY": lambda a: _controlled(_ry(a)),
    "CRZ": lambda a: _controlled(_rz(a)),
    "CPHASE": lambda a: np.diag([1, 1, 1, np.exp(1j * a)]),
    "RXX": _rxx,
    "RYY": _ryy,
    "RZZ": _rzz,
}

_P1 = np.diag([0.0, 1.0]).astype(complex)  # |1><1|, the control projector
# Generators G with ROTATIONS[name](a) == expm(-1j * a * G) (common practice; checked
# against scipy.linalg.expm in tests/test_gates.py).
GENERATORS = {
    "RX": PAULI["X"] / 2,
    "RY": PAULI["Y"] / 2,
    "RZ": PAULI["Z"] / 2,
    "PHASE": -_P1,
    "CRX": np.kron(_P1, PAULI["X"] / 2),
    "CRY": np.kron(_P1, PAULI["Y"] / 2),
    "CRZ": np.kron(_P1, PAULI["Z"] / 2),
    "CPHASE": -np.kron(_P1, _P1),
    "RXX": np.kron(PAULI["X"], PAULI["X"]) / 2,
    "RYY": np.kron(PAULI["Y"], PAULI["Y"]) / 2,
    "RZZ": np.kron(PAULI["Z"], PAULI["Z"]) / 2,
}


# -- building full-size operators -----------------------------------------------------------
def _bit(i, q, n):
    """Bit of qubit q (qubit 0 = most significant) in basis index i."""
    return (i >> (n - 1 - q)) & 1


def _permutation(order, n):
    """Permutation matrix P with P|b_0 ... b_{n-1}> = |b_order[0] ... b_order[n-1]>."""
    dim = 2 ** n
    P = np.zeros((dim, dim))
    for i in range(dim):
        j = 0
        for q in order:
            j = (j << 1) | _bit(i, q, n)
        P[j, i] = 1.0
    return P


def embed(matrix, qubits, n):
    """The 2**n x 2**n operator of ``matrix`` acting on ``qubits`` (in that order).

    Reorders the qubits so the targets come first, takes ``matrix (x) I``, and undoes the
    reordering: ``P.T @ kron(matrix, I) @ P``.
    """
    qubits = list(qubits)
    k = len(qubits)
    m = np.asarray(matrix, dtype=complex)
    assert m.shape == (2 ** k, 2 ** k), (m.shape, qubits)
    rest = [q for q in range(n) if q not in qubits]
    P = _permutation(qubits + rest, n)
    return P.T @ np.kron(m, np.eye(2 ** (n - k))) @ P


def dense_state(ops, n):
    """The state after applying ``ops`` = [(matrix, qubits), ...] to |0...0>."""
    psi = np.zeros(2 ** n, dtype=complex)
    psi[0] = 1.0
    for m, qs in ops:
        psi = embed(m, qs, n) @ psi
    return psi


def dense_expectation(state, matrix):
    """<state| matrix |state> (real part; the matrix is Hermitian)."""
    m = matrix.toarray() if hasattr(matrix, "toarray") else np.asarray(matrix)
    return float(np.real(np.vdot(state, m @ state)))


def dense_marginals(state, n, qubits):
    """Probabilities of the outcomes on ``qubits``; the first listed is the most significant."""
    qubits = list(qubits)
    out = np.zeros(2 ** len(qubits))
    for i, amp in enumerate(state):
        j = 0
        for q in qubits:
            j = (j << 1) | _bit(i, q, n)
        out[j] += abs(amp) ** 2
    return out


def pauli_dense(word):
    """Dense matrix of a Pauli string, qubit 0 the leftmost Kronecker factor."""
    return reduce(np.kron, [PAULI[c] for c in word.upper()])


def observable_dense(terms, n, dense=None):
    """sum_k c_k P_k (+ dense) from a {Pauli string: coefficient} dict."""
    m = np.zeros((2 ** n, 2 ** n), dtype=complex)
    for w, c in terms.items():
        m = m + c * pauli_dense(w)
    return m if dense is None else m + dense


# -- reading a qgradlib Circuit -------------------------------------------------------------
def _parametric(op):
    return op.gate.kind != "fixed"


def reference_angle_map(circuit):
    """(A, b) with phi = A @ theta + b, read from each operation's param/scale/offset/angle."""
    pops = [op for op in circuit.operations if _parametric(op)]
    A = np.zeros((len(pops), circuit.n_params))
    b = np.zeros(len(pops))
    for k, op in enumerate(pops):
        if getattr(op, "input", None) is not None:
            b[k] = op.offset            # the data part is read by reference_data_angles
        elif op.param is None:
            b[k] = op.angle
        else:
            A[k, op.param] = op.scale
            b[k] = op.offset
    return A, b


def reference_data_angles(circuit, theta, x):
    """Gate angles phi (G,) for weights theta (m,) and one data point x, read op by op."""
    theta = np.asarray(theta, dtype=float)
    x = np.asarray(x, dtype=float)
    out = []
    for op in circuit.operations:
        if not _parametric(op):
            continue
        if getattr(op, "input", None) is not None:
            out.append(op.scale * x[op.input] + op.offset)
        elif op.param is None:
            out.append(op.angle)
        else:
            out.append(op.scale * theta[op.param] + op.offset)
    return np.array(out)


def reference_angles(circuit, theta):
    """Gate angles phi (G,) for parameters theta (m,)."""
    A, b = reference_angle_map(circuit)
    return A @ np.asarray(theta, dtype=float) + b


def _gate_matrix(gate, a):
    name = gate.name
    if a is None:
        if name in FIXED:
            return FIXED[name]
        return np.asarray(gate.unitary)          # a custom fixed gate: the user's matrix
    if name in ROTATIONS:
        return ROTATIONS[name](a)
    if gate.kind == "generator":
        return scipy.linalg.expm(-1j * a * np.asarray(gate.generator))
    if gate.kind == "hamiltonian":
        return scipy.linalg.expm(-1j * (np.asarray(gate.drift) + a * pauli_dense(gate.drive)))
    if gate.kind == "function":
        return np.asarray(gate.function(a), dtype=complex)
    raise NotImplementedError(gate.kind)


def _generator(gate):
    if gate.name in GENERATORS:
        return GENERATORS[gate.name]
    if gate.kind == "generator":
        return np.asarray(gate.generator)
    raise NotImplementedError(f"no generator for gate {gate.name!r} of kind {gate.kind!r}")


def circuit_ops(circuit, phi):
    """[(matrix, qubits), ...] of ``circuit`` at gate angles ``phi`` (G,)."""
    phi = list(np.asarray(phi, dtype=float).reshape(-1))
    ops = []
    for op in circuit.operations:
        a = phi.pop(0) if _parametric(op) else None
        ops.append((_gate_matrix(op.gate, a), op.qubits))
    assert not phi, "more angles than parametric operations"
    return ops


def circuit_state(circuit, theta):
    """Final state of ``circuit`` at parameters ``theta`` (m,)."""
    return dense_state(circuit_ops(circuit, reference_angles(circuit, theta)), circuit.n_qubits)


# -- exact derivatives ----------------------------------------------------------------------
def _derivative_matrix(gate, a):
    """dU/da of one gate at angle a."""
    if gate.kind == "hamiltonian":
        # d/da expm(-i(W + aP)) = Frechet derivative of expm at -i(W + aP) in direction -iP
        P = pauli_dense(gate.drive)
        return scipy.linalg.expm_frechet(-1j * (np.asarray(gate.drift) + a * P), -1j * P,
                                          compute_expm=False)
    # U(a) = expm(-1j a G)  =>  dU/da = -1j G U(a)  (G commutes with U)
    return -1j * _generator(gate) @ _gate_matrix(gate, a)


def state_derivatives(circuit, phi):
    """d|psi>/dphi_k for every parametric operation k: shape (G, 2**n).

    The k-th row is the circuit's state with gate k's matrix replaced by its derivative
    (``-1j * G_k @ U_k`` for a generator gate).
    """
    n = circuit.n_qubits
    ops = circuit_ops(circuit, phi)
    phi = np.asarray(phi, dtype=float).reshape(-1)
    where = [i for i, op in enumerate(circuit.operations) if _parametric(op)]
    out = []
    for k, i in enumerate(where):
        op = circuit.operations[i]
        d_ops = list(ops)
        d_ops[i] = (_derivative_matrix(op.gate, phi[k]), op.qubits)
        out.append(dense_state(d_ops, n))
    return np.array(out).reshape(len(where), 2 ** n)


def angle_gradient(circuit, phi, matrix):
    """dE/dphi (G,) of E = <psi|O|psi>: 2 Re <psi|O|d_k psi>."""
    m = matrix.toarray() if hasattr(matrix, "toarray") else np.asarray(matrix)
    psi = dense_state(circuit_ops(circuit, phi), circuit.n_qubits)
    dpsi = state_derivatives(circuit, phi)
    return 2 * np.real(dpsi.conj() @ (m @ psi))


def theta_gradient(circuit, theta, matrix):
    """dE/dtheta (m,) by the chain rule A.T @ dE/dphi through the angle map."""
    A, _ = reference_angle_map(circuit)
    return A.T @ angle_gradient(circuit, reference_angles(circuit, theta), matrix)
