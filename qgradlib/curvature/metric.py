"""The Fubini-Study metric tensor: full, layerwise and diagonal, and its layers.

Full: from the state derivatives (generator insertion on the simulator); a device runs the
overlap circuits of the fidelity Hessian, which the ledger records. Layerwise and diagonal:
generator covariances layer by layer (Stokes, Izaac, Killoran and Carleo, Quantum 4, 269
(2020)); a device runs one circuit per layer in a few measurement bases. With ``shots=`` the
same circuits are sampled and the metric estimated from the samples
(`qgradlib.curvature.sampled_metric`).
"""
from __future__ import annotations

from dataclasses import dataclass
from itertools import product

import numpy as np

from ..evaluation import distribute
from ..evaluation import ledger as _ledger
from ..circuits.circuit import Circuit
from ..engine import (apply_gate, apply_matrix, effective_generator, layer_covariances,
                      state_derivatives, states_before)
from ..evaluation.expectation import _spec, evaluate
from ..rules.higher_plans import build_plan, tensor
from ..shots.estimation import TensorEstimate, check_shots
from .execute import prepare
from .sampled_metric import effective_estimate, layer_estimate, overlap_estimate
from ..engine.measurement import make_rng, measurement_settings
from ..circuits.observables import Observable
from ..circuits.paulis import pauli_matrix

__all__ = ["Layer", "layers", "metric_tensor", "refuse_noise", "STRUCTURES"]

STRUCTURES = ("full", "layerwise", "diagonal")


# -- layers of commuting generators ------------------------------------------------------
@dataclass(frozen=True)
class Layer:
    """A layer of the layerwise metric (see `layers`).

    Attributes
    ----------
    columns : tuple of int
        The gate-angle columns (indices into ``circuit.parametric_operations``) in the layer.
    settings : tuple of str
        Measurement bases a device needs for the layer's generator covariances ("layerwise").
    variance_settings : tuple of str
        Bases for the generator variances alone ("diagonal").
    effective : bool
        True for a Hamiltonian or function gate: its effective generator
        ``K = i (dU/da) U^dagger`` is not a Pauli sum of fixed form and is measured in its own
        eigenbasis (one setting).
    """

    columns: tuple
    settings: tuple = ()
    variance_settings: tuple = ()
    effective: bool = False

    @property
    def n_settings(self) -> int:
        return 1 if self.effective else max(1, len(self.settings))

    @property
    def n_variance_settings(self) -> int:
        return 1 if self.effective else max(1, len(self.variance_settings))


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


def _generator_terms(op, n):
    """The traceless part of the generator of ``op`` as Pauli words on n qubits,
    ``{word: coefficient}`` (the identity part shifts no covariance)."""
    k = op.gate.n_qubits
    G = np.asarray(op.gate.generator)
    terms = {}
    for letters in product(_LETTERS, repeat=k):
        word = "".join(letters)
        if word == "I" * k:
            continue
        c = np.trace(pauli_matrix(word) @ G) / 2 ** k
        if abs(c) > 1e-12:
            full = ["I"] * n
            for q, ch in zip(op.qubits, word):
                full[q] = ch
            terms["".join(full)] = float(np.real(c))
    return terms


_PHASES = {("X", "Y"): 1j, ("Y", "Z"): 1j, ("Z", "X"): 1j,
           ("Y", "X"): -1j, ("Z", "Y"): -1j, ("X", "Z"): -1j}


def _word_product(u, v):
    """``(phase, word)`` with ``u @ v = phase * word`` for Pauli words ``u`` and ``v``."""
    phase, out = 1, []
    for a, b in zip(u, v):
        if a == "I" or b == "I":
            out.append(b if a == "I" else a)
        elif a == b:
            out.append("I")
        else:
            phase *= _PHASES[(a, b)]
            out.append(({"X", "Y", "Z"} - {a, b}).pop())
    return phase, "".join(out)


