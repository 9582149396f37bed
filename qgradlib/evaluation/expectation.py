"""expect, probabilities, state, sample: the functions users call, and their derivatives.

One autograd primitive, `evaluate`, maps a batch of gate-angle vectors ``phi`` (P, G) to
measured values (P, K). Its vector-Jacobian product is registered right below it and follows
the ``gradient=`` option:

- ``"shift"``: the shift plan of every trainable column (`qgradlib.rules.plans`) is evaluated as
  one batch *through `evaluate` itself*, so the VJP is again differentiable (a shift of a
  shift) and `autograd.hessian` works;
- ``"difference"``: central (or forward) differences, also through `evaluate`;
- ``"adjoint"``: the exact adjoint method (simulator only); nested derivatives differentiate
  the adjoint Jacobian by shift rules (`qgradlib.evaluation.adjoint_nested`).

``theta -> phi`` is the circuit's linear angle map, written in autograd.numpy, so autograd
applies the chain rule ``A.T @ dE/dphi`` for shared and scaled parameters by itself.

Simulator shortcuts that leave the ledger alone: the unique rows of one call are run as
branches of a shared trunk where they agree on leading angles (`qgradlib.engine.branch`),
and with ``gradient="adjoint"`` the forward call keeps its final states, weakly tied to the
call's `Spec`, for the VJP to start from (one state per row, until the VJP runs or the call
is forgotten; see `qgradlib.evaluation.adjoint_nested`).
"""
from __future__ import annotations

import warnings
from collections import Counter
from dataclasses import dataclass, replace
from numbers import Real

import autograd.numpy as anp
import numpy as np
from autograd.extend import defjvp, defvjp, primitive
from autograd.tracer import Box, getval

from . import distribute, lean, ledger
from ..circuits.circuit import Circuit, check_inputs, check_theta
from ..circuits.transform import qubit_sequence
from ..engine import memory
from ..engine.growing import grown_values
from ..engine.heisenberg import deviations
from ..engine.kernels import state_dtype
from .adjoint_nested import adjoint_jacobian, adjoint_vjp, check_nested, keep_states
from ..engine.density import density_states, run_density
from ..engine.statevector import run, run_states
from ..engine.measurement import (ALLOCATIONS, apply_readout, check_readout, make_rng,
                                  outcome_distribution, plan_measurements)
from .rows import guard_rows, measure_rows_here, peak_states
from ..circuits.observables import Observable
from ..circuits.preparation import prepared
from ..rules.plans import distinct_points, first_order_points
from ..rules.stencils import check_step

__all__ = ["expect", "probabilities", "state", "density_matrix", "sample", "evaluate", "METHODS",
           "NestedPlanWarning", "NESTED_PLAN_LIMIT"]

METHODS = ("shift", "adjoint", "difference")


@dataclass(frozen=True, eq=False)
class Spec:
    """Everything about an evaluation except the angles: what to measure and how."""

    circuit: Circuit
    kind: str                      # "expect" or "probs"
    observables: tuple = ()
    qubits: tuple | None = None
    shots: int | None = None
    rng: np.random.Generator | None = None
    gradient: str = "shift"
    shift: float | None = None
    step: float | None = None
    stencil: str = "central"
    splits: int = 1
    memory: int | None = None
    columns: tuple = ()
    settings: int = 1
    allocation: str = "uniform"
    readout: tuple | None = None   # per-qubit readout flip probabilities
    plan: object = None            # measurement.MeasurementPlan of the observables
    fuse: bool = True              # gate fusion in the engine (never changes results beyond 1e-12)
    executor: object = None        # where the unique rows run (qgradlib.evaluation.distribute); None: here
    chunk: int | None = None       # rows per task on the executor
    timeout: float | None = None   # seconds to wait for the executor's chunks of one batch
    precision: str = "double"      # amplitudes complex128 ("double") or complex64 ("single")

    @property
    def n_out(self):
        if self.kind == "expect":
            return len(self.observables)
        k = self.circuit.n_qubits if self.qubits is None else len(self.qubits)
        return 2 ** k

    def rule_options(self):
        return dict(shift=self.shift, step=self.step, shots=self.shots,
                    splits=self.splits, rng=self.rng)


# -- the primitive and its derivative rules ---------------------------------------------------
@primitive
def evaluate(phi, spec: Spec, inserts=None, purposes="value", distinct=False):
    """Measured values (P, K) at gate angles ``phi`` (P, G); identical rows run once.

    The autograd primitive behind `expect` and every derivative: ``spec`` says what to
    measure and how to differentiate (built by `expect` from its keywords). ``distinct``
    says the rows are distinct circuits by construction (`qgradlib.rules.plans.distinct_points`),
    so none is looked for among them.

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> from qgradlib.evaluation.expectation import _spec
    >>> c = qg.Circuit(1).ry(0)
    >>> spec = _spec(c, "expect", observables=[qg.Observable({"Z": 1.0})])
    >>> with qg.Ledger() as book:
    ...     vals = qg.evaluation.evaluate(np.array([[0.0], [np.pi], [0.0]]), spec)
    >>> np.round(vals, 12).tolist(), book.circuits       # the repeated row ran once
    ([[1.0], [-1.0], [1.0]], 2)
    """
    phi = np.asarray(phi, dtype=float)
    P = phi.shape[0]
    if P == 0:              # an empty batch: an empty result, nothing run or counted
        return np.zeros((0, spec.n_out))
    if distinct:
        rows, inverse = np.arange(P), np.arange(P)
    else:
        rows, inverse = _unique_rows(phi, spec.circuit, inserts)
    if isinstance(purposes, str):
        labels = {purposes: len(rows)}
    else:
        labels = Counter(purposes if distinct else [purposes[r] for r in rows])
    ledger.record(len(rows), spec.settings, spec.shots or 0, labels)
    ins = None if inserts is None else [inserts[r] for r in rows]
    keep = (spec.gradient == "adjoint" and inserts is None and spec.shots is None
            and not spec.circuit.has_noise and spec.executor is None)
    if keep:
        vals, kept = measure_rows_here(phi[rows], spec, ins, keep=True)
        if kept is not None:
            # the adjoint VJP starts from these final states (and their O psi) instead of
            # running again
            keep_states(spec, phi, kept, inverse)
        del kept
    else:
        vals = distribute.measure_rows(phi[rows], spec, ins, index=rows)
    return vals[inverse]


