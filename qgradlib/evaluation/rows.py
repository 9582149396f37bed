"""Measure rows of gate angles here, in this process: chunks sized by memory, then readout.

Both the evaluation primitive and the executors (`qgradlib.evaluation.distribute`) call
`measure_rows_here`; it is the last step before the engine.
"""
from __future__ import annotations

import numpy as np

from ..engine import memory
from ..engine.kernels import state_dtype
from ..engine.branch import branched_states, run_branched, run_prefix_tree
from ..engine.density import density_expectations, density_states, marginal, run_density
from ..engine.measure import apply_observables, expectation_scratch, expectations, observable_scratch
from ..engine.measurement import (apply_readout, measure, measure_scratch, outcome_distribution,
                                  point_generators, probability_scratch)
from ..engine.statevector import run, run_states
from ..engine.threads import engine_threads
from ..engine import growing, heisenberg, scratch, sides, small

# at or below this many qubits, rows of small circuits run as one batch, not as branches
BATCH_QUBITS = 8
# ... unless rows x operations reach this: long circuits with many rows branch after all (a
# deep narrow circuit's shifted rows skip about half of its gates)
BRANCH_WORK = 2 ** 20

# rows x operations from which a shift plan's rows of a small circuit take the carried rest of
# the circuit (`qgradlib.engine.heisenberg`); below, setting it up costs more than the lean batch
CARRY_WORK = 2 ** 14

__all__ = ["measure_rows_here", "peak_states", "guard_rows"]


def peak_states(spec, rows: int) -> float:
    """States (density matrices for a noisy circuit) that `measure_rows_here` holds at once
    on a chunk of ``rows`` rows: the engine's run, or the final states with the readout's
    scratch, whichever is larger. Each term is the estimate of the engine function that
    allocates it."""
    n = spec.circuit.n_qubits
    noisy = spec.circuit.has_noise
    if spec.kind != "expect":
        scratch = probability_scratch(noisy)
    elif spec.shots is not None or spec.readout is not None:
        scratch = measure_scratch(n, spec.plan, density=noisy)
    else:
        scratch = 0.0 if noisy else expectation_scratch(n, spec.observables)
    engine = rows * density_states() if noisy else (
        branched_states(rows) if rows > 1 else run_states(spec.circuit))
    return max(engine, rows * (1.0 + scratch))


def _amplitude_bytes(spec):
    """Bytes of one amplitude of the states this spec runs (complex128 or complex64)."""
    return state_dtype(spec.precision).itemsize


def guard_rows(spec, rows: int, what: str = "evaluating") -> int:
    """Refuse (`qgradlib.engine.memory.StateTooLarge`) a chunk of ``rows`` rows that cannot fit."""
    c = spec.circuit
    return memory.guard_states(c.n_qubits, peak_states(spec, rows), f"{what} {rows} circuit(s)",
                               _amplitude_bytes(spec), density=c.has_noise)


