"""Curvature: Hessians, derivative tensors of any order, the metric tensor, Fisher information.

Derivatives are taken in gate-angle space ``phi`` and mapped to parameters ``theta`` by the
chain rule: the angle map is linear, ``phi = A theta + b``, so a k-th order tensor is the
``phi`` tensor contracted with ``A`` on every index (``H = A.T H_phi A``).

In ``phi`` space every trainable column has one 1-D stencil for all orders
(`qgradlib.stencils`): the point 0 and the shifts of its first-order rule. A mixed
derivative ``d_i^a d_j^b ...`` is the tensor product of the order-a, order-b, ... rules of
the columns involved. All products are merged into one set of distinct points (displaced
coordinates are reduced modulo each gate's period before they are compared), and the points
are evaluated in one batch through `qgradlib.expectation.evaluate`, which records the ledger.
That is how a Hessian reuses the value and the gradient's points: for m two-term parameters,
each in one gate, value + gradient + Hessian take 2 m**2 + 1 distinct circuits (Mari,
Bromley and Killoran, Phys. Rev. A 103, 012405 (2021)).

Hamiltonian gates take repeated stochastic (Duhamel) rules, gates known only by a matrix
function take finite-difference stencils (with a warning). Values here are simulated: the
execution counts say what a device would run, the numbers are not device measurements.

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

from collections import Counter
from dataclasses import dataclass
from itertools import combinations_with_replacement, permutations, product

import numpy as np

from . import ledger as _ledger
from .circuit import Circuit, check_theta
from .engine import memory
from .engine.adjoint import hamiltonian_derivative
from .engine.statevector import apply_gate, apply_matrix, zero_states
from .expectation import _check_qubits, _observables, _spec, evaluate
from .gates import warn_approximate
from .measurement import measurement_settings
from .observables import Observable
from .paulis import pauli_matrix
from .plans import _spread, column_terms, quadrature_nodes
from .stencils import duhamel_rule, gate_stencil

__all__ = ["HessianResult", "DerivativeTensors", "Layer", "hessian", "derivatives", "layers",
           "metric_tensor", "fisher_information"]

# Displaced angles closer than this (after reduction by the period) are one point.
_KEY_TOL = 1e-9


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


@dataclass(frozen=True, eq=False)
class DerivativeTensors:
    """All derivative tensors up to ``order``: ``tensors[k]`` has shape (m,)*k (after a
    leading (K,) axis for a list of observables); ``tensors[0]`` is the value."""

    tensors: tuple
    order: int
    executions: int
    shots: int

    @property
    def value(self):
        return self.tensors[0]

    @property
    def tensor(self):
        """The tensor of the highest order."""
        return self.tensors[self.order]


# -- plans of any order -------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class _Plan:
    deltas: np.ndarray        # (P, G) displacements of the distinct points
    inserts: list | None      # per point {column: ((r, t), ...)} or None
    purposes: list            # ledger label per point
    entries: dict             # multiset of columns -> (point indices, weights)

    @property
    def n_points(self):
        return self.deltas.shape[0]


def _reduce(x, period):
    if period is None:
        return x
    x = x - period * np.round(x / period)
    return -period / 2 if x >= period / 2 - _KEY_TOL else x


def _column_rules(circuit, phi, columns, max_order, *, shift, fd_step, shots, splits, rng):
    """rules[c][k] = [(shift, cuts, weight), ...] for d^k/dphi_c^k, k = 0..max_order."""
    pops = circuit.parametric_operations
    rules = {}
    for c in columns:
        g = pops[c].gate
        if g.kind in ("generator", "function"):
            st = gate_stencil(g, max_order, shift=shift, fd_step=fd_step)
            rules[c] = [[(x, (), w) for x, w in st.rule(k)] for k in range(max_order + 1)]
            continue
        # Hamiltonian gate: first order from the package's stochastic rule, then Duhamel again
        first = [((t.split,), t.coefficient) for t in
                 column_terms(circuit, c, phi[c:c + 1], shots=shots, splits=splits, rng=rng)]
        spread = _spread(g, [phi[c]])

        def nodes(lo, hi, spread=spread):
            r, w = quadrature_nodes(spread * (hi - lo))
            return lo + (hi - lo) * r, (hi - lo) * w
        rules[c] = [[(0.0, (), 1.0)]] + [
            [(0.0, cuts, w) for cuts, w in
             duhamel_rule(k, nodes, first=first, shots=shots, splits=splits, rng=rng)]
            for k in range(1, max_order + 1)]
    return rules


def _build_plan(circuit, phi, columns, orders, *, shift=None, fd_step=None, shots=None,
                splits=1, rng=None) -> _Plan:
    """Merge the tensor-product rules of every multiset of ``columns`` of the given orders."""
    pops = circuit.parametric_operations
    G = len(pops)
    rules = _column_rules(circuit, phi, columns, max(orders), shift=shift, fd_step=fd_step,
                          shots=shots, splits=splits, rng=rng)
    index, deltas, inserts, purposes, entries = {}, [], [], [], {}
    for k in orders:
        for ms in combinations_with_replacement(columns, k):
            counts = Counter(ms)
            factors = [rules[c][a] for c, a in sorted(counts.items())]
            cols = sorted(counts)
            acc = {}
            for combo in product(*factors):
                delta, cut, weight = {}, {}, 1.0
                for c, (x, cuts, w) in zip(cols, combo):
                    x = _reduce(x, pops[c].gate.period)
                    if abs(x) > _KEY_TOL:
                        delta[c] = x
                    if cuts:
                        cut[c] = cuts
                    weight *= w
                key = (tuple((c, int(np.rint(x / _KEY_TOL))) for c, x in sorted(delta.items())),
                       tuple((c, tuple((round(r, 12), round(t, 12)) for r, t in v))
                             for c, v in sorted(cut.items())))
                if key not in index:
                    index[key] = len(deltas)
                    row = np.zeros(G)
                    for c, x in delta.items():
                        row[c] = x
                    deltas.append(row)
                    inserts.append(cut)
                    touched = sorted(set(delta) | set(cut))
                    purposes.append("+".join(pops[c].gate.name for c in touched) or "value")
                p = index[key]
                acc[p] = acc.get(p, 0.0) + weight
            idx = np.array(sorted(acc), dtype=int)
            entries[ms] = (idx, np.array([acc[p] for p in idx]))
    D = np.array(deltas).reshape(len(deltas), G)
    return _Plan(D, inserts if any(inserts) else None, purposes, entries)


def _run_plan(plan, spec, phi):
    """Evaluate the plan's points in one batch; returns values (P, K) and the ledger."""
    with _ledger.Ledger() as book:
        vals = evaluate(phi[None, :] + plan.deltas, spec, plan.inserts, plan.purposes)
    return np.asarray(vals), book