_TICK = 2.0 ** 44      # angles are compared on a grid of 2**-44 rad (about 6e-14)
# angles in a batch from which rows that differ in one column are keyed by that column alone
ONE_COLUMN_KEYS = 2 ** 14


def _unique_rows(phi, circuit, inserts):
    """``(rows, inverse)``: the first row of each distinct point, in order of first
    appearance, and for every row the position of its point among them."""
    P = phi.shape[0]
    if P == 1 or (phi.shape[1] == 0 and not inserts):
        return [0], np.zeros(P, dtype=int)
    if inserts:
        ticks = _angle_ticks(phi, circuit)
        keys = [ticks[p].tobytes() + repr(sorted(inserts[p].items())).encode() for p in range(P)]
        first, inverse, rows = {}, np.empty(P, dtype=int), []
        for p, key in enumerate(keys):
            if key not in first:
                first[key] = len(rows)
                rows.append(p)
            inverse[p] = first[key]
        return rows, inverse
    if P == 2:
        # two rows (a rotosolve sweep's pair): only the angles where they differ on the grid
        d = np.flatnonzero(phi[0] != phi[1])
        if d.size == 0 or np.array_equal(*_ticks(phi[:, d], _periods(circuit)[d])):
            return [0], np.zeros(2, dtype=int)
        return [0, 1], np.arange(2)
    ticks = _one_column_ticks(phi, circuit) if phi.size >= ONE_COLUMN_KEYS else None
    if ticks is None:
        ticks = _angle_ticks(phi, circuit)
    # one comparison key per row (its bytes), sorted once; unique keeps the first index
    t = np.ascontiguousarray(ticks)
    keys = t.view(np.dtype((np.void, t.dtype.itemsize * t.shape[1]))).reshape(P)
    _, first, inv = np.unique(keys, return_index=True, return_inverse=True)
    order = np.argsort(first, kind="stable")
    rank = np.empty_like(order)
    rank[order] = np.arange(order.size)
    return first[order].tolist(), rank[inv.reshape(-1)]


def _one_column_ticks(phi, circuit):
    """Keys (P, 2) that tell rows apart as `_angle_ticks` would, for rows that equal one
    reference but in one column each (`qgradlib.engine.heisenberg.deviations`; None for
    other rows): (column, tick of its angle), or (G, 0) where the tick is the reference's.
    Only the deviating angles are put on the grid, not every angle of every row."""
    dev = deviations(phi)
    if dev is None:
        return None
    ref, col = dev
    P, G = phi.shape
    periods = _periods(circuit)
    on = np.flatnonzero(col < G)
    c = col[on]
    # the deviating angles as one row whose columns carry their own gates' periods
    tick = _ticks(phi[on, c][None], periods[c])[0]
    moved = tick != _ticks(ref[None], periods)[0][c]
    keys = np.zeros((P, 2))
    keys[:, 0] = G
    keys[on[moved], 0] = c[moved]
    keys[on[moved], 1] = tick[moved]
    return keys


def _angle_ticks(phi, circuit):
    """Angles on a fine grid, reduced modulo each gate's period where it has one.

    Shifted points such as ``(a + pi/2) - pi/2`` or ``a + 2 pi`` differ from ``a`` only by
    rounding or by a period: they are the same circuit, run once and counted once.
    """
    return _ticks(phi, _periods(circuit))


def _ticks(phi, periods):
    """`_angle_ticks` of the rows ``phi`` (P, G) whose columns have ``periods`` (G,)."""
    t = np.array(phi, dtype=float)
    has = ~np.isnan(periods)
    if np.any(has):
        # reduce first, round after: a point just below a period rounds onto it, hence mod again.
        # Gates with a period below one radian (high frequencies) get a grid that fine relative
        # to their period, so their distinct shifts never share a tick.
        per = periods[has]
        tick = _TICK / np.minimum(per, 1.0)
        t[:, has] = np.mod(np.round(np.mod(t[:, has], per) * tick), np.round(per * tick))
    if not np.all(has):
        t[:, ~has] = np.round(t[:, ~has] * _TICK)
    return t + 0.0          # -0.0 and 0.0 must give one key


def _periods(circuit):
    """Each column's gate period (NaN where none), memoised per circuit (columns only grow)."""
    pops = circuit.parametric_operations
    hit = circuit.__dict__.get("_memo_periods")
    if hit is None or hit[0] != len(pops):
        per = np.array([np.nan if op.gate.period is None else op.gate.period for op in pops], dtype=float)
        hit = (len(pops), per)
        circuit.__dict__["_memo_periods"] = hit
    return hit[1]


def _jacobian(points, new_inserts, coeff, names, spec, P, distinct=False):
    """(P, K, G) Jacobian from a plan's points; differentiable when ``points`` is a box."""
    T = coeff.shape[1]
    if T == 0:
        return np.zeros((P, spec.n_out, coeff.shape[0]))
    vals = anp.reshape(evaluate(points, spec, new_inserts, names, distinct), (P, T, spec.n_out))
    return anp.einsum("gt,ptk->pkg", coeff, vals)


