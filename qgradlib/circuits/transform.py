"""New circuits from old: the adjoint (inverse) circuit and composition on a qubit map.

The inverse keeps the parameters: for a generator gate ``U(a)^dagger = U(-a)``, so the angle
map of each operation is negated (scale and offset, or the fixed angle) and ``theta`` (and a
data point ``x`` for ``input=`` gates) means the same thing in both circuits. A fixed gate becomes its conjugate transpose (the same gate
when it is its own inverse); a Hamiltonian gate ``expm(-1j (W + a P))`` becomes
``expm(-1j (-W - a P))``, that is the drift negated and the angle negated; a function gate
becomes the gate ``a -> fn(a)^dagger``. Noise channels have no inverse (they are not
reversible in general) and are refused.

Examples
--------
>>> import numpy as np
>>> import qgradlib as qg
>>> c = qg.Circuit(2).h(0).ry(1, offset=0.5).s(1).cnot(0, 1)
>>> [(op.gate.name, op.scale, op.offset) for op in c.inverse().operations]
[('CNOT', 1.0, 0.0), ('S†', 1.0, 0.0), ('RY', -1.0, -0.5), ('H', 1.0, 0.0)]
>>> c.inverse().inverse() == c
True
"""
from __future__ import annotations

from dataclasses import replace

import numpy as np

from .gates import STANDARD, Gate

__all__ = ["inverse", "compose", "inverse_gate", "overlap_circuit"]

DAGGER = "†"


class _Dagger:
    """``a -> fn(a)^dagger`` for a function gate; a class (not a closure) so it pickles."""

    def __init__(self, fn):
        self.fn = fn

    def __call__(self, a):
        return np.conj(np.asarray(self.fn(a), dtype=complex)).T

    def __eq__(self, other):
        return isinstance(other, _Dagger) and other.fn == self.fn

    def __hash__(self):
        return hash((_Dagger, self.fn))



def qubit_sequence(qubits, n: int) -> tuple:
    """``qubits`` as a tuple of ints in ``0..n-1``, or a TypeError/ValueError naming ``qubits``.

    Examples
    --------
    >>> qubit_sequence([1, 0], 2)
    (1, 0)
    """
    try:
        qs = tuple(qubits)
    except TypeError:
        raise TypeError(f"qubits must be a sequence of ints; got {qubits!r}") from None
    for q in qs:
        if isinstance(q, (bool, np.bool_)) or not isinstance(q, (int, np.integer)):
            raise TypeError(f"qubits must be ints; got {q!r}")
        if not 0 <= q < n:
            raise ValueError(f"qubits: qubit {q} is out of range for a circuit of {n} qubits (0..{n - 1})")
    return tuple(int(q) for q in qs)


def _dagger_name(name):
    return name[:-1] if name.endswith(DAGGER) else name + DAGGER


def inverse_gate(gate: Gate):
    """``(gate', negate)``: the gate of the inverse operation, and whether its angle map is negated."""
    if gate.kind == "channel":
        raise ValueError(f"noise channel {gate.name!r} has no inverse: a circuit with noise "
                         "channels cannot be inverted (remove the channels first)")
    name = _dagger_name(gate.name)
    if gate.kind == "generator":
        return gate, True
    if gate.kind == "fixed":
        u = gate.unitary
        ud = np.conj(u).T
        if np.array_equal(u, ud):
            return gate, False
        std = STANDARD.get(name)
        if std is not None and std.kind == "fixed" and np.array_equal(std.unitary, ud):
            return std, False
        return Gate.fixed(name, ud), False
    if gate.kind == "hamiltonian":
        return Gate.from_hamiltonian(name, -np.asarray(gate.drift), gate.drive), True
    if gate.kind == "function":
        fn = gate.function
        fn = fn.fn if isinstance(fn, _Dagger) else _Dagger(fn)
        return Gate.from_function(name, fn, gate.n_qubits), False
    raise ValueError(f"gate {gate.name!r} of kind {gate.kind!r} has no known inverse")


def _negate(v):
    return 0.0 - v      # 0.0 - 0.0 is +0.0, so a zero offset stays a plain zero


def inverse(circuit):
    """The adjoint circuit: operations reversed, each gate inverted, parameters kept."""
    out = type(circuit)(circuit.n_qubits)
    for op in reversed(circuit.operations):
        gate, negate = inverse_gate(op.gate)
        if not gate.parametric:
            new = replace(op, gate=gate)
        elif op.param is None and op.angle is not None:
            new = replace(op, gate=gate, angle=_negate(op.angle) if negate else op.angle)
        elif negate:        # a trainable or a data-input angle: its map scale * v + offset
            new = replace(op, gate=gate, scale=_negate(op.scale), offset=_negate(op.offset))
        else:
            new = replace(op, gate=gate)
        out._ops.append(new)
    out._n_params = circuit.n_params
    out._n_inputs = circuit.n_inputs
    return out


def compose(circuit, other, qubits=None):
    """``circuit`` followed by ``other`` with other's qubit i on ``qubits[i]``;
    other's parameters are renumbered to follow ``circuit``'s, its data inputs are shared."""
    if not isinstance(other, type(circuit)):
        raise TypeError(f"other must be a qgradlib Circuit; got {type(other).__name__}")
    n = circuit.n_qubits
    if qubits is None:
        if other.n_qubits > n:
            raise ValueError(f"other has {other.n_qubits} qubits, more than this circuit's {n}: "
                             "give qubits=[...] or compose the other way round")
        qubits = tuple(range(other.n_qubits))
    qs = qubit_sequence(qubits, n)
    if len(qs) != other.n_qubits:
        raise ValueError(f"qubits must give one qubit of this circuit for each of other's "
                         f"{other.n_qubits} qubits; got {len(qs)}")
    if len(set(qs)) != len(qs):
        raise ValueError(f"qubits must be distinct; got {qs}")
    out = circuit.copy()
    shift = circuit.n_params
    for op in other.operations:
        mapped = tuple(int(qs[q]) for q in op.qubits)
        param = None if op.param is None else op.param + shift
        out._ops.append(replace(op, qubits=mapped, param=param))
    out._n_params = circuit.n_params + other.n_params
    # data inputs are shared, not renumbered: both circuits read the same data point
    out._n_inputs = max(circuit.n_inputs, other.n_inputs)
    out._cache = None
    return out


def overlap_circuit(circuit):
    """The compute-uncompute circuit ``U(y)^dagger U(x)`` of a feature circuit ``U``.

    It reads ``2 k`` inputs for a circuit of ``k``: the point ``x`` as inputs ``0 .. k-1``
    and ``y`` as ``k .. 2k-1``; trainable parameters are shared by both halves (one feature
    map). Started from ``|0...0>`` it ends in the all-zero outcome with probability
    ``|<phi(y)|phi(x)>|**2``, the fidelity kernel: what a device runs to estimate it.

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> from qgradlib.circuits.transform import overlap_circuit
    >>> k = overlap_circuit(qg.Circuit(1).ry(0, input=0))
    >>> k.n_inputs, [op.input for op in k.operations]
    (2, [0, 1])
    >>> p = qg.probabilities(k, np.zeros(0), inputs=np.array([0.0, np.pi / 2]))
    >>> round(float(p[0]), 12)                          # cos(pi / 4)**2
    0.5
    """
    k = circuit.n_inputs
    back = inverse(circuit)
    out = circuit.copy()
    for op in back.operations:
        out._ops.append(op if op.input is None else replace(op, input=op.input + k))
    out._n_params = circuit.n_params
    out._n_inputs = 2 * k
    out._cache = None
    return out