def _tensor(plan, vals, columns, A, k):
    """Order-k tensor in theta, shape (K,) + (m,)*k, from the plan's values (P, K)."""
    Gc, K = len(columns), vals.shape[1]
    pos = {c: i for i, c in enumerate(columns)}
    T = np.zeros((K,) + (Gc,) * k)
    for ms in combinations_with_replacement(columns, k):
        idx, w = plan.entries[ms]
        v = w @ vals[idx] if idx.size else np.zeros(K)
        for perm in set(permutations([pos[c] for c in ms])):
            T[(slice(None),) + perm] = v
    Ac = A[list(columns)] if Gc else np.zeros((0, A.shape[1]))
    for _ in range(k):
        # contract the first phi axis; the new theta axis goes last, so the order is kept
        T = np.tensordot(T, Ac, axes=([1], [0]))
    return T


def _prepare(circuit, theta, name="theta"):
    if not isinstance(circuit, Circuit):
        raise TypeError(f"circuit must be a qgradlib Circuit; got {type(circuit).__name__}")
    theta = np.asarray(check_theta(circuit, theta), dtype=float)
    if theta.ndim != 1:
        raise ValueError(f"{name} must be one parameter vector of shape ({circuit.n_params},); "
                         f"got shape {theta.shape} (call once per point for a batch)")
    phi = np.asarray(circuit.angles(theta), dtype=float)
    return theta, phi, circuit.angle_map()[0]


def _check_order(order):
    if isinstance(order, bool) or not isinstance(order, (int, np.integer)) or order < 1:
        raise ValueError(f"order must be a positive int; got {order!r}")
    return int(order)