class NestedPlanWarning(UserWarning):
    """A nested autograd derivative through Hamiltonian gates needs a very large plan.

    Examples
    --------
    >>> import warnings
    >>> import qgradlib as qg
    >>> with warnings.catch_warnings(record=True) as caught:
    ...     warnings.simplefilter("always")
    ...     warnings.warn("a plan of 20000 circuits", qg.NestedPlanWarning)
    >>> issubclass(caught[0].category, UserWarning)
    True
    """


# circuits in one nested plan above which NestedPlanWarning is raised
NESTED_PLAN_LIMIT = 10_000


def _shift_jacobian(phi, spec, inserts):
    points, new_inserts, coeff, names = first_order_points(
        spec.circuit, phi, inserts, spec.columns, **spec.rule_options())
    n = len(names)
    if inserts is not None and n > NESTED_PLAN_LIMIT:
        # each order multiplies the points of a Hamiltonian gate by 2 x its quadrature nodes;
        # autograd differentiates plan by plan, without merging across orders
        gates = sorted({spec.circuit.parametric_operations[c].gate.name for row in inserts for c in row})
        warnings.warn(NestedPlanWarning(
            f"a nested autograd derivative through Hamiltonian gate(s) {', '.join(gates)} needs "
            f"{n:,} circuits in one plan, and the count multiplies with every order: "
            "qgradlib.curvature.derivatives(circuit, observable, theta, order=k) builds one "
            "merged plan for all orders and needs far fewer"), stacklevel=2)
    P = np.shape(getval(phi))[0]
    # the points around one row of a fixed plan are distinct by construction: no search
    distinct = P == 1 and inserts is None and distinct_points(
        spec.circuit, spec.columns, **spec.rule_options())
    return _jacobian(points, new_inserts, coeff, names, spec, P, distinct)


def _fd_jacobian(ans, phi, spec, inserts):
    """Finite differences that step theta, one trainable parameter at a time, as (P, K, G).

    A device steps the parameters, not each gate angle: parameter i moves phi along column
    ``A[:, i]`` of the angle map, so a parameter shared by six gates costs two circuits
    (central), not twelve. The differences ``D_i ~ dE/dtheta_i`` are returned lifted to phi
    as ``D @ diag(1 / |A_i|**2) @ A.T``; the chain rule through the angle map (``A.T``) turns
    that back into exactly ``D``, since each gate angle belongs to one parameter and
    ``A.T @ A`` is therefore diagonal. Data features that autograd traces (``inputs``) are
    stepped the same way, along the columns of the input map ``B``: a gate reads a parameter
    or a feature, never both, so ``[A B]`` keeps that property.
    """
    P, G = np.shape(getval(phi))
    circuit = spec.circuit
    A = circuit.angle_map()[0]
    m = A.shape[1]
    if circuit.n_inputs:
        A = np.hstack([A, circuit.input_map()])
    traced = np.zeros(G, dtype=bool)
    traced[list(spec.columns)] = True
    A = np.where(traced[:, None], A, 0.0)          # only the columns autograd traces
    params = [i for i in range(A.shape[1]) if np.any(A[:, i] != 0.0)]
    # a boxed phi will be differentiated again: this difference is part of one of higher order
    order = 1 + _depth(phi)
    if spec.step is not None:
        h = check_step(spec.step, order)
    elif spec.shots is not None:
        h = 0.1
    elif spec.precision == "single":
        # single-precision values round at ~1e-7: the step that balances rounding and
        # truncation is eps**(1/3) (central, first order), about 5e-3
        h = float(np.finfo(np.float32).eps ** (1.0 / (order + 2)))
    else:
        h = 1e-5 if order == 1 else float(np.finfo(float).eps ** (1.0 / (order + 2)))
    steps = (h, -h) if spec.stencil == "central" else (h,)
    T = len(steps) * len(params)
    delta = np.zeros((T, G))
    coeff = np.zeros((len(params), T))
    for i, param in enumerate(params):
        for s, step in enumerate(steps):
            t = i * len(steps) + s
            delta[t] = step * A[:, param]
            coeff[i, t] = (1.0 if step > 0 else -1.0) / (len(steps) * h)
    lift = A[:, params] / np.sum(A[:, params] ** 2, axis=0)           # (G, len(params))
    names = [f"theta[{i}]" if i < m else f"inputs[{i - m}]" for i in params for _ in steps]
    points = anp.reshape(phi[:, None, :] + delta[None], (P * T, G))
    ins = None if inserts is None else [row for row in inserts for _ in range(T)]
    J = _jacobian(points, ins, lift @ coeff, names * P, spec, P)
    if spec.stencil == "forward" and T:
        # f'(a) ~ (f(a + h) - f(a)) / h: the value term, reused from the forward pass
        J = J - anp.reshape(ans, (P, spec.n_out, 1)) * (lift.sum(axis=1) / h)
    return J


def _depth(x):
    """How many autograd derivatives are being taken through ``x`` at once."""
    d = 0
    while isinstance(x, Box):
        d, x = d + 1, x._value
    return d


def _adjoint_vjp(phi, spec, g, cache):
    if isinstance(phi, Box) or isinstance(g, Box):
        # a derivative of the derivative: the adjoint Jacobian, itself differentiated by shifts,
        # computed once for all the cotangents autograd's jacobian sends
        check_nested(spec)
        if "adjoint" not in cache:
            cache["adjoint"] = adjoint_jacobian(phi, spec)
        return anp.einsum("pk,pkg->pg", g, cache["adjoint"])
    return adjoint_vjp(phi, spec, g)


def _evaluate_vjp(ans, phi, spec, inserts=None, purposes="value", distinct=False):
    cache = {}

    def jac():
        # autograd's jacobian calls one VJP once per output: build the plan only once
        if "J" not in cache:
            if spec.gradient == "difference":
                cache["J"] = _fd_jacobian(ans, phi, spec, inserts)
            else:
                cache["J"] = _shift_jacobian(phi, spec, inserts)
        return cache["J"]

    def vjp(g):
        if np.shape(getval(phi))[0] == 0:
            return np.zeros(np.shape(getval(phi)))
        if spec.gradient == "adjoint":
            return _adjoint_vjp(phi, spec, g, cache)
        return anp.einsum("pk,pkg->pg", g, jac())
    return vjp


