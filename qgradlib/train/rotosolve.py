"""The coordinate minimum behind rotosolve, closed-form or from a reconstruction.

When a parameter drives exactly one gate whose generator has a single frequency ``w`` (two
distinct eigenvalues, ``w`` their difference), the expectation value as a function of that
parameter alone is ``A + B cos(w' t) + C sin(w' t)`` with ``w' = |scale| * w``. Three
evaluations fix ``A, B, C`` and the minimum over the parameter follows in closed form
(Ostaszewski, Grant and Benedetti, Quantum 5, 391 (2021), for ``w' = 1``).

A parameter shared by several gates, or driving a gate with several frequencies (a
controlled rotation has two), gives a trigonometric polynomial with R frequencies: 2R + 1
evaluations fix it (`qgradlib.rules.fourier`; Wierichs, Izaac, Wang and Lin, Quantum 6, 677
(2022)), and its minimum is found by dense sampling polished by Newton's method
(`coordinate_minimum`), still exact to rounding.

Examples
--------
>>> import numpy as np
>>> f = lambda x: 0.3 + 0.8 * np.cos(x) - 0.6 * np.sin(x)
>>> x0 = 0.2
>>> x, fmin, slope = sinusoid_minimum(f(x0), f(x0 + np.pi / 2), f(x0 - np.pi / 2), x0, 1.0)
>>> round(fmin, 12), round(float(f(x)), 12)
(-0.7, -0.7)
>>> g = lambda x: np.cos(x) + 0.5 * np.cos(2 * x)          # two frequencies: five values
>>> x, gmin, slope = coordinate_minimum(g, 0.4, np.array([1.0, 2.0]))
>>> round(gmin, 12), round(float(g(x)), 12)
(-0.75, -0.75)
"""
from __future__ import annotations

import numpy as np

from ..engine.small import memoised
from ..rules import fourier

__all__ = ["sinusoid_minimum", "coordinate_minimum", "frequencies_by_parameter"]


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


def coordinate_minimum(values, x0, frequencies, value0=None):
    """Minimum along one coordinate of a cost with several frequencies.

    Parameters
    ----------
    values : callable
        ``values(t)`` for an array ``t`` of new coordinate values, returning an array.
    x0 : float
        The current coordinate.
    frequencies : ndarray
        The cost's frequencies in this coordinate (`frequencies_by_parameter`).
    value0 : float, optional
        The cost at ``x0`` if already known (exact runs): one evaluation fewer.

    Returns
    -------
    x, value, slope : float
        The minimiser (within one period, or within ``pi / w_min`` of ``x0`` for frequencies
        that are no multiples of one base), the minimum, and the derivative at ``x0``.
    """
    w, t = fourier.sample_points(frequencies, x0)
    if value0 is None:
        vals = np.asarray(values(t), dtype=float)
    else:
        vals = np.concatenate([[float(value0)], np.asarray(values(t[1:]), dtype=float)])
    poly = fourier.fit(w, t, vals)
    x, v = poly.minimum(near=x0)
    return float(x), float(v), float(poly.derivative(x0))


def frequencies_by_parameter(circuit):
    """For each parameter, the frequencies of the expectation value in it, or None if unused.

    Raises ValueError naming the first parameter that drives a gate without a finite spectrum.
    Memoised on the circuit until it grows (a sweep after a sweep asks again); the arrays
    are read-only.
    """
    return list(memoised(circuit, "_memo_frequencies", _frequencies))


def _frequencies(circuit):
    out = []
    for p in range(circuit.n_params):
        e = np.zeros(circuit.n_params)
        e[p] = 1.0
        try:
            w = fourier.frequencies_along(circuit, e)
        except ValueError as err:
            raise ValueError(f"method='rotosolve' needs gates U(a) = expm(-1j a G): {err}; "
                             "use another method") from None
        if w.size:
            w.flags.writeable = False
        out.append(w if w.size else None)
    return tuple(out)
