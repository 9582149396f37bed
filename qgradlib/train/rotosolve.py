"""The closed-form coordinate minimum behind rotosolve.

When a parameter drives exactly one gate whose generator has a single frequency ``w`` (two
distinct eigenvalues, ``w`` their difference), the expectation value as a function of that
parameter alone is ``A + B cos(w' t) + C sin(w' t)`` with ``w' = |scale| * w``. Three
evaluations fix ``A, B, C`` and the minimum over the parameter follows in closed form
(Ostaszewski, Grant and Benedetti, Quantum 5, 391 (2021), for ``w' = 1``).

A parameter shared by several gates, or driving a gate with several frequencies (a
controlled rotation has two), gives a trigonometric polynomial with more terms: three
evaluations no longer determine it, so such circuits are refused.

Examples
--------
>>> import numpy as np
>>> f = lambda x: 0.3 + 0.8 * np.cos(x) - 0.6 * np.sin(x)
>>> x0 = 0.2
>>> x, fmin, slope = sinusoid_minimum(f(x0), f(x0 + np.pi / 2), f(x0 - np.pi / 2), x0, 1.0)
>>> round(fmin, 12), round(float(f(x)), 12)
(-0.7, -0.7)
"""
from __future__ import annotations

import numpy as np

__all__ = ["sinusoid_minimum", "frequencies_by_parameter"]


def sinusoid_minimum(e0, e_plus, e_minus, x0, frequency):
    """Minimum of ``A + B cos(w (x - x0)) + C sin(w (x - x0))`` from three values.

    Parameters
    ----------
    e0, e_plus, e_minus : float
        The function at ``x0`` and at ``x0 +- pi / (2 w)``.
    x0 : float
    frequency : float
        ``w > 0``.

    Returns
    -------
    x : float
        The minimiser nearest ``x0`` (within half a period).
    value : float
        The minimum, ``A - sqrt(B**2 + C**2)``.
    slope : float
        The derivative at ``x0``, ``w * C`` (the two-term shift rule).
    """
    a = 0.5 * (e_plus + e_minus)
    b = e0 - a
    c = 0.5 * (e_plus - e_minus)
    # b cos u + c sin u = r cos(u - atan2(c, b)): least at u = atan2(c, b) + pi
    u = np.arctan2(c, b) + np.pi
    u = (u + np.pi) % (2 * np.pi) - np.pi
    return float(x0 + u / frequency), float(a - np.hypot(b, c)), float(frequency * c)


def frequencies_by_parameter(circuit):
    """For each parameter, the frequency of the expectation value in it, or None if unused.

    Raises ValueError naming the first parameter for which the closed form does not hold.
    """
    gates_of = [[] for _ in range(circuit.n_params)]
    for op in circuit.parametric_operations:
        if op.param is not None and op.scale != 0.0:
            gates_of[op.param].append(op)
    out = []
    for p, ops in enumerate(gates_of):
        if not ops:
            out.append(None)
            continue
        if len(ops) > 1:
            names = ", ".join(f"{op.gate.name} on {op.qubits}" for op in ops)
            raise ValueError(
                f"method='rotosolve' needs each parameter to drive a single gate; parameter {p} is "
                f"shared by {len(ops)} gates ({names}), so the cost in it has several frequencies "
                "and three evaluations do not fix it: use method='adam', 'gd', 'natural' or 'newton'")
        op = ops[0]
        if op.gate.kind != "generator":
            raise ValueError(
                f"method='rotosolve' needs gates U(a) = expm(-1j a G); parameter {p} drives "
                f"{op.gate.name!r} of kind {op.gate.kind!r}: use another method")
        freqs = op.gate.frequencies
        if freqs.size == 0:          # a generator proportional to the identity: a global phase
            out.append(None)
            continue
        if freqs.size != 1:
            listed = ", ".join(f"{w:g}" for w in freqs)
            raise ValueError(
                f"method='rotosolve' needs single-frequency gates; parameter {p} drives "
                f"{op.gate.name!r}, whose generator has frequencies ({listed}): use another method")
        out.append(abs(op.scale) * float(freqs[0]))
    return out