defvjp(evaluate, _evaluate_vjp)


def _evaluate_jvp(g, ans, phi, spec, inserts=None, purposes="value", distinct=False):
    """Forward mode: the Jacobian over the columns the tangent ``g`` (P, G) moves, times g."""
    moving = np.any(np.asarray(getval(g)) != 0, axis=0)
    cols = tuple(j for j in spec.columns if moving[j])
    if not cols:
        return anp.zeros(np.shape(ans))
    sub = replace(spec, columns=cols)
    if spec.gradient == "adjoint":
        if isinstance(phi, Box) or isinstance(g, Box):
            check_nested(sub)
        J = adjoint_jacobian(phi, sub)
    elif spec.gradient == "difference":
        J = _fd_jacobian(ans, phi, sub, inserts)
    else:
        J = _shift_jacobian(phi, sub, inserts)
    return anp.einsum("pkg,pg->pk", J, g)


defjvp(evaluate, _evaluate_jvp)


# -- argument checks ----------------------------------------------------------------------------
def _check_circuit(circuit):
    if not isinstance(circuit, Circuit):
        raise TypeError(f"circuit must be a qgradlib Circuit; got {type(circuit).__name__}")


def _check_fuse(fuse):
    if not isinstance(fuse, (bool, np.bool_)):
        raise TypeError(f"fuse must be True or False; got {fuse!r}")
    return bool(fuse)


def _check_precision(precision, circuit):
    """``precision`` checked: "double" or "single" (single: the statevector engine only)."""
    state_dtype(precision)
    if precision == "single" and circuit.has_noise:
        raise ValueError("precision='single' is for pure states: a circuit with noise channels "
                         "runs on the density-matrix path, in double precision only; use "
                         "precision='double'")
    return precision


def _check_shots(shots):
    if shots is None:
        return None
    if isinstance(shots, (bool, np.bool_)) or not isinstance(shots, (int, np.integer)) or shots < 1:
        raise ValueError(f"shots must be a positive int or None; got {shots!r}")
    if shots >= 2 ** 63:
        raise ValueError(f"shots must be below 2**63 (a count a 64-bit integer can hold); got {shots!r}")
    return int(shots)


def _observables(observables, n):
    single = isinstance(observables, Observable)
    obs = [observables] if single else observables
    if not isinstance(obs, (list, tuple)) or not obs:
        raise TypeError("observables must be an Observable or a non-empty list of them; "
                        f"got {type(observables).__name__}")
    for o in obs:
        if not isinstance(o, Observable):
            raise TypeError(f"observables must be Observable instances; got {type(o).__name__}")
        if o.traced:
            raise TypeError("this function cannot differentiate observable coefficients (only "
                            "expect and variance can): build the observable from plain floats")
        if o.n_qubits != n:
            raise ValueError(f"observable on {o.n_qubits} qubits does not fit a circuit of {n} qubits "
                             "(Pauli strings need one letter per qubit)")
    return tuple(obs), single


def _traced_split(observables):
    """``(terms, weights, single)`` when some coefficient is traced by autograd, else None.

    Every traced observable becomes its Pauli words (unit coefficients) and, weighted by
    the traced coefficients, the sum of their values; other observables pass as they are.
    """
    single = isinstance(observables, Observable)
    obs = [observables] if single else observables
    if not isinstance(obs, (list, tuple)) or not any(isinstance(o, Observable) and o.traced for o in obs):
        return None
    inner, index, weights = [], {}, []

    def slot(o, key):
        if key not in index:
            index[key] = len(inner)
            inner.append(o)
        return index[key]

    for k, o in enumerate(obs):
        if not isinstance(o, Observable):
            raise TypeError(f"observables must be Observable instances; got {type(o).__name__}")
        if not o.traced:
            weights.append([(slot(o, ("whole", k)), 1.0)])
            continue
        row = [(slot(Observable({w: 1.0}), ("word", w)), c) for w, c in o.terms.items()]
        if o.dense is not None:
            row.append((slot(Observable.from_matrix(o.dense), ("dense", k)), 1.0))
        weights.append(row)
    return inner, weights, single


def _check_qubits(qubits, n):
    if qubits is None:
        return None
    qs = qubit_sequence(qubits, n)
    if len(set(qs)) != len(qs) or not qs:
        raise ValueError(f"qubits must be distinct and non-empty; got {qs}")
    return qs


