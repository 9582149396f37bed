"""Exact derivatives of small circuits from dense matrices, independent of qgradlib.

Everything here is built from first principles with numpy and scipy: Pauli matrices typed
in, gates as ``scipy.linalg.expm(-1j * a * G)`` of generators written out below, operators
embedded on their qubits by Kronecker products (qubit 0 = leftmost factor), and derivatives
of each gate by ``scipy.linalg.expm_frechet`` (the Frechet derivative of the matrix
exponential), or by the closed form ``dU/da = -1j G U`` for comparison. Nothing is imported
from the package under test, so agreement is evidence, not a tautology.

An operation is a tuple ``(kind, qubits, angle_spec)`` where ``kind`` is a gate name from
`GENERATORS`/`FIXED`, or ``("gen", G)`` for a custom generator, or ``("ham", W, P)`` for
``expm(-1j (W + a P))`` with dense ``W`` and ``P``; ``angle_spec`` is ``None`` (fixed gate),
a float (fixed angle) or ``(param, scale, offset)``.
"""
from __future__ import annotations

from functools import reduce

import numpy as np
from scipy.linalg import expm, expm_frechet

I2 = np.eye(2, dtype=complex)
PX = np.array([[0, 1], [1, 0]], dtype=complex)
PY = np.array([[0, -1j], [1j, 0]], dtype=complex)
PZ = np.array([[1, 0], [0, -1]], dtype=complex)
N1 = np.array([[0, 0], [0, 1]], dtype=complex)      # |1><1|
LETTERS = {"I": I2, "X": PX, "Y": PY, "Z": PZ}


def kron(*ms):
    return reduce(np.kron, ms)


def pauli(word):
    """Dense Pauli word, first letter = qubit 0 = leftmost Kronecker factor."""
    return kron(*(LETTERS[c] for c in word))


# U(a) = expm(-1j a G) for these generators (the library's stated convention).
GENERATORS = {
    "RX": PX / 2, "RY": PY / 2, "RZ": PZ / 2,
    "PHASE": -N1,                                   # diag(1, e^{ia})
    "CRX": kron(N1, PX / 2), "CRY": kron(N1, PY / 2), "CRZ": kron(N1, PZ / 2),
    "CPHASE": -kron(N1, N1),
    "RXX": kron(PX, PX) / 2, "RYY": kron(PY, PY) / 2, "RZZ": kron(PZ, PZ) / 2,
}

_SX = np.array([[1 + 1j, 1 - 1j], [1 - 1j, 1 + 1j]]) / 2
FIXED = {
    "H": np.array([[1, 1], [1, -1]], dtype=complex) / np.sqrt(2),
    "X": PX, "Y": PY, "Z": PZ,
    "S": np.diag([1, 1j]), "T": np.diag([1, np.exp(1j * np.pi / 4)]), "SX": _SX,
    "CNOT": np.array([[1, 0, 0, 0], [0, 1, 0, 0], [0, 0, 0, 1], [0, 0, 1, 0]], dtype=complex),
    "CZ": np.diag([1, 1, 1, -1]).astype(complex),
    "SWAP": np.array([[1, 0, 0, 0], [0, 0, 1, 0], [0, 1, 0, 0], [0, 0, 0, 1]], dtype=complex),
}


def embed(m, qubits, n):
    """The 2**n operator that applies the 2**k matrix ``m`` to ``qubits`` (in that order)."""
    k = len(qubits)
    rest = [q for q in range(n) if q not in qubits]
    full = kron(m, np.eye(2 ** (n - k)))             # acts on (qubits..., rest...)
    order = list(qubits) + rest                       # tensor slot -> qubit
    perm = np.argsort(order)                          # qubit -> tensor slot
    t = full.reshape((2,) * (2 * n))
    t = np.transpose(t, list(perm) + [n + p for p in perm])
    return t.reshape(2 ** n, 2 ** n)


def _angle(spec, theta):
    if spec is None:
        return None
    if isinstance(spec, tuple):
        param, scale, offset = spec
        return scale * theta[param] + offset
    return float(spec)


def _exponent(kind):
    """(X0, X1): the gate is expm(X0 + a X1)."""
    if isinstance(kind, tuple) and kind[0] == "gen":
        return np.zeros_like(kind[1], dtype=complex), -1j * np.asarray(kind[1], dtype=complex)
    if isinstance(kind, tuple) and kind[0] == "ham":
        return -1j * np.asarray(kind[1], dtype=complex), -1j * np.asarray(kind[2], dtype=complex)
    g = GENERATORS[kind]
    return np.zeros_like(g), -1j * g


def gate_matrix(kind, a):
    if a is None:
        return FIXED[kind]
    x0, x1 = _exponent(kind)
    return expm(x0 + a * x1)


def gate_derivative(kind, a, method="frechet"):
    """dU/da: by expm_frechet, or ('closed') by -1j G U for generator gates."""
    x0, x1 = _exponent(kind)
    if method == "closed":
        return x1 @ expm(x0 + a * x1)
    return expm_frechet(x0 + a * x1, x1, compute_expm=False)


