"""Curvature: Hessians, derivative tensors of any order, the metric tensor, Fisher information.

Derivatives are taken in gate-angle space ``phi`` and mapped to parameters ``theta`` by the
chain rule: the angle map is linear, ``phi = A theta + b``, so a k-th order tensor is the
``phi`` tensor contracted with ``A`` on every index (``H = A.T H_phi A``).

In ``phi`` space every trainable column has one 1-D stencil for all orders
(`qgradlib.rules.stencils`): the point 0 and the shifts of its first-order rule. A mixed
derivative ``d_i^a d_j^b ...`` is the tensor product of the order-a, order-b, ... rules of
the columns involved. All products are merged into one set of distinct points (displaced
coordinates are reduced modulo each gate's period before they are compared), and the points
are evaluated in one batch through `qgradlib.evaluation.expectation.evaluate`, which records the ledger.
That is how a Hessian reuses the value and the gradient's points: for m two-term parameters,
each in one gate, value + gradient + Hessian take 2 m**2 + 1 distinct circuits (Mari,
Bromley and Killoran, Phys. Rev. A 103, 012405 (2021)).

Hamiltonian gates take repeated stochastic (Duhamel) rules, gates known only by a matrix
function take finite-difference stencils (with a warning). Values here are simulated: the
execution counts say what a device would run, the numbers are not device measurements.

The plans live in `qgradlib.rules.higher_plans`; the metric tensor and its layers in
`qgradlib.curvature.metric`, Fisher information in `qgradlib.curvature.fisher`.

Examples
--------
>>> import numpy as np
>>> import qgradlib as qg
>>> from qgradlib import curvature
>>> c = qg.Circuit(2).ry(0).ry(1)          # <ZZ> = cos(a) cos(b)
>>> a, b = 0.3, 0.5
>>> r = curvature.hessian(c, qg.Observable({"ZZ": 1.0}), np.array([a, b]))
>>> r.executions          # 2 * 2**2 + 1
9
>>> exact = [[-np.cos(a) * np.cos(b), np.sin(a) * np.sin(b)],
...          [np.sin(a) * np.sin(b), -np.cos(a) * np.cos(b)]]
>>> bool(np.allclose(r.hessian, exact))
True
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..evaluation.brief import brief
from ..evaluation.expectation import _check_qubits, _observables, _spec
from ..rules.higher_plans import build_plan, tensor
from .execute import prepare, run_plan

__all__ = ["HessianResult", "DerivativeTensors", "hessian", "derivatives"]

# -- results ------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class HessianResult:
    """Value, gradient and Hessian from one merged batch of shifted circuits.

    Attributes
    ----------
    value : float or ndarray (K,)
    gradient : ndarray (m,) or (K, m)
    hessian : ndarray (m, m) or (K, m, m)
    executions : int
        Distinct circuits times measurement settings, as counted by a `qgradlib.Ledger`.
    shots : int
        Total shots (0 for exact simulation).
    """

    value: object
    gradient: np.ndarray
    hessian: np.ndarray
    executions: int
    shots: int

    def __repr__(self):
        H = np.asarray(self.hessian)
        sym = 0.5 * (H + np.swapaxes(H, -1, -2))
        ev = np.linalg.eigvalsh(sym) if H.size else np.zeros(0)
        spectrum = f"eigenvalues in [{ev.min():.4g}, {ev.max():.4g}]" if ev.size else "empty"
        return (f"HessianResult(value={brief(self.value)}, gradient={brief(self.gradient)}, "
                f"hessian: shape {H.shape}, {spectrum}, executions={self.executions}, "
                f"shots={self.shots})")


@dataclass(frozen=True, eq=False)
class DerivativeTensors:
    """All derivative tensors up to ``order``: ``tensors[k]`` has shape (m,)*k (after a
    leading (K,) axis for a list of observables); ``tensors[0]`` is the value."""

    tensors: tuple
    order: int
    executions: int
    shots: int

    def __repr__(self):
        shapes = ", ".join(str(np.shape(t)) for t in self.tensors[1:])
        return (f"DerivativeTensors(order={self.order}, value={brief(self.value)}, "
                f"tensors of shapes {shapes}, executions={self.executions}, shots={self.shots})")

    @property
    def value(self):
        return self.tensors[0]

    @property
    def tensor(self):
        """The tensor of the highest order."""
        return self.tensors[self.order]

def _check_order(order):
    if isinstance(order, bool) or not isinstance(order, (int, np.integer)) or order < 1:
        raise ValueError(f"order must be a positive int; got {order!r}")
    return int(order)


def _tensors(circuit, observables, theta, orders, *, shots, seed, shift, step, splits, memory,
             executor, chunk):
    theta, phi, A = prepare(circuit, theta)
    obs, single = _observables(observables, circuit.n_qubits)
    spec = _spec(circuit, "expect", observables=obs, shots=shots, seed=seed, shift=shift,
                 step=step, splits=splits, memory_budget=memory, executor=executor,
                 chunk=chunk)
    plan = build_plan(circuit, phi, spec.columns, orders, shift=spec.shift, step=spec.step,
                       shots=spec.shots, splits=spec.splits, rng=spec.rng)
    vals, book = run_plan(plan, spec, phi)
    out = {k: tensor(plan, vals, spec.columns, A, k) for k in orders}
    if single:
        out = {k: v[0] for k, v in out.items()}
    return out, book


def hessian(circuit, observable, theta, *, shots=None, seed=None, memory=None, shift=None,
            step=None, splits=1, executor=None, chunk=None) -> HessianResult:
    """Value, gradient and Hessian of an expectation value from one merged shift plan.

    Parameters
    ----------
    circuit : Circuit
    observable : Observable or list of Observable
    theta : array_like, shape (n_params,)
    shots : int, optional
        Finite-shot estimate: every distinct circuit is sampled ``shots`` times per setting.
        Each entry of the result is then an unbiased estimate.
    seed : int or numpy.random.Generator, optional
    memory : int, optional
        Bytes the engine may use for one chunk of the batch.
    shift : float in (0, pi), optional
        Two-term shift of single-frequency gates (default pi/2).
    step : float, optional
        Step of the finite-difference stencils of gates known only by a matrix function.
    splits : int
        With shots, split points sampled per application of the stochastic rule.
    executor : concurrent.futures.Executor or dask.distributed.Client, optional
        Where the plan's distinct circuits run, in chunks (see `qgradlib.evaluation.distribute`); the
        result and the ledger equal the serial ones.
    chunk : int, optional
        Circuits per task on ``executor`` (default: about 4 tasks per worker).

    Returns
    -------
    HessianResult

    Notes
    -----
    In gate-angle space the plan needs ``1 + sum_i s_i + sum_{i<j} s_i s_j`` distinct
    circuits for trainable columns with ``s_i`` shifts each (``s = 2`` for one frequency,
    ``2R`` for R equidistant frequencies): ``2 m**2 + 1`` for m two-term columns (Mari,
    Bromley and Killoran, Phys. Rev. A 103, 012405 (2021)). A parameter shared by several
    gates counts once per gate. Hamiltonian gates need many more (quadrature nodes, or
    sampled split points with shots).

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> c = qg.Circuit(1).rx(0).ry(0)
    >>> r = hessian(c, qg.Observable({"Z": 1.0}), np.array([0.2, 0.4]))
    >>> r.executions, r.hessian.shape
    (9, (2, 2))
    """
    out, book = _tensors(circuit, observable, theta, (0, 1, 2), shots=shots, seed=seed,
                         shift=shift, step=step, splits=splits, memory=memory,
                         executor=executor, chunk=chunk)
    return HessianResult(_scalar(out[0]), out[1], out[2], book.executions, book.shots)


def derivatives(circuit, observable, theta, order=2, *, shots=None, seed=None, memory=None,
                shift=None, step=None, splits=1, executor=None, chunk=None) -> DerivativeTensors:
    """Every derivative tensor of an expectation value up to ``order``, from one plan.

    Parameters
    ----------
    circuit, observable, theta, shots, seed, memory, shift, step, splits, executor, chunk
        As in `hessian`.
    order : int
        Highest order (1, 2, 3, 4, ...). The tensors of lower orders come with it: their
        points are a subset of the highest order's for generator and function gates.

    Returns
    -------
    DerivativeTensors
        ``tensors[k]`` is the full symmetric k-th order tensor of shape (m,)*k.

    Notes
    -----
    For two-term columns the distinct points are the displacements by 0 or +-pi/2 in at most
    ``order`` columns at once: ``sum_{j<=order} C(G, j) 2**j`` circuits for G columns.

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> c = qg.Circuit(1).ry(0)
    >>> d = derivatives(c, qg.Observable({"Z": 1.0}), np.array([0.3]), order=4)
    >>> bool(np.isclose(d.tensor[0, 0, 0, 0], np.cos(0.3))), d.executions
    (True, 3)
    """
    k = _check_order(order)
    out, book = _tensors(circuit, observable, theta, tuple(range(k + 1)), shots=shots, seed=seed,
                         shift=shift, step=step, splits=splits, memory=memory,
                         executor=executor, chunk=chunk)
    tensors = (_scalar(out[0]),) + tuple(out[j] for j in range(1, k + 1))
    return DerivativeTensors(tensors, k, book.executions, book.shots)


def _scalar(v):
    return float(v) if np.ndim(v) == 0 else v