def _spec(circuit, kind, *, observables=(), qubits=None, shots=None, seed=None, gradient="shift",
          shift=None, step=None, stencil="central", splits=1, memory_budget=None,
          allocation="uniform", readout=None, fuse=True, executor=None, chunk=None, timeout=None,
          precision="double"):
    """The `Spec` of one call, its options checked; refuses a circuit that cannot fit.

    Exact evaluations here (no shots, executor or readout model) reuse the checked `Spec`
    of an earlier call with the same circuit, observables and options: a training loop
    checks its options and plans its measurements once. Each call still gets its own
    `Spec` object (the adjoint VJP's kept states are tied to it) and its own memory guard.
    """
    key = None
    if shots is None and executor is None and readout is None:
        opts = (kind, qubits, gradient, shift, step, stencil, splits, memory_budget, allocation,
                fuse, chunk, timeout, precision)
        try:
            # the type beside each value: True == 1 as dict keys, but only one is valid
            key = (tuple(id(o) for o in observables),) + tuple((type(v), v) for v in opts)
            hash(key)
        except TypeError:       # an unhashable option: check it the long way
            key = None
    if key is not None:
        if seed is not None:
            make_rng(seed)      # checked whether or not shots are taken
        snap = circuit.snapshot()
        memo = snap.__dict__.setdefault("_memo_specs", {})
        hit = memo.get(key)
        if hit is not None and all(a is b for a, b in zip(hit[0], observables)):
            template, peak = hit[1], hit[2]
            memory.guard_states(snap.n_qubits, peak, "evaluating 1 circuit(s)",
                                state_dtype(template.precision).itemsize, density=snap.has_noise)
            fresh = object.__new__(Spec)
            fresh.__dict__.update(template.__dict__)
            return fresh
        spec = _checked_spec(snap, kind, observables=observables, qubits=qubits, shots=shots,
                             seed=None, gradient=gradient, shift=shift, step=step, stencil=stencil,
                             splits=splits, memory_budget=memory_budget, allocation=allocation,
                             readout=readout, fuse=fuse, executor=executor, chunk=chunk,
                             timeout=timeout, precision=precision)
        if len(memo) >= 8:      # a few observables and option sets a circuit
            memo.clear()
        memo[key] = (tuple(observables), spec, peak_states(spec, 1))
        fresh = object.__new__(Spec)
        fresh.__dict__.update(spec.__dict__)
        return fresh
    return _checked_spec(circuit, kind, observables=observables, qubits=qubits, shots=shots,
                         seed=seed, gradient=gradient, shift=shift, step=step, stencil=stencil,
                         splits=splits, memory_budget=memory_budget, allocation=allocation,
                         readout=readout, fuse=fuse, executor=executor, chunk=chunk,
                         timeout=timeout, precision=precision)


def _checked_spec(circuit, kind, *, observables, qubits, shots, seed, gradient, shift, step,
                  stencil, splits, memory_budget, allocation, readout, fuse, executor, chunk,
                  timeout, precision):
    if not isinstance(gradient, str):
        raise TypeError(f"gradient must be a string, one of {METHODS}; got {type(gradient).__name__}")
    if gradient not in METHODS:
        raise ValueError(f"gradient must be one of {METHODS}; got {gradient!r}")
    shots = _check_shots(shots)
    # checked whether or not shots are taken (a generator is made only when they are)
    rng = make_rng(seed) if seed is not None or shots is not None else None
    if gradient == "adjoint" and shots is not None:
        raise ValueError("gradient='adjoint' needs the exact state, which a device never has: "
                         "it cannot be combined with shots; use 'shift'")
    if gradient == "adjoint" and circuit.has_noise:
        raise ValueError("gradient='adjoint' runs on pure states and cannot differentiate a circuit "
                         "with noise channels; use gradient='shift' (exact for noise that does not "
                         "depend on the angles) or 'difference'")
    if allocation not in ALLOCATIONS:
        raise ValueError(f"allocation must be one of {ALLOCATIONS}; got {allocation!r}")
    readout = check_readout(readout, circuit.n_qubits)
    if readout is not None and gradient == "adjoint":
        raise ValueError("gradient='adjoint' cannot include readout error; use gradient='shift'")
    if readout is not None and any(o.dense is not None for o in observables):
        raise ValueError("readout= models bit flips of Pauli measurements; an observable with a "
                         "dense part is measured in its own eigenbasis, which has no such bits")
    if shift is not None:
        if not isinstance(shift, Real) or not 0 < float(shift) < np.pi:
            raise ValueError(f"shift must be a number in the open interval (0, pi); got {shift!r}")
        shift = float(shift)
    if step is not None:
        step = check_step(step, 1)
    if stencil not in ("central", "forward"):
        raise ValueError(f"stencil must be 'central' or 'forward'; got {stencil!r}")
    if isinstance(splits, bool) or not isinstance(splits, (int, np.integer)) or splits < 1:
        raise ValueError(f"splits must be a positive int; got {splits!r}")
    if memory_budget is not None and (isinstance(memory_budget, (bool, np.bool_))
                                      or not isinstance(memory_budget, (int, np.integer))
                                      or memory_budget < 1):
        raise ValueError(f"memory must be a positive number of bytes; got {memory_budget!r}")
    executor, chunk = distribute.check_executor(executor, chunk)
    timeout = distribute.check_timeout(timeout, executor)
    # the evaluation and every derivative of it see this frozen copy, whatever happens to
    # the user's circuit afterwards
    circuit = circuit.snapshot()
    pops = circuit.parametric_operations
    columns = tuple(k for k, op in enumerate(pops) if op.param is not None and op.scale != 0.0)
    plan = plan_measurements(observables) if kind == "expect" else None
    settings = plan.n_settings if plan is not None else 1
    spec = Spec(circuit, kind, observables, qubits, shots,
                rng if shots is not None else None, gradient, shift, step, stencil,
                int(splits), memory_budget, columns, max(1, settings), allocation, readout, plan,
                _check_fuse(fuse), executor=executor, chunk=chunk, timeout=timeout,
                precision=_check_precision(precision, circuit))
    # a guard at the call that asks for the work, not deep inside the engine: one circuit
    # must fit (batches are then cut into chunks that fit)
    guard_rows(spec, 1, "evaluating")
    return spec


def _guard(circuit, dtype):
    """Refuse a final state (`state`) that cannot be computed here."""
    memory.guard_states(circuit.n_qubits, run_states(circuit), "the final state", dtype.itemsize)


def _run(spec, theta, inputs=None):
    phi = spec.circuit.angles(theta, inputs)
    batched = np.ndim(getval(phi)) == 2
    phi2 = phi if batched else anp.reshape(phi, (1, -1))
    return evaluate(phi2, _traced(spec, theta, inputs)), batched