def _chunk(spec, total):
    """Rows per chunk: as many as fit in ``spec.memory`` (default a quarter of what is
    available), at least one, and never more than fit in what is available."""
    per_row = memory.state_bytes(spec.circuit.n_qubits, peak_states(spec, 2) / 2,
                                 _amplitude_bytes(spec), density=spec.circuit.has_noise) - memory.OVERHEAD
    # a batch far below what was available a moment ago needs no new reading of the limits
    avail = memory.recent_available(per_row * total + memory.OVERHEAD)
    budget = min(avail, spec.memory) if spec.memory is not None else avail // 4
    chunk = max(1, min(total, (budget - memory.OVERHEAD) // max(per_row, 1)))
    guard_rows(spec, chunk)
    return chunk


def measure_rows_here(phi, spec, inserts, errors=False, keep=False):
    """Values (P, K) at the rows of ``phi``; with ``errors``, also their variances (P, K);
    with ``keep``, also ``[final states, O psi or None]`` for the adjoint method (None when
    the states took more than one chunk; O psi for one exact observable, see `_observed`)."""
    with engine_threads(spec.circuit.n_qubits):
        return _measure_rows(phi, spec, inserts, errors, keep)


def _one_column(phi, spec, inserts, keep, chunk):
    """`qgradlib.engine.heisenberg.deviations` of rows that each differ from one reference
    point in one angle (a first-order shift plan), when their states are to come from the
    carried rest of the circuit; None where that does not apply: only exact expectation
    values of a small pure-state circuit without inserts, in double precision and fused, when
    it costs less than the branches. Its fixed part (the reference's matrices) must fit in a
    quarter of what is available, as a chunk of rows does by default; the rows themselves
    follow the chunks of ``spec.memory``."""
    c = spec.circuit
    P, G = phi.shape
    if (keep or inserts is not None or c.has_noise or spec.kind != "expect"
            or spec.shots is not None or spec.readout is not None or spec.precision != "double"
            or not spec.fuse or P < 2 or G == 0 or P * len(c) < CARRY_WORK
            # not even if every row branched at the first gate
            or not heisenberg.worthwhile(c.n_qubits, np.zeros(P), G)
            or not small.eligible(c)):
        return None
    dev = heisenberg.deviations(phi)
    if dev is None or not heisenberg.worthwhile(c.n_qubits, dev[1], G):
        return None
    need = heisenberg.peak_bytes(c.n_qubits, chunk, G) + heisenberg.layout_bytes(c.n_qubits, G)
    if need > memory.recent_available(need) // 4:
        return None
    return dev


def _measure_rows(phi, spec, inserts, errors, keep):
    noisy = spec.circuit.has_noise
    chunk = _chunk(spec, phi.shape[0])
    # a shift plan's rows on a few qubits: the rest of the circuit after each shifted gate
    # as one carried matrix, instead of a branch per row (a device still runs every row);
    # every chunk against the same reference, so chunks change no number
    carried = _one_column(phi, spec, inserts, keep, chunk)
    out = np.empty((phi.shape[0], spec.n_out))
    var = np.zeros_like(out)
    states = None
    for lo in range(0, phi.shape[0], chunk):
        hi = min(lo + chunk, phi.shape[0])
        ins = None if inserts is None else inserts[lo:hi]
        states = None           # the last chunk's states go before the next chunk's come
        if carried is not None:
            states = heisenberg.one_column_states(spec.circuit, phi[lo:hi],
                                                  (carried[0], carried[1][lo:hi]))
        elif noisy:
            states = run_density(spec.circuit, phi[lo:hi], ins)
        else:
            # rows that share a prefix of angles (the points of a shift plan) run as branches
            # of one trunk; a device would still run each circuit (the ledger counted them).
            # Small states run as one batch instead: there the trunk's bookkeeping costs more
            # than the gates it saves.
            dtype = state_dtype(spec.precision)
            if (spec.fuse and ins is None and dtype == np.complex128 and hi - lo >= 2
                    and (hi - lo > 2 and spec.circuit.n_qubits <= BATCH_QUBITS
                         and small.eligible(spec.circuit) or sides.eligible(spec.circuit))):
                # a shift plan's rows: a batch that grows a row where each leaves the
                # reference (None for other rows); exact values need no row's state
                if (not keep and not noisy and spec.kind == "expect" and spec.shots is None
                        and spec.readout is None):
                    vals = growing.grown_values(spec.circuit, phi[lo:hi], spec.observables)
                    if vals is not None:
                        out[lo:hi], var[lo:hi] = vals, 0.0
                        continue
                states = growing.run_grown(spec.circuit, phi[lo:hi])
            lean = (spec.fuse and ins is None and spec.circuit.n_qubits <= BATCH_QUBITS
                    and (hi - lo) * len(spec.circuit) < BRANCH_WORK
                    and small.eligible(spec.circuit))
            if not lean and states is None:
                states = run_branched(spec.circuit, phi[lo:hi], ins, fuse=spec.fuse, dtype=dtype)
            if states is None and ins is None and (spec.circuit.n_inputs or not lean):
                # rows of many data points: a tree of shared prefixes, one per point
                states = run_prefix_tree(spec.circuit, phi[lo:hi], fuse=spec.fuse, dtype=dtype)
            if states is None:
                states = run(spec.circuit, phi[lo:hi], ins, fuse=spec.fuse, dtype=dtype)
        applied = _observed(states, spec) if keep and chunk >= phi.shape[0] else None
        if applied is None:
            out[lo:hi], var[lo:hi] = _readout(states, spec, noisy)
        else:
            out[lo:hi], var[lo:hi] = _dot_rows(states, applied)[:, None], 0.0
    res = (out, var) if errors else out
    if keep:
        return res, (None if chunk < phi.shape[0] else [states, applied])
    return res


def _observed(states, spec):
    """``O psi`` of kept final states of one exact observable, or None (several observables,
    shots, readout error, or no room for it): the adjoint method's forward value is then
    ``<psi|O psi>``, and its backward pass starts from the same ``O psi`` instead of applying
    the observable again. A value alone (no VJP after it) pays one application of the
    observable instead of the readout: about the same on 16 qubits for an Ising-type sum
    (1.0 ms against 1.1 ms, development readings)."""
    if (spec.kind != "expect" or spec.n_out != 1 or spec.shots is not None
            or spec.readout is not None or spec.circuit.has_noise):
        return None
    n, P = spec.circuit.n_qubits, states.shape[0]
    try:
        # the kept O psi, the observable's scratch state and what it allocates beyond that
        memory.guard_states(n, P * (2.0 + observable_scratch(n, spec.observables)),
                            "keeping O psi for the adjoint gradient", states.dtype.itemsize)
    except memory.StateTooLarge:
        return None                  # the readout needs less: the backward pass applies O
    work = scratch.take(states.shape, states.dtype)
    applied = apply_observables(states, n, spec.observables, None, np.empty_like(states), work)
    scratch.give(work)
    return applied


def _dot_rows(psi, phi):
    """``Re <psi_b|phi_b>`` for every row, summed in float64 (float views: the real and
    imaginary parts of an amplitude are neighbours in memory)."""
    f = psi.real.dtype
    return np.einsum("bi,bi->b", psi.view(f), phi.view(f), dtype=np.float64)


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
