"""Gates: fixed unitaries and parametric gates ``U(a) = expm(-1j * a * G)``.

A parametric gate knows its generator ``G``; its spectrum gives the frequencies of every
expectation value in its angle, and from those its shift rule. The standard gates carry
closed-form matrices; custom gates are diagonalised once.

Examples
--------
>>> import numpy as np
>>> from qgradlib import gates
>>> bool(np.allclose(gates.RY.generator, np.array([[0, -0.5j], [0.5j, 0]])))
True
>>> gates.CRX.shift_rule.n_terms
4
"""
from __future__ import annotations

import pickle
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np

from .paulis import pauli_matrix, parse_pauli
from ..rules.shift_rules import ShiftRule, frequencies_of, rule_for_frequencies, warn_approximate

__all__ = ["Gate", "STANDARD", "H", "X", "Y", "Z", "S", "T", "SX", "CNOT", "CZ", "SWAP",
           "RX", "RY", "RZ", "PHASE", "CRX", "CRY", "CRZ", "CPHASE", "RXX", "RYY", "RZZ"]

_TOL = 1e-10


def _square(m, name):
    try:
        a = np.asarray(m, dtype=complex)
    except (TypeError, ValueError):
        raise TypeError(f"{name} must be a square numeric matrix; got {type(m).__name__}") from None
    if a.ndim != 2 or a.shape[0] != a.shape[1]:
        raise ValueError(f"{name} must be a square matrix; got shape {a.shape}")
    d = a.shape[0]
    if d < 2 or d & (d - 1):
        raise ValueError(f"{name} must have a power-of-two size (2, 4, 8, ...); got {d}x{d}")
    if not np.all(np.isfinite(a)):
        raise ValueError(f"{name} must have finite entries")
    return a


def _hermitian(m, name):
    a = _square(m, name)
    if not np.allclose(a, a.conj().T, atol=_TOL * max(1.0, np.abs(a).max())):
        raise ValueError(f"{name} must be Hermitian (equal to its conjugate transpose)")
    return (a + a.conj().T) / 2


def _frozen(a):
    a = np.array(a, dtype=complex)
    a.setflags(write=False)
    return a