def _traced(spec, theta, inputs):
    """The spec whose derivative columns are those autograd traces: the weight columns when
    theta is traced, the data-feature columns when the inputs are (a classical layer in
    front); for a circuit without inputs, the weight columns as always."""
    circuit = spec.circuit
    if not circuit.n_inputs:
        return spec
    cols = set(spec.columns) if isinstance(theta, Box) else set()
    if isinstance(inputs, Box):
        pops = circuit.parametric_operations
        cols.update(j for j in circuit.input_columns if pops[j].scale != 0.0)
    return replace(spec, columns=tuple(sorted(cols)))


# -- public functions ---------------------------------------------------------------------------
def expect(circuit, observables, theta, *, inputs=None, shots=None, seed=None, gradient="shift",
           shift=None, step=None, stencil="central", splits=1, memory=None, allocation="uniform",
           readout=None, fuse=True, executor=None, chunk=None, timeout=None, initial=None,
           precision="double"):
    """Expectation value(s) of ``observables`` after ``circuit`` at parameters ``theta``.

    Differentiable with autograd (`grad`, `jacobian`, `hessian`, ...); the derivative is
    computed by ``gradient``.

    Parameters
    ----------
    circuit : Circuit
    observables : Observable or list of Observable
    theta : array_like, shape (n_params,) or (B, n_params)
    inputs : array_like, shape (n_inputs,) or (N, n_inputs), optional
        The data point, or data set, that the circuit's ``input=`` gates read (required
        exactly when the circuit has such gates). A data set gives a leading axis (N,); a
        batch of theta (B, m) pairs with it row by row (B == N). Autograd differentiates
        the weights when theta is traced and the inputs when they are (both when both are),
        and shifts no column nobody asked for. See docs/data.md.
    shots : int, optional
        Finite-shot estimate: on average ``shots`` readouts per measurement setting, per
        circuit, so each circuit takes ``shots * n_settings`` in total (the ledger's count).
        With ``allocation="uniform"`` every setting gets exactly ``shots``.
    seed : int or numpy.random.Generator, optional
        Randomness for shots and for the stochastic rule's split points.
    gradient : {"shift", "adjoint", "difference"}
        How autograd differentiates this call ("adjoint" is refused for noisy circuits).
    shift : float in (0, pi), optional
        Shift ``s`` of the two-term rule for single-frequency gates (default pi/2).
    step : float, optional
        Finite-difference step (default 1e-5 exact, 0.1 with shots).
    stencil : {"central", "forward"}
    splits : int
        With shots, split points sampled per Hamiltonian gate for the stochastic rule.
    memory : int, optional
        Bytes the engine may use for one chunk of a batch (default: a quarter of free memory).
    allocation : {"uniform", "weighted"}
        How a circuit's shots are split over its settings (see `qgradlib.engine.measurement`).
    readout : float or sequence of float in [0, 0.5], optional
        Readout flip probability per qubit (one float: the same for all). With ``shots`` the
        sampled bits carry it; without, the exact value under that readout model.
    fuse : bool
        Gate fusion in the engine (on by default; it changes results by rounding only).
    precision : {"double", "single"}
        Amplitudes of the simulated states: complex128 (default) or complex64, which halves
        the memory (a 30-qubit state in 8 GiB). Values and derivatives (exact rules, run on
        single-precision states) are returned as float64 computed from those states; they
        differ from double precision by rounding, about ``sqrt(gates) * 6e-8`` times the
        observable's norm (see docs/performance.md). Pure states only (no noise channels).
    executor : concurrent.futures.Executor or dask.distributed.Client, optional
        Where the distinct circuits of every evaluation (values and shift plans) run, in
        chunks (see `qgradlib.evaluation.distribute`); results equal the serial ones.
    chunk : int, optional
        Circuits per task on ``executor`` (default: about 4 tasks per worker).
    timeout : float, optional
        Seconds to wait for the chunks of one batch on ``executor`` (default: no limit);
        past it a `qgradlib.ChunkError` names the points that did not finish.
    initial : str or array_like, optional
        The state the circuit starts from instead of ``|0...0>``: a bitstring such as ``"0110"``
        (qubit 0 leftmost) or a normalised state vector of shape (2**n,) (see
        `qgradlib.circuits.preparation`). Derivatives start from it too.

    Returns
    -------
    float or ndarray
        A float for one observable and 1-D theta; shape (K,) for K observables; a leading
        batch axis (B,) when theta is (B, n_params), or (N,) for a data set of N points.

    Notes
    -----
    Exact values come from simulation. With ``shots`` the value is a sampled mean, which is
    how a device's estimate behaves statistically, but it is still a simulation, not a
    measurement on hardware. A circuit with noise channels runs on the density-matrix path;
    its channels are models too. For standard errors use `qgradlib.estimate`.

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> from autograd import grad
    >>> c = qg.Circuit(1).ry(0)
    >>> Z = qg.Observable({"Z": 1.0})
    >>> bool(np.isclose(qg.expect(c, Z, np.array([0.4])), np.cos(0.4)))
    True
    >>> bool(np.isclose(grad(lambda t: qg.expect(c, Z, t))(np.array([0.4]))[0], -np.sin(0.4)))
    True
    >>> d = qg.Circuit(1).ry(0, input=0).ry(0)        # a data feature, then a weight
    >>> vals = qg.expect(d, Z, np.array([0.4]), inputs=np.array([[0.0], [0.6]]))
    >>> vals.shape, bool(np.allclose(vals, np.cos([0.4, 1.0])))     # <Z> = cos(x + theta)
    ((2,), True)
    """
    _check_circuit(circuit)
    lane_key = None
    if (inputs is None and shots is None and seed is None and readout is None and executor is None
            and initial is None and memory is None and chunk is None and timeout is None
            and fuse is True and precision == "double"):
        lane_key = _lane_key(observables, gradient, shift, step, stencil, splits, allocation)
        if lane_key is not None:
            out = _lane_call(circuit, observables, theta, lane_key)
            if out is not None:
                return out
    traced = _traced_split(observables)
    if traced is not None:
        # coefficients being differentiated stay in autograd as weights of the term values;
        # only the terms (plain observables) go through the primitive
        inner, weights, single = traced
        vals = expect(circuit, inner, theta, shots=shots, seed=seed, gradient=gradient,
                      shift=shift, step=step, stencil=stencil, splits=splits, memory=memory,
                      allocation=allocation, readout=readout, fuse=fuse, executor=executor,
                      chunk=chunk, timeout=timeout, initial=initial, inputs=inputs,
                      precision=precision)
        out = [sum(w * vals[..., j] for j, w in row) for row in weights]
        return out[0] if single else anp.stack(out, axis=-1)
    circuit = prepared(circuit, initial)
    obs, single = _observables(observables, circuit.n_qubits)
    theta = check_theta(circuit, theta)
    inputs = check_inputs(circuit, inputs, theta)
    spec = _spec(circuit, "expect", observables=obs, shots=shots, seed=seed, gradient=gradient,
                 shift=shift, step=step, stencil=stencil, splits=splits, memory_budget=memory,
                 allocation=allocation, readout=readout, fuse=fuse, executor=executor, chunk=chunk,
                 timeout=timeout, precision=precision)
    vals, batched = _run(spec, theta, inputs)
    if lane_key is not None:
        _keep_lane(spec, single, lane_key)
    if single:
        vals = vals[:, 0]
    return vals if batched else vals[0]


