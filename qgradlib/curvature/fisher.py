"""Fisher information of the parameters: classical (of measured outcomes) or quantum (4 g).

Examples
--------
>>> import numpy as np
>>> import qgradlib as qg
>>> float(qg.curvature.fisher_information(qg.Circuit(1).ry(0), np.array([0.3])).round(12)[0, 0])
1.0
"""
from __future__ import annotations

import numpy as np

from ..evaluation.expectation import _check_qubits, _spec
from ..rules.higher_plans import build_plan, tensor
from ..shots.estimation import TensorEstimate, check_shots
from .execute import prepare, run_plan
from .metric import metric_tensor, refuse_noise

__all__ = ["fisher_information"]


def fisher_information(circuit, theta, kind="classical", qubits=None, *, shots=None, seed=None,
                       tol=1e-12, memory=None, executor=None, chunk=None):
    """Fisher information of the parameters, shape (m, m).

    Parameters
    ----------
    circuit : Circuit
    theta : array_like, shape (n_params,)
    kind : {"classical", "quantum"}
        "classical": of the distribution of computational-basis outcomes on ``qubits``,
        ``F_ij = sum_x d_i p_x d_j p_x / p_x``, with the derivatives of the probabilities
        from one merged shift plan (recorded in the ledger). "quantum": ``4 g`` with ``g``
        the exact `metric_tensor` (pure states; Meyer, Quantum 5, 539 (2021)); refused for
        a circuit with noise channels, whose classical kind is available (the density-matrix
        path).
    qubits : sequence of int, optional
        Measured qubits for the classical kind (default: all).
    shots : int >= 2, optional
        Estimate from samples as a device would, ``shots`` per circuit. Classical: every
        point of the shift plan (the value point and the shifted circuits) is sampled, and
        ``F`` is computed from the outcome frequencies and their shift-rule derivatives (a
        plug-in estimate: consistent, with a bias of order ``1 / shots`` from the division by
        sampled probabilities; its standard errors are first order, the delta method over the
        multinomial frequencies). Quantum: ``4 g`` with ``g`` the full metric estimated from
        sampled overlap circuits (unbiased; see `metric_tensor`).
    seed : int or numpy.random.Generator, optional
    tol : float
        Outcomes with ``p_x <= tol`` are left out of the sum (0/0 is taken as 0, the usual
        convention). At parameters where a probability vanishes the classical Fisher
        information can be discontinuous; this is a property of the quantity, not of the
        method.
    memory : int, optional
        Bytes the engine may use for one chunk of the batch.
    executor, chunk : optional
        As in `hessian` (for "quantum", as in `metric_tensor`).

    Returns
    -------
    ndarray (m, m), or TensorEstimate with ``shots``

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> c = qg.Circuit(1).ry(0)
    >>> float(fisher_information(c, np.array([0.8])).round(12)[0, 0])
    1.0
    >>> est = fisher_information(c, np.array([0.8]), shots=4000, seed=2)
    >>> est.circuits, est.shots                      # the value point and two shifts
    (3, 12000)
    >>> bool(abs(est.value[0, 0] - 1.0) < 5 * est.standard_error[0, 0])
    True
    """
    if kind not in ("classical", "quantum"):
        raise ValueError(f"kind must be 'classical' or 'quantum'; got {kind!r}")
    if kind == "quantum":
        refuse_noise(circuit, "fisher_information(kind='quantum')")
        if qubits is not None:
            raise ValueError("qubits applies to kind='classical'; the quantum Fisher information "
                             "here is that of the whole (pure) output state")
        g = metric_tensor(circuit, theta, shots=shots, seed=seed, executor=executor, chunk=chunk)
        if shots is None:
            return 4.0 * g
        return TensorEstimate(4.0 * g.value, 4.0 * g.standard_error, g.executions, g.shots,
                              g.circuits)
    if isinstance(tol, bool) or not isinstance(tol, (int, float)) or not 0 <= tol < 1:
        raise ValueError(f"tol must be a number in [0, 1); got {tol!r}")
    theta, phi, A = prepare(circuit, theta)
    spec = _spec(circuit, "probs", qubits=_check_qubits(qubits, circuit.n_qubits),
                 shots=None if shots is None else check_shots(shots), seed=seed,
                 memory_budget=memory, executor=executor, chunk=chunk)
    plan = build_plan(circuit, phi, spec.columns, (0, 1), shots=spec.shots, rng=spec.rng)
    vals, book = run_plan(plan, spec, phi)
    if shots is not None:
        F, var = _from_frequencies(plan, vals, spec.columns, A, spec.shots, tol)
        return TensorEstimate(F, np.sqrt(var), book.executions, book.shots, book.circuits)
    p = np.clip(tensor(plan, vals, spec.columns, A, 0), 0.0, None)
    J = tensor(plan, vals, spec.columns, A, 1)          # (outcomes, m)
    keep = p > tol
    return (J[keep].T / p[keep]) @ J[keep]


def _from_frequencies(plan, freq, columns, A, shots, tol):
    """The plug-in classical Fisher information from sampled outcome frequencies at the
    plan's points (P, X), and its delta-method variance."""
    P = plan.n_points
    eye = np.eye(P)
    W0 = tensor(plan, eye, columns, A, 0)               # (P,): weight of each point in p
    W1 = tensor(plan, eye, columns, A, 1)               # (P, m): ... in the derivatives
    p = np.clip(W0 @ freq, 0.0, None)                   # (X,)
    J = np.einsum("ui,ux->ix", W1, freq)                # (m, X)
    keep = p > tol
    r = J[:, keep] / p[keep]                            # d_i p_x / p_x
    F = r @ J[:, keep].T
    # dF_ij / d freq_ux: one point's frequencies, a multinomial sample of ``shots``
    c = np.zeros((P, freq.shape[1], F.shape[0], F.shape[0]))
    c[:, keep] = (np.einsum("ui,jx->uxij", W1, r) + np.einsum("uj,ix->uxij", W1, r)
                  - np.einsum("u,ix,jx->uxij", W0, r, r))
    first = np.einsum("uxij,ux->uij", c, freq)
    second = np.einsum("uxij,ux->uij", c ** 2, freq)
    return F, np.maximum(np.sum(second - first ** 2, axis=0) / (shots - 1), 0.0)