def _tensors(circuit, observables, theta, orders, *, shots, seed, shift, fd_step, splits, memory):
    theta, phi, A = _prepare(circuit, theta)
    obs, single = _observables(observables, circuit.n_qubits)
    spec = _spec(circuit, "expect", observables=obs, shots=shots, seed=seed, shift=shift,
                 fd_step=fd_step, splits=splits, memory_budget=memory)
    plan = _build_plan(circuit, phi, spec.columns, orders, shift=spec.shift, fd_step=spec.fd_step,
                       shots=spec.shots, splits=spec.splits, rng=spec.rng)
    vals, book = _run_plan(plan, spec, phi)
    out = {k: _tensor(plan, vals, spec.columns, A, k) for k in orders}
    if single:
        out = {k: v[0] for k, v in out.items()}
    return out, book


def hessian(circuit, observable, theta, *, shots=None, seed=None, memory=None, shift=None,
            fd_step=None, splits=1) -> HessianResult:
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
    fd_step : float, optional
        Step of the finite-difference stencils of gates known only by a matrix function.
    splits : int
        With shots, split points sampled per application of the stochastic rule.

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
                         shift=shift, fd_step=fd_step, splits=splits, memory=memory)
    return HessianResult(_scalar(out[0]), out[1], out[2], book.executions, book.shots)


