"""Values derived from `expect` and `sample`: the variance of an observable and bitstring counts.

Examples
--------
>>> import numpy as np
>>> import qgradlib as qg
>>> c = qg.Circuit(1).ry(0)
>>> X = qg.Observable({"X": 1.0})
>>> bool(np.isclose(qg.variance(c, X, np.array([0.3])), 1 - np.sin(0.3) ** 2))
True
>>> qg.counts(qg.Circuit(2).x(1), np.zeros(0), shots=5, seed=0)
{'01': 5}
"""
from __future__ import annotations

import numpy as np

from ..circuits.observables import Observable
from .expectation import expect, sample

__all__ = ["variance", "counts"]


def variance(circuit, observable, theta, **options):
    """``<H^2> - <H>^2`` of ``observable`` H after ``circuit``, differentiable like `expect`.

    ``H^2`` is formed by Pauli algebra (``H @ H``) and measured in the same call as ``H``.
    ``options`` are those of `expect` (``gradient=``, ``initial=``, ...). Returns a float, or
    shape (B,) for theta of shape (B, n_params).

    With ``shots`` both moments are sampled means, and ``<H>^2`` of a sampled mean is biased
    upwards by the mean's own variance (``Var(H) / shots`` per setting): the result estimates
    the variance of the state, low by that amount.

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> from autograd import grad
    >>> c = qg.Circuit(1).ry(0)
    >>> Z = qg.Observable({"Z": 1.0})            # Var Z = 1 - cos(a)**2 = sin(a)**2
    >>> bool(np.isclose(grad(lambda t: qg.variance(c, Z, t))(np.array([0.4]))[0], np.sin(0.8)))
    True
    """
    if not isinstance(observable, Observable):
        raise TypeError(f"observable must be one Observable; got {type(observable).__name__}")
    vals = expect(circuit, [observable @ observable, observable], theta, **options)
    return vals[..., 0] - vals[..., 1] ** 2


def counts(circuit, theta, shots, seed=None, *, inputs=None, readout=None, initial=None,
           precision="double"):
    """Bitstring counts of ``shots`` readouts of all qubits: ``{"0110": 12, ...}``.

    Qubit 0 is the leftmost character. The draws are those of `sample` with the same
    arguments (the same seed gives the same shots); bitstrings are listed in increasing
    order and only those seen appear. For theta of shape (B, n_params) (or a data set
    ``inputs`` of N points), a list of dicts, one per row.
    Simulated shots, not a device's: the counts follow the exact distribution.
    ``precision`` is that of `sample` ("double" or "single").

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> c = qg.Circuit(2).h(0).cnot(0, 1)
    >>> sorted(qg.counts(c, np.zeros(0), shots=100, seed=3))
    ['00', '11']
    """
    idx = sample(circuit, theta, shots, seed, inputs=inputs, readout=readout, initial=initial,
                 precision=precision)
    n = circuit.n_qubits

    def table(row):
        values, number = np.unique(row, return_counts=True)
        return {format(int(v), f"0{n}b"): int(k) for v, k in zip(values, number)}

    if np.ndim(idx) == 2:
        return [table(row) for row in idx]
    return table(idx)