@dataclass(frozen=True, eq=False)
class Gate:
    """A quantum gate on ``n_qubits`` qubits.

    Build custom gates with `Gate.fixed`, `Gate.from_generator`, `Gate.from_hamiltonian`
    or `Gate.from_function`; the standard gates live in :mod:`qgradlib.circuits.gates`.

    Attributes
    ----------
    name : str
    n_qubits : int
    kind : {"fixed", "generator", "hamiltonian", "function"}
    unitary : ndarray or None
        The matrix of a fixed gate.
    generator : ndarray or None
        ``G`` of a generator gate, ``U(a) = expm(-1j * a * G)``.
    drift, drive : ndarray or None, str or None
        For a Hamiltonian gate, ``U(a) = expm(-1j * (drift + a * P))`` with ``P`` the Pauli
        word ``drive``.
    """

    name: str
    n_qubits: int
    kind: str
    unitary: np.ndarray | None = None
    generator: np.ndarray | None = None
    drift: np.ndarray | None = None
    drive: str | None = None
    function: object = field(default=None, repr=False)
    rule: ShiftRule | None = field(default=None, repr=False)
    # vectorised closed forms: angles (B,) -> (B, d, d), or the diagonal (B, d)
    _dense: object = field(default=None, repr=False)
    _diag: object = field(default=None, repr=False)

    # -- constructors ---------------------------------------------------------------------
    @classmethod
    def fixed(cls, name: str, unitary) -> "Gate":
        """A gate with no parameter, from its unitary matrix (checked to be unitary).

        Examples
        --------
        >>> import numpy as np
        >>> Gate.fixed("flip", np.array([[0, 1], [1, 0]])).n_qubits
        1
        """
        u = _square(unitary, "unitary")
        if not np.allclose(u.conj().T @ u, np.eye(u.shape[0]), atol=1e-9):
            raise ValueError("unitary must be unitary (U^dagger U = I within 1e-9)")
        return cls(_name(name), int(u.shape[0]).bit_length() - 1, "fixed", unitary=_frozen(u))

    @classmethod
    def from_generator(cls, name: str, generator, shift_rule: ShiftRule | None = None) -> "Gate":
        """A parametric gate ``U(a) = expm(-1j * a * generator)``.

        Parameters
        ----------
        name : str
        generator : array_like, Hermitian, shape (2**k, 2**k)
        shift_rule : ShiftRule, optional
            A rule of your own; by default one is derived from the generator's spectrum.

        Examples
        --------
        >>> import numpy as np
        >>> g = Gate.from_generator("hop", np.diag([0.0, 1.0, 2.7, 0.0]))
        >>> g.frequencies.round(3).tolist()
        [1.0, 1.7, 2.7]
        """
        g = _hermitian(generator, "generator")
        if shift_rule is not None and not isinstance(shift_rule, ShiftRule):
            raise TypeError(f"shift_rule must be a ShiftRule; got {type(shift_rule).__name__}")
        diag = None
        if np.allclose(g, np.diag(np.diag(g)), atol=_TOL):
            ev = np.diag(g).real.copy()
            diag = lambda a, ev=ev: np.exp(-1j * np.multiply.outer(a, ev))  # noqa: E731
        return cls(_name(name), int(g.shape[0]).bit_length() - 1, "generator",
                   generator=_frozen(g), rule=shift_rule, _diag=diag)

    @classmethod
    def from_hamiltonian(cls, name: str, drift, drive: str) -> "Gate":
        """A parametric gate ``U(a) = expm(-1j * (drift + a * P))`` for a Pauli word ``P``.

        When ``drift`` does not commute with ``P`` no finite shift rule exists; such gates
        are differentiated by the stochastic rule of Banchi and Crooks, Quantum 5, 386 (2021).

        Examples
        --------
        >>> import numpy as np
        >>> W = np.diag([0.3, -0.3])
        >>> Gate.from_hamiltonian("pulse", drift=W, drive="X").kind
        'hamiltonian'
        """
        w = _hermitian(drift, "drift")
        k = int(w.shape[0]).bit_length() - 1
        if not isinstance(drive, str):
            raise TypeError(f"drive must be a Pauli word given as a string such as 'XZ'; got {type(drive).__name__}")
        word = parse_pauli(drive, k, "drive")
        if set(word) == {"I"}:
            raise ValueError("drive must contain at least one of X, Y, Z")
        return cls(_name(name), k, "hamiltonian", drift=_frozen(w), drive=word)

    @classmethod
    def from_function(cls, name: str, fn, n_qubits: int) -> "Gate":
        """A parametric gate known only through ``fn(a) -> unitary``.

        It has no shift rule: derivatives of its angle are taken by central finite
        differences, and a warning says so.
        """
        if not callable(fn):
            raise TypeError(f"fn must be callable as fn(angle) -> matrix; got {type(fn).__name__}")
        k = _count(n_qubits, "n_qubits")
        u = _square(fn(0.0), "fn(0.0)")
        if u.shape[0] != 2 ** k:
            raise ValueError(f"fn(0.0) must be {2**k}x{2**k} for n_qubits={k}; got {u.shape}")
        return cls(_name(name), k, "function", function=fn)

    # -- comparing ------------------------------------------------------------------------
    def _key(self):
        # what a gate is: its name, kind, size and defining data (exact bytes, not a tolerance);
        # the private closed forms are derived from that data and take no part
        data = tuple(None if a is None else (a.shape, a.tobytes())
                     for a in (self.unitary, self.generator, self.drift))
        # a function gate is its function: the same callable object, nothing weaker
        fn = self.function
        if fn is not None:
            try:
                hash(fn)
            except TypeError:
                fn = id(fn)
        rule = None if self.rule is None else (self.rule.shifts.tobytes(), self.rule.coefficients.tobytes())
        return (self.name, self.kind, self.n_qubits, data, self.drive, fn, rule)

    def __eq__(self, other):
        """Same name, kind, qubit count and exactly the same defining data (and custom rule)."""
        if self is other:
            return True
        if not isinstance(other, Gate):
            return NotImplemented
        return self._key() == other._key()

    def __hash__(self):
        return hash(self._key())

    def __repr__(self):
        # short on purpose: matrices are shown by Gate.matrix(), never in a repr
        return f"Gate({self.name!r}, kind={self.kind!r}, n_qubits={self.n_qubits})"

    # -- pickling -------------------------------------------------------------------------
    def __reduce__(self):
        # the closed forms in _dense/_diag are closures, which pickle cannot carry: a standard
        # gate is looked up by name (so it comes back as the same object) and a custom gate is
        # rebuilt through the constructor that made it
        if STANDARD.get(self.name) is self:
            return _standard_gate, (self.name,)
        if self._dense is not None:
            raise pickle.PicklingError(f"gate {self.name!r} carries a private closed form and was not "
                                       "built by a Gate constructor, so it cannot be rebuilt")
        if self.kind == "fixed":
            return _rebuild, ("fixed", self.name, np.array(self.unitary))
        if self.kind == "generator":
            return _rebuild, ("generator", self.name, np.array(self.generator), self.rule)
        if self.kind == "hamiltonian":
            return _rebuild, ("hamiltonian", self.name, np.array(self.drift), self.drive)
        try:
            pickle.dumps(self.function)
        except Exception as err:
            raise pickle.PicklingError(
                f"gate {self.name!r} was built by Gate.from_function with {self.function!r}, which "
                "the standard pickle module cannot pickle, so the gate cannot be sent to another "
                "process (executor=): define the function with def at module level (not a lambda "
                "or a nested function), or use a callable instance of a module-level class"
            ) from err
        return _rebuild, ("function", self.name, self.function, self.n_qubits)

    # -- properties -----------------------------------------------------------------------
    @property
    def parametric(self) -> bool:
        """True when the gate takes an angle."""
        return self.kind != "fixed"

    @property
    def dim(self) -> int:
        return 2 ** self.n_qubits

    @property
    def diagonal(self) -> bool:
        """True when the matrix is diagonal for every angle (a phase multiply)."""
        if self.kind == "fixed":
            u = self.unitary
            return bool(np.allclose(u, np.diag(np.diag(u)), atol=0))
        return self._diag is not None

    @cached_property
    def _eig(self):
        ev, vec = np.linalg.eigh(self.generator)
        return ev, vec

    @cached_property
    def drive_matrix(self):
        """The dense matrix of a Hamiltonian gate's drive word (None for other kinds)."""
        return None if self.drive is None else pauli_matrix(self.drive)

    @cached_property
    def spectrum(self) -> np.ndarray:
        """Eigenvalues of the generator (or of the drive word for a Hamiltonian gate)."""
        if self.kind == "generator":
            return self._eig[0].copy()
        if self.kind == "hamiltonian":
            return np.array([-1.0, 1.0])
        raise ValueError(f"gate {self.name!r} of kind {self.kind!r} has no generator spectrum")

    @cached_property
    def frequencies(self) -> np.ndarray:
        """Distinct positive differences of the generator's eigenvalues."""
        if self.kind != "generator":
            raise ValueError(f"gate {self.name!r} of kind {self.kind!r} has no finite frequency set")
        return frequencies_of(self.spectrum)

    @cached_property
    def shift_rule(self) -> ShiftRule | None:
        """The exact first-derivative rule (None for gates that have none)."""
        if self.rule is not None:
            return self.rule
        if self.kind != "generator":
            return None
        return rule_for_frequencies(self.frequencies)

    def rule_with_shift(self, shift):
        """The rule with a custom two-term shift, where the gate has a single frequency."""
        rule = self.shift_rule
        if shift is None or rule is None or self.rule is not None:
            return rule
        f = self.frequencies
        return ShiftRule.two_term(f[0], shift) if f.size == 1 else rule

    @cached_property
    def period(self) -> float | None:
        """Period of every expectation value in the angle (None if incommensurate)."""
        if self.kind != "generator":
            return None
        f = self.frequencies
        if f.size == 0:
            return None
        base = f[0]
        ratio = f / base
        for denom in range(1, 13):
            if np.allclose(ratio * denom, np.round(ratio * denom), atol=1e-9):
                return float(2 * np.pi * denom / base)
        return None

    # -- matrices -------------------------------------------------------------------------
    def matrix(self, angle=None) -> np.ndarray:
        """The unitary; for a parametric gate at ``angle`` (float or array of shape (B,)).

        Returns shape (d, d) for a scalar angle and (B, d, d) for an array.

        Examples
        --------
        >>> import numpy as np
        >>> from qgradlib import gates
        >>> bool(np.allclose(gates.RX.matrix(np.pi), [[0, -1j], [-1j, 0]]))
        True
        """
        if self.kind == "fixed":
            if angle is not None:
                raise ValueError(f"gate {self.name!r} is fixed and takes no angle")
            return self.unitary.copy()
        if angle is None:
            raise ValueError(f"gate {self.name!r} is parametric: give an angle")
        a = np.asarray(angle)
        if a.dtype.kind not in "fiu":
            raise TypeError(f"angle must be a real number or an array of real numbers; got {angle!r}")
        a = a.astype(float)
        scalar = a.ndim == 0
        a = a.reshape(-1)
        if not np.all(np.isfinite(a)):
            raise ValueError("angle must be finite")
        out = self._matrices(a)
        return out[0] if scalar else out

    def _matrices(self, a):
        if self._dense is not None:
            return self._dense(a)
        if self._diag is not None:
            d = self._diag(a)
            out = np.zeros(d.shape + (d.shape[-1],), dtype=complex)
            idx = np.arange(d.shape[-1])
            out[:, idx, idx] = d
            return out
        if self.kind == "generator":
            ev, vec = self._eig
            ph = np.exp(-1j * np.multiply.outer(a, ev))
            return np.einsum("ij,bj,kj->bik", vec, ph, vec.conj())
        if self.kind == "hamiltonian":
            return hamiltonian_matrices(self, a)
        if self.kind == "function":
            return np.stack([_square(self.function(float(x)), f"fn({float(x)})") for x in a])
        raise AssertionError(self.kind)

    def diagonal_values(self, a):
        """Diagonal of the matrix for angles ``a`` (B,), shape (B, d); diagonal gates only."""
        if self._diag is not None:
            return self._diag(np.asarray(a, dtype=float).reshape(-1))
        raise ValueError(f"gate {self.name!r} is not diagonal")


