"""Fisher information of the parameters: classical (of measured outcomes) or quantum (4 g).

Examples
--------
>>> import numpy as np
>>> import qgradlib as qg
>>> float(qg.curvature.fisher_information(qg.Circuit(1).ry(0), np.array([0.3])).round(12)[0, 0])
1.0
"""
from __future__ import annotations

from collections import Counter

import numpy as np

from ..evaluation import ledger as _ledger
from ..evaluation.expectation import _check_qubits, _spec
from ..rules.higher_plans import build_plan, tensor
from .execute import prepare, run_plan
from .metric import metric_tensor, refuse_noise, state_and_derivatives

__all__ = ["fisher_information"]


def fisher_information(circuit, theta, kind="classical", qubits=None, *, tol=None,
                       memory=None, executor=None, chunk=None, timeout=None) -> np.ndarray:
    """Fisher information of the parameters, shape (m, m).

    Parameters
    ----------
    circuit : Circuit
    theta : array_like, shape (n_params,)
    kind : {"classical", "quantum"}
        "classical": of the distribution of computational-basis outcomes on ``qubits``,
        ``F_ij = sum_x d_i p_x d_j p_x / p_x = 4 sum_x d_i sqrt(p_x) d_j sqrt(p_x)``. A device
        would estimate the probabilities and their derivatives from one merged shift plan:
        that plan's circuits are what the ledger records. The simulator computes the value
        from the exact amplitudes and their derivatives instead, ``d p_x = 2 Re(conj(psi_x)
        d psi_x)`` (summed over the unmeasured qubits), whose ratio stays accurate where
        ``p_x`` is tiny: ``(d p_x)**2 / p_x`` has a finite limit as ``p_x -> 0`` (at most
        ``4 |d psi_x|**2``), which differences of shifted probabilities cannot resolve. A
        circuit with noise runs the shift plan on the density-matrix path (no amplitudes).
        "quantum": ``4 g`` with ``g``
        the exact `metric_tensor` (pure states; Meyer, Quantum 5, 539 (2021)); refused for
        a circuit with noise channels, whose classical kind is available (the density-matrix
        path).
    qubits : sequence of int, optional
        Measured qubits for the classical kind (default: all).
    tol : float
        Outcomes with ``p_x <= tol`` are left out of the sum (default 0: only outcomes of
        probability exactly zero, where 0/0 is taken as 0, the usual convention; the noisy
        path's probabilities carry rounding, so there outcomes below 1e-12 are left out). At
        parameters where a probability vanishes the classical Fisher information can be
        discontinuous (for RY it is 1 for every angle but 0 at 0); this is a property of the
        quantity, not of the method.
    memory : int, optional
        Bytes the engine may use for one chunk of the batch.
    executor, chunk, timeout : optional
        As in `hessian` (for "quantum", as in `metric_tensor`).

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
        refuse_noise(circuit, "fisher_information(kind='quantum')")
        if qubits is not None:
            raise ValueError("qubits applies to kind='classical'; the quantum Fisher information "
                             "here is that of the whole (pure) output state")
        return 4.0 * metric_tensor(circuit, theta, executor=executor, chunk=chunk, timeout=timeout)
    if tol is not None and (isinstance(tol, bool) or not isinstance(tol, (int, float))
                            or not 0 <= tol < 1):
        raise ValueError(f"tol must be a number in [0, 1) or None; got {tol!r}")
    theta, phi, A = prepare(circuit, theta)
    spec = _spec(circuit, "probs", qubits=_check_qubits(qubits, circuit.n_qubits),
                 memory_budget=memory, executor=executor, chunk=chunk, timeout=timeout)
    plan = build_plan(circuit, phi, spec.columns, (0, 1))
    if circuit.has_noise:
        vals, _ = run_plan(plan, spec, phi)
        p = np.clip(tensor(plan, vals, spec.columns, A, 0), 0.0, None)
        J = tensor(plan, vals, spec.columns, A, 1)          # (outcomes, m)
        keep = p > (1e-12 if tol is None else tol)
        return (J[keep].T / p[keep]) @ J[keep]
    # what a device would run for the probabilities and their derivatives
    _ledger.record(plan.n_points, 1, 0, Counter(plan.purposes))
    psi, D = state_and_derivatives(circuit, phi, spec.columns, spec.executor, spec.chunk, spec.timeout)
    Ac = A[list(spec.columns)] if spec.columns else np.zeros((0, A.shape[1]))
    dpsi = Ac.T @ D                                         # (m, d): along theta
    n = circuit.n_qubits
    p = _marginal(np.abs(psi) ** 2, n, spec.qubits)
    dp = _marginal(2.0 * np.real(np.conj(psi) * dpsi), n, spec.qubits)   # (m, outcomes)
    keep = p > (0.0 if tol is None else tol)
    return (dp[:, keep] / p[keep]) @ dp[:, keep].T


def _marginal(v, n, qubits):
    """Sums of ``v`` (..., 2**n) over the unmeasured qubits, outcomes ordered as ``qubits``."""
    if qubits is None:
        return v
    lead = v.shape[:-1]
    t = v.reshape(lead + (2,) * n)
    k = len(lead)
    t = t.sum(axis=tuple(k + q for q in range(n) if q not in qubits))
    kept = sorted(qubits)
    t = np.transpose(t, tuple(range(k)) + tuple(k + kept.index(q) for q in qubits))
    return t.reshape(lead + (-1,))