def derivatives(circuit, observable, theta, order=2, *, shots=None, seed=None, memory=None,
                shift=None, fd_step=None, splits=1) -> DerivativeTensors:
    """Every derivative tensor of an expectation value up to ``order``, from one plan.

    Parameters
    ----------
    circuit, observable, theta, shots, seed, memory, shift, fd_step, splits
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
                         shift=shift, fd_step=fd_step, splits=splits, memory=memory)
    tensors = (_scalar(out[0]),) + tuple(out[j] for j in range(1, k + 1))
    return DerivativeTensors(tensors, k, book.executions, book.shots)


def _scalar(v):
    return float(v) if np.ndim(v) == 0 else v


# -- layers of commuting generators ------------------------------------------------------
@dataclass(frozen=True)
class Layer:
    """A layer of the block-diagonal metric (see `layers`).

    Attributes
    ----------
    columns : tuple of int
        The gate-angle columns (indices into ``circuit.parametric_operations``) in the layer.
    settings : tuple of str
        Measurement bases a device needs for the layer's generator covariances (block-diag).
    diag_settings : tuple of str
        Bases for the generator variances alone (diag).
    effective : bool
        True for a Hamiltonian or function gate: its effective generator
        ``K = i (dU/da) U^dagger`` is not a Pauli sum of fixed form and is measured in its own
        eigenbasis (one setting).
    """

    columns: tuple
    settings: tuple = ()
    diag_settings: tuple = ()
    effective: bool = False

    @property
    def n_settings(self) -> int:
        return 1 if self.effective else max(1, len(self.settings))

    @property
    def n_diag_settings(self) -> int:
        return 1 if self.effective else max(1, len(self.diag_settings))


def _embedded(op, support):
    """The generator of ``op`` as a matrix on the qubits ``support`` (sorted)."""
    s = len(support)
    pos = tuple(support.index(q) for q in op.qubits)
    eye = np.eye(2 ** s, dtype=complex)
    return apply_matrix(eye, s, np.asarray(op.gate.generator), pos).T


def _commute(a, b):
    if not set(a.qubits) & set(b.qubits):
        return True
    support = sorted(set(a.qubits) | set(b.qubits))
    X, Y = _embedded(a, support), _embedded(b, support)
    return bool(np.allclose(X @ Y, Y @ X, atol=1e-10))


_LETTERS = "IXYZ"


def _pauli_words(op, n):
    """Pauli words (n letters) with nonzero weight in the generator of ``op``."""
    k = op.gate.n_qubits
    G = np.asarray(op.gate.generator)
    words = []
    for letters in product(_LETTERS, repeat=k):
        word = "".join(letters)
        if word == "I" * k:
            continue
        if abs(np.trace(pauli_matrix(word) @ G)) / 2 ** k > 1e-12:
            full = ["I"] * n
            for q, ch in zip(op.qubits, word):
                full[q] = ch
            words.append("".join(full))
    return words


def _word_product(u, v):
    """The Pauli word of ``u @ v``, phase dropped."""
    out = []
    for a, b in zip(u, v):
        if a == "I" or a == b:
            out.append(b if a == "I" else "I")
        elif b == "I":
            out.append(a)
        else:
            out.append(({"X", "Y", "Z"} - {a, b}).pop())
    return "".join(out)


def _bases(words, n):
    words = {w for w in words if w != "I" * n}
    if not words:
        return ()
    return tuple(s.basis for s in measurement_settings(Observable({w: 1.0 for w in words})))


def layers(circuit) -> tuple:
    """The layers of `metric_tensor`'s block-diagonal and diagonal approximations.

    A layer is a maximal run of consecutive *trainable generator gates*, with no other
    operation between them, whose generators commute pairwise as operators on the whole
    register. Any other operation (a fixed gate, or a parametric gate at a fixed angle) ends
    the current layer; a trainable gate that does not commute with one already in the layer
    starts a new layer; a trainable Hamiltonian or function gate is a layer of its own.
    Gates acting on disjoint qubits always commute, so ``RY(0) RY(1) RY(2)`` is one layer and
    ``RZ(0) RY(0)`` are two.

    Examples
    --------
    >>> import qgradlib as qg
    >>> c = qg.Circuit(2).rx(0).rx(1).cnot(0, 1).rz(0).ry(0)
    >>> [(l.columns, l.settings) for l in layers(c)]
    [((0, 1), ('XX',)), ((2,), ('ZI',)), ((3,), ('YI',))]
    """
    if not isinstance(circuit, Circuit):
        raise TypeError(f"circuit must be a qgradlib Circuit; got {type(circuit).__name__}")
    n = circuit.n_qubits
    out, current = [], []

    def close():
        if current:
            words = {c: _pauli_words(op, n) for c, op in current}
            ks = list(words.values())
            cov = [w for ws in ks for w in ws]
            var = list(cov)
            for i, wi in enumerate(ks):
                var += [_word_product(a, b) for a in wi for b in wi]
                for wj in ks[i:]:
                    cov += [_word_product(a, b) for a in wi for b in wj]
            out.append(Layer(tuple(c for c, _ in current), _bases(cov, n), _bases(var, n)))
            current.clear()

    col = -1
    for op in circuit.operations:
        if op.gate.parametric:
            col += 1
        if not (op.gate.parametric and op.param is not None and op.scale != 0.0):
            close()
            continue
        if op.gate.kind != "generator":
            close()
            out.append(Layer((col,), effective=True))
            continue
        if current and not all(_commute(op, other) for _, other in current):
            close()
        current.append((col, op))
    close()
    return tuple(out)


# -- the metric tensor --------------------------------------------------------------------
def _derivative_matrix(gate, a):
    """dU/da for a Hamiltonian (exact) or function gate (central difference)."""
    if gate.kind == "hamiltonian":
        return hamiltonian_derivative(gate, a)
    warn_approximate(gate)
    h = 1e-6
    return (gate._matrices(np.array([a + h]))[0] - gate._matrices(np.array([a - h]))[0]) / (2 * h)


def _state_derivatives(circuit, phi, columns):
    """psi (d,) and d psi / d phi_c (len(columns), d) in one pass over the circuit."""
    n = circuit.n_qubits
    memory.guard(16 * (len(columns) + 1) * 2 ** n,
                 f"{len(columns) + 1} states of {n} qubits for the state derivatives")
    row = {c: i + 1 for i, c in enumerate(columns)}
    psi = zero_states(n, len(columns) + 1)
    col = -1
    for op in circuit.operations:
        g = op.gate
        if not g.parametric:
            psi = apply_gate(psi, n, g, op.qubits)
            continue
        col += 1
        a = phi[col]
        d = None
        if col in row and g.kind != "generator":
            d = apply_matrix(psi[:1], n, _derivative_matrix(g, a)[None], op.qubits)
        psi = apply_gate(psi, n, g, op.qubits, np.array([a]))
        if col in row:
            if d is None:   # dU/da = -i G U: the generator acts after the gate
                d = apply_matrix(psi[:1], n, -1j * np.asarray(g.generator), op.qubits)
            psi[row[col]] = d[0]
    return psi[0], psi[1:]


def _exact_metric_phi(circuit, phi, columns):
    psi, D = _state_derivatives(circuit, phi, columns)
    v = D @ psi.conj()                     # <psi|d_i psi>
    return np.real(D.conj() @ D.T) - np.real(np.outer(v.conj(), v))


def _layer_metric_phi(circuit, phi, columns, lays, approx):
    """Stokes et al.'s blocks: generator covariances in the state before each layer."""
    n = circuit.n_qubits
    pos = {c: i for i, c in enumerate(columns)}
    start = {lay.columns[0]: lay for lay in lays}
    pops = circuit.parametric_operations
    g = np.zeros((len(columns), len(columns)))
    psi = zero_states(n, 1)
    col = -1
    for op in circuit.operations:
        if op.gate.parametric:
            col += 1
            lay = start.get(col)
            if lay is not None and lay.effective:
                d = apply_matrix(psi, n, _derivative_matrix(op.gate, phi[col])[None], op.qubits)
                after = apply_gate(psi, n, op.gate, op.qubits, np.array([phi[col]]))
                g[pos[col], pos[col]] = np.real(np.vdot(d, d)) - abs(np.vdot(after, d)) ** 2
            elif lay is not None:
                K = [apply_matrix(psi, n, np.asarray(pops[c].gate.generator), pops[c].qubits)[0]
                     for c in lay.columns]
                mean = [np.real(np.vdot(psi[0], k)) for k in K]
                for a, ca in enumerate(lay.columns):
                    for b, cb in enumerate(lay.columns):
                        if approx == "diag" and a != b:
                            continue
                        g[pos[ca], pos[cb]] = np.real(np.vdot(K[a], K[b])) - mean[a] * mean[b]
            psi = apply_gate(psi, n, op.gate, op.qubits, np.array([phi[col]]))
        else:
            psi = apply_gate(psi, n, op.gate, op.qubits)
    return g


