"""The cost along one parameter (or direction, or over two parameters) as an exact polynomial.

Along parameter ``k`` the cost is a trigonometric polynomial whose frequencies follow from the
spectra of the gates that ``k`` drives, times their scales (`qgradlib.rules.fourier`). With R
frequencies, 2R + 1 evaluations fix it exactly (Wierichs, Izaac, Wang and Lin, Quantum 6, 677
(2022)): after them, the cost at any new value, its derivatives and its minimum along ``k``
cost nothing more. Over two parameters the cost is a product-basis polynomial fixed by a
``(2R_i + 1) x (2R_j + 1)`` grid. With shots, every point is a finite-shot estimate (a
simulation, not a device measurement) and the coefficients carry standard errors.

Examples
--------
>>> import numpy as np
>>> import qgradlib as qg
>>> c = qg.Circuit(2).h(0).crx(0, 1).ry(1)
>>> H = qg.Observable({"ZZ": 1.0, "XY": 0.5})
>>> theta = np.array([0.3, -0.4])
>>> r = qg.landscape.reconstruct(c, H, theta, 0)          # CRX: frequencies 1/2 and 1
>>> r.frequencies.tolist(), r.circuits
([0.5, 1.0], 5)
>>> t = theta.copy(); t[0] = 2.1
>>> bool(abs(r(2.1) - qg.expect(c, H, t)) < 1e-10)
True
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from autograd.tracer import getval

from ..circuits.circuit import Circuit, check_theta
from ..circuits.observables import Observable
from ..evaluation.expectation import expect
from ..evaluation.ledger import Ledger
from ..rules import fourier
from ..rules.fourier import TrigPolynomial
from ..shots.estimation import estimate

__all__ = ["Reconstruction", "Reconstruction2D", "reconstruct"]


@dataclass(frozen=True, eq=False)
class Reconstruction:
    """The cost along a line through ``theta``, as a trigonometric polynomial.

    Call it with new values: of ``theta[param]`` when a parameter was given, else of the step
    ``t`` along ``direction`` (``theta + t * direction``). Vectorised: an array in, an array of
    its shape out.

    Attributes
    ----------
    polynomial : TrigPolynomial
        Frequencies, ``a0``, ``a``, ``b`` and, with shots, their standard errors.
    param : int or None
        The parameter varied, or None for a direction.
    theta, direction : ndarray, shape (m,)
    points, values : ndarray, shape (2R+1,)
        Where the cost was evaluated (in the call's variable) and what was found.
    standard_errors : ndarray or None
        Standard errors of ``values`` (with shots).
    circuits, executions, shots : int
        What a device would have run: 2R + 1 circuits, times measurement settings.

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> r = qg.landscape.reconstruct(qg.Circuit(1).ry(0), qg.Observable({"Z": 1.0}), np.array([0.2]), 0)
    >>> bool(np.isclose(r(1.1), np.cos(1.1))), r.circuits       # <Z> = cos(theta) from 2R + 1 points
    (True, 3)
    """

    polynomial: TrigPolynomial
    param: int | None
    theta: np.ndarray
    direction: np.ndarray
    points: np.ndarray
    values: np.ndarray
    standard_errors: np.ndarray | None
    circuits: int
    executions: int
    shots: int

    @property
    def frequencies(self):
        """Positive frequencies of the cost along the line."""
        return self.polynomial.frequencies

    @property
    def a0(self):
        """Constant term."""
        return self.polynomial.a0

    @property
    def a(self):
        """Cosine coefficients, one per frequency."""
        return self.polynomial.a

    @property
    def b(self):
        """Sine coefficients, one per frequency."""
        return self.polynomial.b

    @property
    def a0_error(self):
        """Standard error of the constant term (None without shots)."""
        return self.polynomial.a0_error

    @property
    def a_error(self):
        """Standard errors of the cosine coefficients (None without shots)."""
        return self.polynomial.a_error

    @property
    def b_error(self):
        """Standard errors of the sine coefficients (None without shots)."""
        return self.polynomial.b_error

    def __call__(self, t):
        return self.polynomial(t)

    def derivative(self, t, order=1):
        """The ``order``-th derivative along the line at ``t``."""
        return self.polynomial.derivative(t, order)

    def minimum(self):
        """``(t, value)``: the least value along the line (see `TrigPolynomial.minimum`)."""
        return self.polynomial.minimum(near=float(self.points[0]))

    def __repr__(self):
        what = f"param={self.param}" if self.param is not None else "direction"
        return (f"Reconstruction({what}, frequencies={np.round(self.frequencies, 6).tolist()}, "
                f"circuits={self.circuits}, shots={self.shots})")


@dataclass(frozen=True, eq=False)
class Reconstruction2D:
    """The cost over two parameters ``(theta[i], theta[j])``, the others held at ``theta``.

    ``f(x, y) = D_i(x) @ coefficients @ D_j(y)`` with the design rows ``D(t) = [1, cos(w_l t)...,
    sin(w_l t)...]`` of each parameter's frequencies (`qgradlib.rules.fourier.design`); call it
    with arrays that broadcast together.

    Attributes
    ----------
    params : tuple of int
    theta : ndarray, shape (m,)
    frequencies : tuple of ndarray
        Per parameter.
    coefficients : ndarray, shape (2L_i + 1, 2L_j + 1)
    errors : ndarray or None
        Standard errors of ``coefficients`` (with shots).
    points : tuple of ndarray
        The grid axes evaluated, ``(2R_i + 1,)`` and ``(2R_j + 1,)``.
    values : ndarray, shape (2R_i + 1, 2R_j + 1)
    circuits, executions, shots : int

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> c = qg.Circuit(2).ry(0).ry(1)
    >>> r = qg.landscape.reconstruct(c, qg.Observable({"ZZ": 1.0}), np.array([0.2, 0.3]), (0, 1))
    >>> bool(np.isclose(r(0.5, 0.7), np.cos(0.5) * np.cos(0.7)))
    True
    """

    params: tuple
    theta: np.ndarray
    frequencies: tuple
    coefficients: np.ndarray
    errors: np.ndarray | None
    points: tuple
    values: np.ndarray
    circuits: int
    executions: int
    shots: int

    def __call__(self, x, y):
        x, y = np.broadcast_arrays(np.asarray(x, dtype=float), np.asarray(y, dtype=float))
        Dx = fourier.design(self.frequencies[0], x)
        Dy = fourier.design(self.frequencies[1], y)
        out = np.einsum("...a,ab,...b->...", Dx, self.coefficients, Dy)
        return float(out) if out.ndim == 0 else out

    def __repr__(self):
        return (f"Reconstruction2D(params={self.params}, grid={self.values.shape}, "
                f"circuits={self.circuits}, shots={self.shots})")


def _check_index(k, m, name="k"):
    if isinstance(k, (bool, np.bool_)) or not isinstance(k, (int, np.integer)) or not 0 <= k < m:
        raise ValueError(f"{name} must be a parameter index in 0..{m - 1}; got {k!r}")
    return int(k)


def _evaluate(circuit, obs, X, shots, seed):
    """Values (and standard errors with shots) at the rows of X, with the ledger's counts."""
    with Ledger() as book:
        if shots is None:
            vals = np.asarray(expect(circuit, obs, X), dtype=float).reshape(-1)
            errs = None
        else:
            est = estimate(circuit, obs, X, shots=shots, seed=seed)
            vals = np.asarray(est.value, dtype=float).reshape(-1)
            errs = np.asarray(est.standard_error, dtype=float).reshape(-1)
    return vals, errs, book


def _line_frequencies(circuit, direction, what):
    w = fourier.frequencies_along(circuit, direction)
    if w.size == 0:
        raise ValueError(f"the cost does not depend on {what}: no gate it drives has frequencies")
    return w


def reconstruct(circuit, observable, theta, k, *, shots=None, seed=None):
    """The cost along parameter ``k`` (or a direction, or over two parameters), exactly.

    Parameters
    ----------
    circuit : Circuit
        Every gate that the varied parameters drive must have a generator (a finite spectrum).
    observable : Observable
    theta : array_like, shape (n_params,)
        The point through which the line (or plane) runs.
    k : int, array_like of shape (n_params,), or tuple of two int
        A parameter index; a direction ``v`` in theta, as a list or array (the result is then
        a function of the step ``t`` along ``theta + t v``); or a tuple of two parameter
        indices ``(i, j)`` for a 2-D slice.
    shots : int >= 2, optional
        Estimate each point with ``shots`` per measurement setting (`qgradlib.estimate`);
        the coefficients then carry standard errors. None: exact values.
    seed : int or numpy.random.Generator, optional

    Returns
    -------
    Reconstruction or Reconstruction2D

    Notes
    -----
    A parameter shared by gates with frequency sets ``W_1, W_2, ...`` (times their scales)
    has the frequencies of the sums of their generators' eigenvalues: two ``RX`` on one
    parameter give ``{1, 2}`` (R = 2), three give ``{1, 2, 3}``; a controlled rotation alone
    gives ``{1/2, 1}``. The evaluations are ``2R + 1`` circuits (their product for a 2-D slice).

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> c = qg.Circuit(1).rx(0).rz(0).rx(0, param=0)     # parameter 0 drives two RX
    >>> r = qg.landscape.reconstruct(c, qg.Observable({"Z": 1.0}), np.array([0.1, 0.7]), 0)
    >>> r.frequencies.tolist(), r.circuits
    ([1.0, 2.0], 5)
    """
    if not isinstance(circuit, Circuit):
        raise TypeError(f"circuit must be a qgradlib Circuit; got {type(circuit).__name__}")
    if not isinstance(observable, Observable):
        raise TypeError(f"observable must be one qgradlib Observable; got {type(observable).__name__}")
    if circuit.n_params == 0:
        raise ValueError("the circuit has no trainable parameters: nothing to reconstruct")
    theta = np.asarray(getval(check_theta(circuit, theta)), dtype=float)
    m = circuit.n_params
    if theta.shape != (m,):
        raise ValueError(f"theta must have shape ({m},); got {theta.shape}")
    if isinstance(k, tuple):
        return _reconstruct_2d(circuit, observable, theta, k, shots, seed)
    if isinstance(k, (int, np.integer)) and not isinstance(k, (bool, np.bool_)):
        param = _check_index(k, m)
        direction = np.zeros(m)
        direction[param] = 1.0
        centre, what = theta[param], f"parameter {param}"
    else:
        try:
            direction = np.array(k, dtype=float)
        except (TypeError, ValueError):
            raise TypeError("k must be a parameter index, a direction of shape "
                            f"({m},) or a pair of indices; got {k!r}") from None
        if direction.shape != (m,) or not np.all(np.isfinite(direction)) or not direction.any():
            raise ValueError(f"a direction k must be a finite, non-zero array of shape ({m},); "
                             f"got shape {direction.shape}")
        param, centre, what = None, 0.0, "this direction"
    w = _line_frequencies(circuit, direction, what)
    w, t = fourier.sample_points(w, centre)
    X = theta + (t - centre)[:, None] * direction
    vals, errs, book = _evaluate(circuit, observable, X, shots, seed)
    poly = fourier.fit(w, t, vals, errs)
    return Reconstruction(poly, param, theta.copy(), direction, t, vals, errs, book.circuits,
                          book.executions, book.shots)


def _reconstruct_2d(circuit, observable, theta, k, shots, seed):
    m = theta.size
    if len(k) != 2:
        raise ValueError(f"a 2-D slice needs two parameter indices k=(i, j); got {k!r}")
    i, j = (_check_index(v, m, "k") for v in k)
    if i == j:
        raise ValueError(f"a 2-D slice needs two different parameters; got k={k!r}")
    axes = []
    for p in (i, j):
        e = np.zeros(m)
        e[p] = 1.0
        axes.append(fourier.sample_points(_line_frequencies(circuit, e, f"parameter {p}"), theta[p]))
    (wi, ti), (wj, tj) = axes
    X = np.repeat(theta[None], ti.size * tj.size, axis=0)
    X[:, i] = np.repeat(ti, tj.size)
    X[:, j] = np.tile(tj, ti.size)
    vals, errs, book = _evaluate(circuit, observable, X, shots, seed)
    Y = vals.reshape(ti.size, tj.size)
    Pi = np.linalg.pinv(fourier.design(wi, ti))
    Pj = np.linalg.pinv(fourier.design(wj, tj))
    C = Pi @ Y @ Pj.T
    E = None
    if errs is not None:
        # independent points: var(C_ab) = sum_pq Pi[a,p]^2 Pj[b,q]^2 var(Y_pq)
        E = np.sqrt((Pi ** 2) @ errs.reshape(Y.shape) ** 2 @ (Pj ** 2).T)
    return Reconstruction2D((i, j), theta.copy(), (wi, wj), C, E, (ti, tj), Y, book.circuits,
                            book.executions, book.shots)
