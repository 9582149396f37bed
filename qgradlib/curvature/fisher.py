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
from .execute import prepare, run_plan
from .metric import metric_tensor, refuse_noise

__all__ = ["fisher_information"]


def fisher_information(circuit, theta, kind="classical", qubits=None, *, tol=1e-12,
                       memory=None, executor=None, chunk=None) -> np.ndarray:
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
    tol : float
        Outcomes with ``p_x <= tol`` are left out of the sum (0/0 is taken as 0, the usual
        convention). At parameters where a probability vanishes the classical Fisher
        information can be discontinuous; this is a property of the quantity, not of the
        method.
    memory : int, optional
        Bytes the engine may use for one chunk of the batch.
    executor, chunk : optional
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
        return 4.0 * metric_tensor(circuit, theta, executor=executor, chunk=chunk)
    if isinstance(tol, bool) or not isinstance(tol, (int, float)) or not 0 <= tol < 1:
        raise ValueError(f"tol must be a number in [0, 1); got {tol!r}")
    theta, phi, A = prepare(circuit, theta)
    spec = _spec(circuit, "probs", qubits=_check_qubits(qubits, circuit.n_qubits),
                 memory_budget=memory, executor=executor, chunk=chunk)
    plan = build_plan(circuit, phi, spec.columns, (0, 1))
    vals, _ = run_plan(plan, spec, phi)
    p = np.clip(tensor(plan, vals, spec.columns, A, 0), 0.0, None)
    J = tensor(plan, vals, spec.columns, A, 1)          # (outcomes, m)
    keep = p > tol
    return (J[keep].T / p[keep]) @ J[keep]