def _standard_gate(name):
    return STANDARD[name]


def _rebuild(kind, name, *args):
    build = {"fixed": Gate.fixed, "generator": Gate.from_generator,
             "hamiltonian": Gate.from_hamiltonian, "function": Gate.from_function}[kind]
    return build(name, *args)


def hamiltonian_matrices(gate: Gate, a, inserts=()):
    """``expm(-1j * (W + a P))`` with optional inserted ``expm(-1j * t P)`` at split points.

    ``inserts`` is a sorted tuple of ``(r, t)``: the factor ``expm(-1j * t * P)`` stands
    after a fraction ``r`` of the evolution (Duhamel's formula puts the derivative there).
    """
    P = pauli_matrix(gate.drive)
    out = []
    for x in np.asarray(a, dtype=float).reshape(-1):
        A = gate.drift + x * P
        ev, vec = np.linalg.eigh(A)
        step = lambda frac: (vec * np.exp(-1j * frac * ev)) @ vec.conj().T  # noqa: E731
        u = np.eye(A.shape[0], dtype=complex)
        done = 0.0
        for r, t in inserts:
            u = step(r - done) @ u
            u = (np.cos(t) * np.eye(A.shape[0]) - 1j * np.sin(t) * P) @ u
            done = r
        out.append(step(1.0 - done) @ u)
    return np.stack(out)