def _layer_words(terms):
    """The words a layer's estimates read: those of every ``K_a`` and of the products
    ``K_a K_b`` (covariances), and those of ``K_a`` and ``K_a K_a`` (variances alone)."""
    cov = [w for t in terms for w in t]
    var = list(cov)
    for i, ti in enumerate(terms):
        var += [_word_product(a, b)[1] for a in ti for b in ti]
        for tj in terms[i:]:
            cov += [_word_product(a, b)[1] for a in ti for b in tj]
    return cov, var


def _products(terms, diagonal):
    """``(a, b) -> {word: c}``: the Hermitian part of ``K_a K_b`` (``a <= b``; ``a == b`` only
    when ``diagonal``), the real part of the metric's second moment."""
    out = {}
    for a, ta in enumerate(terms):
        for b in range(a, len(terms)):
            if diagonal and a != b:
                continue
            acc = {}
            for w, cw in ta.items():
                for v, cv in terms[b].items():
                    phase, u = _word_product(w, v)
                    acc[u] = acc.get(u, 0.0) + cw * cv * phase
            out[(a, b)] = {u: float(np.real(c)) for u, c in acc.items() if abs(np.real(c)) > 1e-14}
    return out


def _settings(words, n):
    """Qubit-wise commuting settings of ``words`` (sorted first: the same words give the same
    settings in every process, whatever the hash seed)."""
    words = sorted({w for w in words if w != "I" * n})
    if not words:
        return []
    return measurement_settings(Observable({w: 1.0 for w in words}))


def _bases(words, n):
    return tuple(s.basis for s in _settings(words, n))


