"""The Fubini-Study metric tensor: full, layerwise and diagonal, and its layers.

Exact: from the state derivatives (generator insertion on the simulator); a device would run
the overlap circuits of the fidelity Hessian, which the ledger records. Block-diagonal and
diagonal: generator covariances layer by layer (Stokes, Izaac, Killoran and Carleo,
Quantum 4, 269 (2020)); a device runs one circuit per layer in a few measurement bases.
"""
from __future__ import annotations

from dataclasses import dataclass
from itertools import product

import numpy as np

from ..evaluation import distribute
from ..evaluation import ledger as _ledger
from ..circuits.circuit import Circuit
from ..engine import apply_matrix, layer_covariances, state_derivatives
from ..evaluation.expectation import _spec, evaluate
from ..rules.higher_plans import build_plan, tensor
from .execute import prepare
from ..engine.measurement import measurement_settings
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


def metric_tensor(circuit, theta, structure="full", *, executor=None, chunk=None) -> np.ndarray:
    """The Fubini-Study metric tensor of the circuit's output state, shape (m, m).

    ``g_ij = Re(<d_i psi|d_j psi> - <d_i psi|psi><psi|d_j psi>)`` in the parameters theta.

    Parameters
    ----------
    circuit : Circuit
    theta : array_like, shape (n_params,)
    structure : {"full", "layerwise", "diagonal"}
        "full": every entry, exact, from the state derivatives (generator insertion on the
        simulator). "layerwise": the blocks of the `layers`, as covariances of the layer's
        generators in the state before the layer, ``<K_i K_j> - <K_i><K_j>``; entries between
        layers are zero (Stokes, Izaac, Killoran and Carleo, Quantum 4, 269 (2020)).
        "diagonal": the generator variances only.
    executor : concurrent.futures.Executor or dask.distributed.Client, optional
        For the full metric: the state derivatives are computed in chunks of columns on it
        (see `qgradlib.evaluation.distribute`). The layerwise and diagonal structures are one
        pass over one state, with nothing to split: they run here.
    chunk : int, optional
        Columns per task on ``executor`` (default: about 4 tasks per worker).

    Returns
    -------
    ndarray (m, m)
        The metric in gate-angle space mapped by the chain rule, ``A.T g_phi A``. With an
        layerwise or diagonal structure, a parameter shared by gates of different layers collects their
        blocks through ``A`` (its diagonal entry sums the gates' variances, scaled).

    Notes
    -----
    What a device would run is recorded in the active `qgradlib.Ledger` (no shots are taken
    here: the values are exact simulations):

    - "full": the overlap circuits ``U(phi)^dagger U(phi + x)`` of the fidelity Hessian,
      each measured once in the computational basis (the probability of all zeros): for
      two-term columns ``2 G**2`` circuits for G columns (purpose ``"overlap"``);
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
    """
    if not isinstance(structure, str) or structure not in STRUCTURES:
        raise ValueError(f"structure must be one of {STRUCTURES}; got {structure!r}")
    refuse_noise(circuit, "metric_tensor")
    theta, phi, A = prepare(circuit, theta)
    spec = _spec(circuit, "probs", executor=executor, chunk=chunk)
    columns = spec.columns
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
