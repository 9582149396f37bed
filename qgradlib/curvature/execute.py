"""Run a plan of shifted points as one batch through the evaluation layer, with its ledger."""
from __future__ import annotations

import numpy as np

from ..circuits.circuit import Circuit, check_theta
from ..evaluation import ledger as _ledger
from ..evaluation.expectation import evaluate

__all__ = ["prepare", "run_plan"]


def prepare(circuit, theta, name="theta"):
    if not isinstance(circuit, Circuit):
        raise TypeError(f"circuit must be a qgradlib Circuit; got {type(circuit).__name__}")
    theta = np.asarray(check_theta(circuit, theta), dtype=float)
    if theta.ndim != 1:
        raise ValueError(f"{name} must be one parameter vector of shape ({circuit.n_params},); "
                         f"got shape {theta.shape} (call once per point for a batch)")
    phi = np.asarray(circuit.angles(theta), dtype=float)
    return theta, phi, circuit.angle_map()[0]


def run_plan(plan, spec, phi):
    """Evaluate the plan's points in one batch; returns values (P, K) and the ledger."""
    with _ledger.Ledger() as book:
        vals = evaluate(phi[None, :] + plan.deltas, spec, plan.inserts, plan.purposes)
    return np.asarray(vals), book