def _overlap_plan(circuit, phi, columns):
    """Points of the fidelity Hessian, g = -1/2 d_i d_j |<psi(phi)|psi(phi + x)>|^2 at x = 0
    (Mari, Bromley and Killoran 2021); the point x = 0 needs no circuit (the fidelity is 1)."""
    plan = _build_plan(circuit, phi, columns, (2,))
    origin = [p for p in range(plan.n_points)
              if not plan.deltas[p].any() and not (plan.inserts and plan.inserts[p])]
    return plan, origin


def metric_tensor(circuit, theta, approx=None) -> np.ndarray:
    """The Fubini-Study metric tensor of the circuit's output state, shape (m, m).

    ``g_ij = Re(<d_i psi|d_j psi> - <d_i psi|psi><psi|d_j psi>)`` in the parameters theta.

    Parameters
    ----------
    circuit : Circuit
    theta : array_like, shape (n_params,)
    approx : None, "block-diag" or "diag"
        None: exact, from the state derivatives (generator insertion on the simulator).
        "block-diag": the blocks of the `layers`, as covariances of the layer's generators in
        the state before the layer, ``<K_i K_j> - <K_i><K_j>``; entries between layers are
        zero (Stokes, Izaac, Killoran and Carleo, Quantum 4, 269 (2020)). "diag": variances
        only.

    Returns
    -------
    ndarray (m, m)
        The metric in gate-angle space mapped by the chain rule, ``A.T g_phi A``.

    Notes
    -----
    What a device would run is recorded in the active `qgradlib.Ledger` (no shots are taken
    here: the values are exact simulations):

    - exact: the overlap circuits ``U(phi)^dagger U(phi + x)`` of the fidelity Hessian,
      each measured once in the computational basis (the probability of all zeros): for
      two-term columns ``2 G**2`` circuits for G columns (purpose ``"overlap"``);
    - "block-diag": one circuit per layer (the circuit up to the layer), measured in every
      basis of ``Layer.settings`` (the qubit-wise commuting groups of the words of ``K_i``
      and ``K_i K_j``) (purpose ``"metric"``);
    - "diag": the same circuits in the bases of ``Layer.diag_settings``.

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> c = qg.Circuit(1).ry(0).rz(0)
    >>> metric_tensor(c, np.array([0.7, 0.1])).round(6).tolist() == \\
    ...     [[0.25, 0.0], [0.0, round(np.sin(0.7) ** 2 / 4, 6)]]
    True
    """
    if approx not in (None, "block-diag", "diag"):
        raise ValueError(f"approx must be None, 'block-diag' or 'diag'; got {approx!r}")
    theta, phi, A = _prepare(circuit, theta)
    spec = _spec(circuit, "probs")
    columns = spec.columns
    Ac = A[list(columns)] if columns else np.zeros((0, A.shape[1]))
    if approx is None:
        g = _exact_metric_phi(circuit, phi, columns)
        plan, origin = _overlap_plan(circuit, phi, columns)
        count = plan.n_points - len(origin)
        if count:
            _ledger.record(count, 1, 0, {"overlap": count})
    else:
        lays = layers(circuit)
        g = _layer_metric_phi(circuit, phi, columns, lays, approx)
        for lay in lays:
            s = lay.n_settings if approx == "block-diag" else lay.n_diag_settings
            _ledger.record(1, s, 0, {"metric": 1})
    return Ac.T @ g @ Ac