# -- the lean lane (qgradlib.evaluation.lean) -----------------------------------------------------
def _lane_key(observables, gradient, shift, step, stencil, splits, allocation):
    """The memo key of an exact call's lane, or None when an option is unhashable."""
    single = isinstance(observables, Observable)
    obs = (observables,) if single else observables
    if not isinstance(obs, (list, tuple)):
        return None
    try:
        # the type beside each value, as in `_spec`: True == 1 as keys, but only one is valid
        key = (tuple(id(o) for o in obs), single) + tuple(
            (type(v), v) for v in (gradient, shift, step, stencil, splits, allocation))
        hash(key)
    except TypeError:
        return None
    return key


def _lane_call(circuit, observables, theta, key):
    """The value of an exact call through its memoised lane, or None (the general path)."""
    lanes = circuit.snapshot().__dict__.get("_memo_lanes")
    lane = None if lanes is None else lanes.get(key)
    if lane is None:
        return None
    if lane.single:
        if observables is not lane.observables[0]:
            return None
    elif len(observables) != len(lane.observables) or not all(
            a is b for a, b in zip(observables, lane.observables)):
        return None
    if not lean.plain(theta, lane):
        return _lane_rows(theta, lane)
    phi = lane.angles(getval(theta))
    if phi is None:
        return None
    return lean.lane_value(theta, lane, [phi, isinstance(theta, Box)])


def _lane_rows(theta, lane):
    """The exact values at the rows of a plain theta (B, m) on a layered lane, when their
    distinct points leave one reference in one column each (a rotosolve sweep's pair, the
    points of a shift plan): the growing batch straight away, the same distinct circuits
    counted and the same memory guarded as on the general path. None for other rows, or
    more than a two-term plan's ``2 m + 1``, or rows that the general path would cut into
    chunks."""
    if not (lane.layered and type(theta) is np.ndarray and theta.dtype == np.float64
            and theta.ndim == 2 and 2 <= theta.shape[0] <= 2 * lane.n_params + 1
            and theta.shape[1] == lane.n_params and (lane.covered or np.isfinite(theta).all())):
        return None
    phi = lane.row_angles(theta)
    if phi is None:
        return None
    rows, inverse = _unique_rows(phi, lane.circuit, None)
    n = lane.circuit.n_qubits
    nbytes = memory.state_bytes(n, lane.peak(len(rows)))
    if nbytes > memory.recent_available(nbytes) // 4:
        return None
    vals = grown_values(lane.circuit, phi[rows], lane.observables)
    if vals is None:
        return None
    ledger.record(len(rows), lane.settings, 0, {"value": len(rows)})
    vals = vals[inverse]
    return vals[:, 0] if lane.single else vals


def _keep_lane(spec, single, key):
    """After a general call succeeded: keep its lane on the snapshot when it fits one."""
    lanes = spec.circuit.__dict__.setdefault("_memo_lanes", {})
    if key in lanes:
        return
    # shift-rule derivatives of a lane's values: the general path's own plan and batch
    shifts = None if spec.gradient != "shift" else \
        lean.grown_shifts(spec, lambda phi: _shift_jacobian(phi, spec, None))
    lane = lean.lane_for(spec, single, shifts)
    if lane is not None:
        if len(lanes) >= 8:     # a few observables and option sets a circuit
            lanes.clear()
        lanes[key] = lane


def probabilities(circuit, theta, qubits=None, *, inputs=None, shots=None, seed=None,
                  gradient="shift", shift=None, step=None, stencil="central", splits=1,
                  memory=None, readout=None, fuse=True, executor=None, chunk=None, timeout=None,
                  initial=None, precision="double"):
    """Probabilities of the outcomes on ``qubits`` (first listed = most significant bit).

    Differentiable like `expect`. Returns shape (2**k,) or (B, 2**k) (or (N, 2**k) for a data
    set ``inputs``). ``readout`` (per-qubit flip probabilities) is applied to the outcome
    distribution before any sampling; the other options (``initial=`` and ``precision=``
    included) are those of `expect`.

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> c = qg.Circuit(2).x(1)
    >>> qg.probabilities(c, np.zeros(0), qubits=[1, 0]).tolist()
    [0.0, 0.0, 1.0, 0.0]
    """
    _check_circuit(circuit)
    circuit = prepared(circuit, initial)
    qs = _check_qubits(qubits, circuit.n_qubits)
    theta = check_theta(circuit, theta)
    inputs = check_inputs(circuit, inputs, theta)
    spec = _spec(circuit, "probs", qubits=qs, shots=shots, seed=seed, gradient=gradient,
                 shift=shift, step=step, stencil=stencil, splits=splits, memory_budget=memory,
                 readout=readout, fuse=fuse, executor=executor, chunk=chunk, timeout=timeout,
                 precision=precision)
    vals, batched = _run(spec, theta, inputs)
    return vals if batched else vals[0]


