"""Initial states: a basis bitstring or a state vector, as fixed gates put before a circuit.

``initial="0110"`` (qubit 0 leftmost) becomes X gates on the qubits marked 1; a normalised
state vector ``v`` becomes one fixed gate on all qubits whose first column is ``v`` (a
Householder reflection times a phase). Either way the preparation is made of fixed gates that
take no angle, so every derivative method (shift rules, adjoint, differences, curvature)
runs unchanged and starts from that state, and the ledger counts the same circuits.

Examples
--------
>>> import numpy as np
>>> import qgradlib as qg
>>> c = qg.Circuit(2).cnot(0, 1)
>>> qg.probabilities(c, np.zeros(0), initial="10").tolist()
[0.0, 0.0, 0.0, 1.0]
"""
from __future__ import annotations

import numpy as np

from . import gates as _g
from .gates import Gate

__all__ = ["check_initial", "prepared", "MAX_VECTOR_QUBITS"]

# a state vector becomes one dense (2**n, 2**n) gate: 12 qubits is 268 MB, and beyond that
# a preparation circuit (or a bitstring) is the way
MAX_VECTOR_QUBITS = 12
_NORM_TOL = 1e-10


def check_initial(initial, n):
    """``(key, kind, value)`` for ``initial``: a bitstring of n characters or a state vector."""
    from autograd.tracer import Box

    if isinstance(initial, str):
        if len(initial) != n or set(initial) - set("01"):
            raise ValueError(f"initial must be a bitstring of {n} characters '0'/'1' (qubit 0 "
                             f"leftmost) or a state vector of shape ({2 ** n},); got {initial!r}")
        return ("bits", initial), "bits", initial
    if isinstance(initial, Box):
        raise TypeError("initial cannot be differentiated: give a fixed NumPy state vector "
                        "(prepare a trainable state with gates instead)")
    try:
        v = np.asarray(initial, dtype=complex)
    except (TypeError, ValueError):
        raise TypeError("initial must be a bitstring such as '01' or a state vector (array of "
                        f"{2 ** n} numbers); got {type(initial).__name__}") from None
    if v.shape != (2 ** n,):
        raise ValueError(f"initial must be a state vector of shape ({2 ** n},) for {n} qubits "
                         f"(or a bitstring); got shape {v.shape}")
    if not np.all(np.isfinite(v)):
        raise ValueError("initial must have finite entries (found NaN or inf)")
    norm = float(np.linalg.norm(v))
    if abs(norm - 1.0) > _NORM_TOL:
        raise ValueError(f"initial must be normalised (norm 1 within {_NORM_TOL:g}); its norm is {norm:.12g}")
    if n > MAX_VECTOR_QUBITS:
        raise ValueError(f"initial as a state vector is limited to {MAX_VECTOR_QUBITS} qubits (it "
                         f"becomes one dense gate); for {n} qubits give a bitstring or prepare the "
                         "state with gates")
    return ("vector", v.tobytes()), "vector", v


def _preparation_gate(v):
    """A unitary whose first column is ``v``: phase * (I - 2 u u^dagger / u^dagger u)."""
    d = v.size
    phase = v[0] / abs(v[0]) if abs(v[0]) > 0 else 1.0
    w = v * np.conj(phase)                  # w[0] is real and >= 0
    u = -w
    u[0] += 1.0
    uu = float(np.real(np.vdot(u, u)))
    m = np.eye(d, dtype=complex)
    if uu > 1e-30:
        m -= 2.0 * np.outer(u, u.conj()) / uu
    return Gate.fixed("initial", phase * m)


def prepared(circuit, initial):
    """``circuit`` with the preparation of ``initial`` in front (the circuit itself if None)."""
    if initial is None:
        return circuit
    n = circuit.n_qubits
    key, kind, value = check_initial(initial, n)
    memo = circuit.__dict__.setdefault("_memo_initial", {})
    hit = memo.get(key)
    if hit is not None and hit[0] == len(circuit):
        return hit[1]
    prep = type(circuit)(n)
    if kind == "bits":
        for q, b in enumerate(value):
            if b == "1":
                prep.add(_g.X, q)
    else:
        prep.add(_preparation_gate(value), tuple(range(n)))
    out = circuit.copy()
    out._ops = list(prep.operations) + out._ops
    if len(memo) >= 8:        # a few states per circuit are reused (kernels, sweeps); not more
        memo.clear()
    memo[key] = (len(circuit), out)
    return out