def _name(name):
    if not isinstance(name, str) or not name:
        raise TypeError(f"name must be a non-empty string; got {name!r}")
    return name


def _count(n, name):
    if isinstance(n, (bool, np.bool_)) or not isinstance(n, (int, np.integer)) or n < 1:
        raise ValueError(f"{name} must be a positive int; got {n!r}")
    return int(n)


# -- the standard gates -------------------------------------------------------------------
_X = pauli_matrix("X")
_Y = pauli_matrix("Y")
_Z = pauli_matrix("Z")
_P1 = np.diag([0.0, 1.0])


def _standard(name, generator, dense=None, diag=None):
    g = _frozen(generator)
    return Gate(name, int(g.shape[0]).bit_length() - 1, "generator", generator=g,
                _dense=dense, _diag=diag)


def _rot1(P):
    def dense(a):
        c, s = np.cos(a / 2), np.sin(a / 2)
        return c[:, None, None] * np.eye(2) - 1j * s[:, None, None] * P
    return dense


def _rot2(PP):
    def dense(a):
        c, s = np.cos(a / 2), np.sin(a / 2)
        return c[:, None, None] * np.eye(4) - 1j * s[:, None, None] * PP
    return dense


def _controlled(dense1):
    def dense(a):
        out = np.zeros((a.size, 4, 4), dtype=complex)
        out[:, 0, 0] = out[:, 1, 1] = 1.0
        out[:, 2:, 2:] = dense1(a)
        return out
    return dense