def state(circuit, theta, *, inputs=None, fuse=True, initial=None,
          precision="double") -> np.ndarray:
    """The final statevector, complex128 of shape (2**n,) or (B, 2**n). Not differentiable.

    ``inputs`` (n_inputs,) or (N, n_inputs) is the data point or set the circuit reads, as in
    `expect`; a data set gives shape (N, 2**n).

    A circuit with noise channels has no pure state: use `density_matrix`. ``fuse`` switches
    gate fusion in the engine (results agree to rounding); ``initial`` is the starting state,
    as in `expect`. With ``precision="single"`` the state is simulated and returned as
    complex64 (half the memory; amplitudes within rounding of double precision).

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> qg.state(qg.Circuit(1).h(0), np.zeros(0)).round(4).tolist()
    [(0.7071+0j), (0.7071+0j)]
    >>> qg.state(qg.Circuit(1).h(0), np.zeros(0), precision="single").dtype.name
    'complex64'
    """
    _check_circuit(circuit)
    circuit = prepared(circuit, initial)
    if circuit.has_noise:
        raise ValueError("circuit has noise channels, so its final state is mixed: use "
                         "qgradlib.density_matrix(circuit, theta) instead of state()")
    dtype = state_dtype(_check_precision(precision, circuit))
    phi = _plain_angles(circuit, theta, inputs)
    _guard(circuit, dtype)
    fuse = _check_fuse(fuse)
    if phi.ndim == 2 and phi.shape[0] == 0:     # an empty batch has an empty result
        return np.zeros((0, 2 ** circuit.n_qubits), dtype=dtype)
    psi = run(circuit, np.atleast_2d(phi), fuse=fuse, dtype=dtype)
    return psi if phi.ndim == 2 else psi[0]


def _plain_angles(circuit, theta, inputs):
    """Gate angles as a plain array (no autograd), theta and inputs checked."""
    theta = np.asarray(getval(check_theta(circuit, theta)), dtype=float)
    inputs = check_inputs(circuit, inputs, theta)
    return np.asarray(circuit.angles(theta, None if inputs is None else np.asarray(getval(inputs))),
                      dtype=float)


def density_matrix(circuit, theta, *, inputs=None, initial=None) -> np.ndarray:
    """The final density matrix, complex128 of shape (2**n, 2**n) or (B, 2**n, 2**n).

    Runs the density-matrix path (also for a circuit without noise). Not differentiable.
    ``inputs`` as in `state`.

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> rho = qg.density_matrix(qg.Circuit(1).h(0).noise(0, qg.channels.dephasing(0.25)), np.zeros(0))
    >>> rho.real.round(3).tolist()
    [[0.5, 0.25], [0.25, 0.5]]
    """
    _check_circuit(circuit)
    circuit = prepared(circuit, initial)
    phi = _plain_angles(circuit, theta, inputs)
    n = circuit.n_qubits
    memory.guard_states(n, density_states(), "the final density matrix", density=True)
    if phi.ndim == 2 and phi.shape[0] == 0:
        return np.zeros((0, 2 ** n, 2 ** n), dtype=complex)
    rho = run_density(circuit, np.atleast_2d(phi)).reshape(-1, 2 ** n, 2 ** n)
    return rho if phi.ndim == 2 else rho[0]


def sample(circuit, theta, shots, seed=None, *, inputs=None, readout=None,
           initial=None, precision="double") -> np.ndarray:
    """Basis-state indices of ``shots`` readouts of all qubits (big-endian), shape (shots,)
    or (B, shots) (or (N, shots) for a data set ``inputs``, as in `expect`).

    Noisy circuits are sampled from the diagonal of their density matrix. ``readout``
    (per-qubit flip probabilities in [0, 0.5]) flips the read bits with those probabilities.
    ``precision="single"`` simulates the state in complex64 (see `expect`); the outcome
    probabilities are computed from it in float64.

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> qg.sample(qg.Circuit(2).x(0), np.zeros(0), shots=3, seed=0).tolist()
    [2, 2, 2]
    """
    _check_circuit(circuit)
    circuit = prepared(circuit, initial)
    shots = _check_shots(shots)
    if shots is None:
        raise ValueError("shots must be a positive int; got None")
    rng = make_rng(seed)
    flips = check_readout(readout, circuit.n_qubits)
    n = circuit.n_qubits
    _check_precision(precision, circuit)
    if circuit.has_noise:
        states = density_matrix(circuit, theta, inputs=inputs).reshape(-1, 4 ** n)
    else:
        states = np.atleast_2d(state(circuit, theta, inputs=inputs, precision=precision))
    p = apply_readout(outcome_distribution(states, n, density=circuit.has_noise), n, flips)
    # a row's draw holds a float and an int a shot, the drawn rows and their stack an int a
    # shot each: refuse what cannot fit
    memory.guard(16 * shots * (p.shape[0] + 1), f"{shots:,} shots of {p.shape[0]} circuit(s)")
    ledger.record(p.shape[0], 1, shots, {"sample": p.shape[0]})
    out = np.stack([rng.choice(p.shape[1], size=shots, p=row / row.sum()) for row in p]) \
        if p.shape[0] else np.zeros((0, shots), dtype=int)
    return out if np.ndim(getval(theta)) == 2 or np.ndim(getval(inputs)) == 2 else out[0]