def layers(circuit) -> tuple:
    """The layers of `metric_tensor`'s layerwise and diagonal structures.

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
            cov, var = _layer_words([_generator_terms(op, n) for _, op in current])
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
def _derivative_task(circuit, phi, columns):
    return state_derivatives(distribute.unpack(circuit), phi, columns)


def _exact_metric_phi(circuit, phi, columns, executor=None, chunk=None):
    if executor is None or not columns:
        psi, D = state_derivatives(circuit, phi, columns)
    else:
        # every task carries psi along and returns the derivative states of its columns
        size = distribute.chunk_size(executor, len(columns), chunk)
        jobs = [((phi, columns[lo:lo + size]), columns[lo:lo + size], phi[None])
                for lo in range(0, len(columns), size)]
        parts = distribute.run_chunks(executor, _derivative_task,
                                      distribute.payload(executor, circuit, "the circuit"), jobs)
        psi, D = parts[0][0], np.concatenate([d for _, d in parts])
    v = D @ psi.conj()                     # <psi|d_i psi>
    return np.real(D.conj() @ D.T) - np.real(np.outer(v.conj(), v))


def _overlap_plan(circuit, phi, columns):
    """Points of the fidelity Hessian, g = -1/2 d_i d_j |<psi(phi)|psi(phi + x)>|^2 at x = 0
    (Mari, Bromley and Killoran 2021); the point x = 0 needs no circuit (the fidelity is 1)."""
    plan = build_plan(circuit, phi, columns, (2,))
    origin = [p for p in range(plan.n_points)
              if not plan.deltas[p].any() and not (plan.inserts and plan.inserts[p])]
    return plan, origin


def refuse_noise(circuit, what):
    """Refuse a circuit with noise channels for a quantity of pure states, saying what is
    available instead."""
    if isinstance(circuit, Circuit) and circuit.has_noise:
        raise ValueError(
            f"{what} is not defined for this circuit: it has noise channels, so its output is a "
            "mixed state, and the Fubini-Study metric (and the quantum Fisher information 4 g "
            "built on it) is defined for pure states. For a noisy circuit use "
            "curvature.fisher_information(circuit, theta, kind='classical'), the classical "
            "Fisher information of its noisy outcome distribution (the density-matrix path), or "
            "drop the channels for the metric of the "
            "ideal circuit")


def metric_tensor(circuit, theta, structure="full", *, shots=None, seed=None, executor=None,
                  chunk=None):
    """The Fubini-Study metric tensor of the circuit's output state, shape (m, m).

    ``g_ij = Re(<d_i psi|d_j psi> - <d_i psi|psi><psi|d_j psi>)`` in the parameters theta.

    Parameters
    ----------
    circuit : Circuit
        Without noise channels: the metric is defined for pure states (a noisy circuit is
        refused; its classical `fisher_information` is available).
    theta : array_like, shape (n_params,)
    structure : {"full", "layerwise", "diagonal"}
        "full": every entry. "layerwise": the blocks of the `layers`, as covariances of the
        layer's generators in the state before the layer, ``<K_i K_j> - <K_i><K_j>``; entries
        between layers are zero (Stokes, Izaac, Killoran and Carleo, Quantum 4, 269 (2020)).
        "diagonal": the generator variances only.
    shots : int >= 2, optional
        Estimate the metric from sampled circuits as a device would (see Notes and
        `qgradlib.curvature.sampled_metric`): ``shots`` per measurement setting of every
        circuit. None: exact values (simulation).
    seed : int or numpy.random.Generator, optional
        Randomness of the shots.
    executor : concurrent.futures.Executor or dask.distributed.Client, optional
        For the exact full metric: the state derivatives are computed in chunks of columns on
        it (see `qgradlib.evaluation.distribute`). The layerwise and diagonal structures are
        one pass over one state, and sampled metrics are drawn here: they run here.
    chunk : int, optional
        Columns per task on ``executor`` (default: about 4 tasks per worker).

    Returns
    -------
    ndarray (m, m), or TensorEstimate with ``shots``
        The metric in gate-angle space mapped by the chain rule, ``A.T g_phi A``. With a
        layerwise or diagonal structure, a parameter shared by gates of different layers
        collects their blocks through ``A`` (its diagonal entry sums the gates' variances,
        scaled). With shots: a `qgradlib.shots.TensorEstimate` (``value``,
        ``standard_error``, ``executions``, ``shots``, ``circuits``); every entry of
        ``value`` is an unbiased estimate.

    Notes
    -----
    What a device runs is recorded in the active `qgradlib.Ledger`, with ``shots`` per
    execution when given (without, the values are exact simulations and no shots are taken):

    - "full": the overlap circuits ``U(phi)^dagger U(phi + x)`` of the fidelity Hessian
      (Mari, Bromley and Killoran, Phys. Rev. A 103, 012405 (2021)), each measured in the
      computational basis for the probability of all zeros: ``2 G**2`` circuits for G
      two-term columns (purpose ``"overlap"``). Exact values come from the state
      derivatives (generator insertion on the simulator);
    - "layerwise": one circuit per layer (the circuit up to the layer), measured in every
      basis of ``Layer.settings`` (the qubit-wise commuting groups of the words of ``K_i``
      and ``K_i K_j``) (purpose ``"metric"``);
    - "diagonal": the same circuits in the bases of ``Layer.variance_settings``.

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> c = qg.Circuit(1).ry(0).rz(0)
    >>> metric_tensor(c, np.array([0.7, 0.1])).round(6).tolist() == \\
    ...     [[0.25, 0.0], [0.0, round(np.sin(0.7) ** 2 / 4, 6)]]
    True
    >>> est = metric_tensor(c, np.array([0.7, 0.1]), "diagonal", shots=1000, seed=1)
    >>> est.executions, est.shots                   # two layers, one setting each
    (2, 2000)
    >>> bool(abs(est.value[1, 1] - np.sin(0.7) ** 2 / 4) < 5 * est.standard_error[1, 1])
    True
    """
    if not isinstance(structure, str) or structure not in STRUCTURES:
        raise ValueError(f"structure must be one of {STRUCTURES}; got {structure!r}")
    refuse_noise(circuit, "metric_tensor")
    theta, phi, A = prepare(circuit, theta)
    spec = _spec(circuit, "probs", executor=executor, chunk=chunk)
    columns = spec.columns
    if shots is not None:
        return _sampled_metric(circuit, phi, A, columns, structure, check_shots(shots),
                               make_rng(seed))
    Ac = A[list(columns)] if columns else np.zeros((0, A.shape[1]))
    if structure == "full":
        g = _exact_metric_phi(circuit, phi, columns, spec.executor, spec.chunk)
        plan, origin = _overlap_plan(circuit, phi, columns)
        count = plan.n_points - len(origin)
        if count:
            _ledger.record(count, 1, 0, {"overlap": count})
    else:
        lays = layers(circuit)
        g = layer_covariances(circuit, phi, columns, lays, diagonal=structure == "diagonal")
        for lay in lays:
            s = lay.n_settings if structure == "layerwise" else lay.n_variance_settings
            _ledger.record(1, s, 0, {"metric": 1})
    return Ac.T @ g @ Ac


def _sampled_metric(circuit, phi, A, columns, structure, shots, rng):
    """The metric estimated from sampled circuits, recorded in the ledger with its shots."""
    m = A.shape[1]
    if structure == "full":
        plan, origin = _overlap_plan(circuit, phi, columns)
        count = plan.n_points - len(origin)
        if count:
            value, var = overlap_estimate(circuit, phi, plan, origin, columns, A, shots, rng)
            _ledger.record(count, 1, shots, {"overlap": count})
        else:
            value, var = np.zeros((m, m)), np.zeros((m, m))
        return TensorEstimate(value, np.sqrt(var), count, count * shots, count)
    n = circuit.n_qubits
    diagonal = structure == "diagonal"
    pops = circuit.parametric_operations
    lays = layers(circuit)
    value, var = np.zeros((m, m)), np.zeros((m, m))
    executions = 0
    for lay, psi in zip(lays, states_before(circuit, phi, [lay.columns[0] for lay in lays])):
        rows = A[list(lay.columns)]
        if lay.effective:
            c = lay.columns[0]
            op = pops[c]
            after = apply_gate(psi[None], n, op.gate, op.qubits, np.array([phi[c]]))[0]
            s2, v = effective_estimate(after, n, effective_generator(op.gate, phi[c]), op.qubits,
                                       shots, rng)
            outer = np.outer(rows[0], rows[0])
            value += s2 * outer
            var += v * outer ** 2
            count = 1
        else:
            terms = [_generator_terms(pops[c], n) for c in lay.columns]
            cov, var_words = _layer_words(terms)
            settings = _settings(var_words if diagonal else cov, n)
            if settings:
                block, v = layer_estimate(psi, n, terms, _products(terms, diagonal), settings,
                                          rows, shots, rng)
                value += block
                var += v
            count = max(1, len(settings))
        _ledger.record(1, count, shots, {"metric": 1})
        executions += count
    return TensorEstimate(value, np.sqrt(var), executions, executions * shots, len(lays))


def _overlap_metric(circuit, theta):
    """The exact metric from the overlap circuits a device would run (cross-check)."""
    theta, phi, A = prepare(circuit, theta)
    columns = _spec(circuit, "probs").columns
    plan, origin = _overlap_plan(circuit, phi, columns)
    psi0 = np.asarray(state_derivatives(circuit, phi, ())[0])
    spec = _spec(circuit, "expect", observables=(Observable.from_matrix(np.outer(psi0, psi0.conj())),))
    keep = [p for p in range(plan.n_points) if p not in origin]
    vals = np.ones((plan.n_points, 1))
    if keep:
        ins = None if plan.inserts is None else [plan.inserts[p] for p in keep]
        vals[keep] = np.asarray(evaluate(phi[None, :] + plan.deltas[keep], spec, ins, "overlap"))
    return -0.5 * tensor(plan, vals, columns, A, 2)[0]