def _fixed(name, u):
    return Gate(name, int(np.shape(u)[0]).bit_length() - 1, "fixed", unitary=_frozen(u))


H = _fixed("H", np.array([[1, 1], [1, -1]]) / np.sqrt(2))
X = _fixed("X", _X)
Y = _fixed("Y", _Y)
Z = _fixed("Z", _Z)
S = _fixed("S", np.diag([1, 1j]))
T = _fixed("T", np.diag([1, np.exp(1j * np.pi / 4)]))
SX = _fixed("SX", np.array([[1 + 1j, 1 - 1j], [1 - 1j, 1 + 1j]]) / 2)
CNOT = _fixed("CNOT", np.array([[1, 0, 0, 0], [0, 1, 0, 0], [0, 0, 0, 1], [0, 0, 1, 0]]))
CZ = _fixed("CZ", np.diag([1, 1, 1, -1]))
SWAP = _fixed("SWAP", np.array([[1, 0, 0, 0], [0, 0, 1, 0], [0, 1, 0, 0], [0, 0, 0, 1]]))

RX = _standard("RX", _X / 2, dense=_rot1(_X))
RY = _standard("RY", _Y / 2, dense=_rot1(_Y))
RZ = _standard("RZ", _Z / 2, diag=lambda a: np.exp(np.multiply.outer(a, [-0.5j, 0.5j])))
# PHASE(a) = diag(1, e^{ia}) = expm(-1j * a * diag(0, -1))
PHASE = _standard("PHASE", -_P1, diag=lambda a: np.exp(np.multiply.outer(a, [0, 1j])))
CRX = _standard("CRX", np.kron(_P1, _X / 2), dense=_controlled(_rot1(_X)))
CRY = _standard("CRY", np.kron(_P1, _Y / 2), dense=_controlled(_rot1(_Y)))
CRZ = _standard("CRZ", np.kron(_P1, _Z / 2),
                diag=lambda a: np.exp(np.multiply.outer(a, [0, 0, -0.5j, 0.5j])))
CPHASE = _standard("CPHASE", -np.kron(_P1, _P1),
                   diag=lambda a: np.exp(np.multiply.outer(a, [0, 0, 0, 1j])))
RXX = _standard("RXX", np.kron(_X, _X) / 2, dense=_rot2(np.kron(_X, _X)))
RYY = _standard("RYY", np.kron(_Y, _Y) / 2, dense=_rot2(np.kron(_Y, _Y)))
RZZ = _standard("RZZ", np.kron(_Z, _Z) / 2,
                diag=lambda a: np.exp(np.multiply.outer(a, [-0.5j, 0.5j, 0.5j, -0.5j])))

STANDARD = {g.name: g for g in (H, X, Y, Z, S, T, SX, CNOT, CZ, SWAP, RX, RY, RZ, PHASE,
                                CRX, CRY, CRZ, CPHASE, RXX, RYY, RZZ)}
