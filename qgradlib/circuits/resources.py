"""What a circuit costs: qubits, depth, gate counts, and the circuits its derivatives need.

The counts of shifted circuits come from the shift plans of `qgradlib.rules` (the plans the
evaluation layer runs), not from a formula, so custom rules, shared parameters and
Hamiltonian gates are counted as they would be run.

Examples
--------
>>> import qgradlib as qg
>>> r = qg.Circuit(2).ry(0).ry(1).cnot(0, 1).resources()
>>> r.depth, r.two_qubit, r.gradient_circuits, r.hessian_circuits
(2, 1, 4, 9)
"""
from __future__ import annotations

from collections import Counter
from dataclasses import dataclass

import numpy as np

from ..rules.higher_plans import build_plan
from .drawing import layers

__all__ = ["Resources", "resources"]


@dataclass(frozen=True)
class Resources:
    """The resources of a circuit.

    Attributes
    ----------
    n_qubits : int
    depth : int
        Layers of operations, each operation placed after the last one on any of its qubits.
    counts : dict
        Gates by name: number of operations (channels not included).
    two_qubit : int
        Gates on two qubits.
    n_params : int
        Trainable parameters (length of theta).
    channels : int
        Noise-channel operations.
    gradient_circuits : int
        Distinct shifted circuits one gradient needs (the value not included).
    hessian_circuits : int
        Distinct circuits of the merged plan for value, gradient and Hessian together
        (what `qgradlib.curvature.hessian` runs).
    """

    n_qubits: int
    depth: int
    counts: dict
    two_qubit: int
    n_params: int
    channels: int
    gradient_circuits: int
    hessian_circuits: int


def resources(circuit, theta=None) -> Resources:
    """The `Resources` of ``circuit``; ``theta`` (default zeros) matters only for
    Hamiltonian gates, whose quadrature depends on the angle."""
    ops = circuit.operations
    gates = [op for op in ops if op.gate.kind != "channel"]
    theta = np.zeros(circuit.n_params) if theta is None else theta
    inputs = np.zeros(circuit.n_inputs) if circuit.n_inputs else None
    phi = np.asarray(circuit.angles(theta, inputs), dtype=float)
    columns = [k for k, op in enumerate(circuit.parametric_operations)
               if op.param is not None and op.scale != 0.0]
    if columns:
        grad_points = build_plan(circuit, phi, columns, (1,)).n_points
        hess_points = build_plan(circuit, phi, columns, (0, 1, 2)).n_points
    else:
        grad_points, hess_points = 0, 1
    return Resources(
        n_qubits=circuit.n_qubits,
        depth=max(layers(ops), default=-1) + 1,
        counts=dict(Counter(op.gate.name for op in gates)),
        two_qubit=sum(1 for op in gates if len(op.qubits) == 2),
        n_params=circuit.n_params,
        channels=len(ops) - len(gates),
        gradient_circuits=grad_points,
        hessian_circuits=hess_points,
    )