def gate_second_derivative(kind, a):
    """d^2U/da^2 from the block-triangular exponential expm([[X, E, 0], [0, X, E], [0, 0, X]]),
    whose top-right block is half the second derivative of expm(X + tE) (Van Loan, IEEE Trans.
    Automat. Control 23, 395 (1978))."""
    x0, x1 = _exponent(kind)
    X = x0 + a * x1
    d = X.shape[0]
    Z = np.zeros_like(X)
    big = np.block([[X, x1, Z], [Z, X, x1], [Z, Z, X]])
    return 2 * expm(big)[:d, 2 * d:]


def n_params(ops):
    return 1 + max((s[0] for _, _, s in ops if isinstance(s, tuple)), default=-1)


def _mats(ops, theta, n):
    out = []
    for kind, qubits, spec in ops:
        out.append(embed(gate_matrix(kind, _angle(spec, theta)), qubits, n))
    return out


def state(ops, theta, n):
    psi = np.zeros(2 ** n, dtype=complex)
    psi[0] = 1
    for m in _mats(ops, theta, n):
        psi = m @ psi
    return psi


def state_jacobian(ops, theta, n, method="frechet"):
    """d psi / d theta, shape (n_params, 2**n), by the product rule over the gates."""
    theta = np.asarray(theta, dtype=float)
    mats = _mats(ops, theta, n)
    out = np.zeros((theta.size, 2 ** n), dtype=complex)
    for k, (kind, qubits, spec) in enumerate(ops):
        if not isinstance(spec, tuple):
            continue
        param, scale, _ = spec
        a = _angle(spec, theta)
        dk = embed(gate_derivative(kind, a, method), qubits, n)
        psi = np.zeros(2 ** n, dtype=complex)
        psi[0] = 1
        for j, m in enumerate(mats):
            psi = (dk if j == k else m) @ psi
        out[param] += scale * psi        # chain rule for shared and scaled parameters
    return out


def state_hessian(ops, theta, n):
    """d^2 psi / d theta_i d theta_j, shape (m, m, 2**n)."""
    theta = np.asarray(theta, dtype=float)
    mats = _mats(ops, theta, n)
    m = theta.size
    out = np.zeros((m, m, 2 ** n), dtype=complex)
    trainable = [k for k, (_, _, s) in enumerate(ops) if isinstance(s, tuple)]
    d1 = {k: embed(gate_derivative(ops[k][0], _angle(ops[k][2], theta)), ops[k][1], n)
          for k in trainable}
    d2 = {k: embed(gate_second_derivative(ops[k][0], _angle(ops[k][2], theta)), ops[k][1], n)
          for k in trainable}
    for k in trainable:
        for l in trainable:
            psi = np.zeros(2 ** n, dtype=complex)
            psi[0] = 1
            for j, mj in enumerate(mats):
                if j == k == l:
                    mj = d2[k]
                elif j == k or j == l:
                    mj = d1[j]
                psi = mj @ psi
            pk, sk = ops[k][2][:2]
            pl, sl = ops[l][2][:2]
            out[pk, pl] += sk * sl * psi
    return out


def expectation(ops, theta, n, obs):
    psi = state(ops, theta, n)
    return float(np.real(psi.conj() @ obs @ psi))


def gradient(ops, theta, n, obs, method="frechet"):
    """dE/dtheta = 2 Re <psi|O|d psi>."""
    psi = state(ops, theta, n)
    dpsi = state_jacobian(ops, theta, n, method)
    return 2 * np.real(dpsi.conj() @ (obs @ psi))


def hessian(ops, theta, n, obs):
    """d^2E = 2 Re(<d_i psi|O|d_j psi> + <psi|O|d_i d_j psi>)."""
    psi = state(ops, theta, n)
    dpsi = state_jacobian(ops, theta, n)
    d2 = state_hessian(ops, theta, n)
    return 2 * np.real(dpsi.conj() @ obs @ dpsi.T + np.einsum("ijk,k->ij", d2, (obs @ psi).conj()))


def marginal(p, n, qubits):
    t = p.reshape((2,) * n + p.shape[1:])
    other = tuple(q for q in range(n) if q not in qubits)
    t = t.sum(axis=other)
    kept = sorted(qubits)
    t = np.transpose(t, [kept.index(q) for q in qubits] + list(range(len(qubits), t.ndim)))
    return t.reshape((2 ** len(qubits),) + p.shape[1:])


def probabilities(ops, theta, n, qubits=None):
    qubits = list(range(n)) if qubits is None else list(qubits)
    return marginal(np.abs(state(ops, theta, n)) ** 2, n, qubits)


def probabilities_jacobian(ops, theta, n, qubits=None):
    """d p / d theta, shape (2**k, n_params)."""
    qubits = list(range(n)) if qubits is None else list(qubits)
    psi = state(ops, theta, n)
    dpsi = state_jacobian(ops, theta, n)
    dp = 2 * np.real(psi.conj()[:, None] * dpsi.T)       # (2**n, m)
    return marginal(dp, n, qubits)
