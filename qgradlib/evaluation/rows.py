"""Measure rows of gate angles here, in this process: chunks sized by memory, then readout.

Both the evaluation primitive and the executors (`qgradlib.evaluation.distribute`) call
`measure_rows_here`; it is the last step before the engine.
"""
from __future__ import annotations

import numpy as np

from ..engine import memory
from ..engine.branch import run_branched, run_prefix_tree
from ..engine.density import density_expectations, marginal, run_density
from ..engine.measure import expectations
from ..engine.measurement import apply_readout, measure, outcome_distribution, point_generators
from ..engine.statevector import run

__all__ = ["measure_rows_here"]


def measure_rows_here(phi, spec, inserts, errors=False, keep=False):
    """Values (P, K) at the rows of ``phi``; with ``errors``, also their variances (P, K);
    with ``keep``, also the final states (or None when they took more than one chunk)."""
    n = spec.circuit.n_qubits
    noisy = spec.circuit.has_noise
    per_row = 3 * 16 * 2 ** (2 * n if noisy else n)
    budget = spec.memory if spec.memory is not None else max(per_row, memory.available_bytes() // 4)
    chunk = max(1, min(phi.shape[0], budget // per_row))
    out = np.empty((phi.shape[0], spec.n_out))
    var = np.zeros_like(out)
    for lo in range(0, phi.shape[0], chunk):
        hi = min(lo + chunk, phi.shape[0])
        ins = None if inserts is None else inserts[lo:hi]
        if noisy:
            states = run_density(spec.circuit, phi[lo:hi], ins)
        else:
            # rows that share a prefix of angles (the points of a shift plan) run as branches
            # of one trunk; a device would still run each circuit (the ledger counted them)
            states = run_branched(spec.circuit, phi[lo:hi], ins, fuse=spec.fuse)
            if states is None and ins is None:
                # rows of many data points: a tree of shared prefixes, one per point
                states = run_prefix_tree(spec.circuit, phi[lo:hi], fuse=spec.fuse)
            if states is None:
                states = run(spec.circuit, phi[lo:hi], ins, fuse=spec.fuse)
        out[lo:hi], var[lo:hi] = _readout(states, spec, noisy)
    res = (out, var) if errors else out
    if keep:
        return res, (states if chunk >= phi.shape[0] else None)
    return res


def _readout(states, spec, noisy):
    n = spec.circuit.n_qubits
    # per-point streams (PointSeeds) follow the rows in the order the engine reads them out
    rng = point_generators(spec.rng, states.shape[0]) if spec.shots is not None else spec.rng
    if spec.kind == "expect":
        if spec.shots is None and spec.readout is None:
            # the exact value needs no settings: index arithmetic on the state or on rho
            vals = (density_expectations if noisy else expectations)(states, n, spec.observables)
            return vals, np.zeros_like(vals)
        return measure(states, spec.plan, spec.shots, rng, density=noisy,
                       allocation=spec.allocation, readout=spec.readout)
    p = marginal(apply_readout(outcome_distribution(states, n, density=noisy), n, spec.readout),
                 n, spec.qubits)
    if spec.shots is not None:
        gens = rng if isinstance(rng, list) else [rng] * len(p)
        p = np.stack([g.multinomial(spec.shots, r / r.sum()) for g, r in zip(gens, p)]) / spec.shots
    return p, np.zeros_like(p)