def _overlap_metric(circuit, theta):
    """The exact metric from the overlap circuits a device would run (cross-check)."""
    theta, phi, A = _prepare(circuit, theta)
    columns = _spec(circuit, "probs").columns
    plan, origin = _overlap_plan(circuit, phi, columns)
    psi0 = np.asarray(_state_derivatives(circuit, phi, ())[0])
    spec = _spec(circuit, "expect", observables=(Observable.from_matrix(np.outer(psi0, psi0.conj())),))
    keep = [p for p in range(plan.n_points) if p not in origin]
    vals = np.ones((plan.n_points, 1))
    if keep:
        ins = None if plan.inserts is None else [plan.inserts[p] for p in keep]
        vals[keep] = np.asarray(evaluate(phi[None, :] + plan.deltas[keep], spec, ins, "overlap"))
    return -0.5 * _tensor(plan, vals, columns, A, 2)[0]


# -- Fisher information -------------------------------------------------------------------
def fisher_information(circuit, theta, kind="classical", qubits=None, *, tol=1e-12,
                       memory=None) -> np.ndarray:
    """Fisher information of the parameters, shape (m, m).

    Parameters
    ----------
    circuit : Circuit
    theta : array_like, shape (n_params,)
    kind : {"classical", "quantum"}
        "classical": of the distribution of computational-basis outcomes on ``qubits``,
        ``F_ij = sum_x d_i p_x d_j p_x / p_x``, with the derivatives of the probabilities
        from one merged shift plan (recorded in the ledger). "quantum": ``4 g`` with ``g``
        the exact `metric_tensor` (pure states; Meyer, Quantum 5, 539 (2021)).
    qubits : sequence of int, optional
        Measured qubits for the classical kind (default: all).
    tol : float
        Outcomes with ``p_x <= tol`` are left out of the sum (0/0 is taken as 0, the usual
        convention). At parameters where a probability vanishes the classical Fisher
        information can be discontinuous; this is a property of the quantity, not of the
        method.

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> c = qg.Circuit(1).ry(0)
    >>> float(fisher_information(c, np.array([0.8])).round(12)[0, 0])
    1.0
    """
    if kind not in ("classical", "quantum"):
        raise ValueError(f"kind must be 'classical' or 'quantum'; got {kind!r}")
    if kind == "quantum":
        if qubits is not None:
            raise ValueError("qubits applies to kind='classical'; the quantum Fisher information "
                             "here is that of the whole (pure) output state")
        return 4.0 * metric_tensor(circuit, theta)
    if isinstance(tol, bool) or not isinstance(tol, (int, float)) or not 0 <= tol < 1:
        raise ValueError(f"tol must be a number in [0, 1); got {tol!r}")
    theta, phi, A = _prepare(circuit, theta)
    spec = _spec(circuit, "probs", qubits=_check_qubits(qubits, circuit.n_qubits),
                 memory_budget=memory)
    plan = _build_plan(circuit, phi, spec.columns, (0, 1))
    vals, _ = _run_plan(plan, spec, phi)
    p = np.clip(_tensor(plan, vals, spec.columns, A, 0), 0.0, None)
    J = _tensor(plan, vals, spec.columns, A, 1)          # (outcomes, m)
    keep = p > tol
    return (J[keep].T / p[keep]) @ J[keep]
