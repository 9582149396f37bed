"""The demo scenario: bench ring R6.

An invented lab bench, code R6, holds six coupled qubits on a ring. Neighbours
couple through ZZ and every qubit is driven transversally; the lab wants the ring's ground
state prepared by a shallow layered circuit before it books device time. The numbers are
ours (J = 1.0, g = 0.7 in units of the coupling) and describe no real device.

Everything here is simulation: energies and gradients are exact statevector results (or
simulated shot noise), not measurements on hardware.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .circuits import channels
from .circuits.circuit import Circuit
from .circuits.observables import Observable

__all__ = ["Scenario", "bench_ring"]


@dataclass(frozen=True)
class Scenario:
    """A named problem: its Hamiltonian, a circuit to train, and a starting point."""

    name: str
    story: str
    hamiltonian: Observable
    circuit: Circuit
    theta0: np.ndarray
    noisy_circuit: Circuit
    noise: float
    shots: int

    def ground_energy(self) -> float:
        """Exact ground energy from scipy.sparse.linalg.eigsh."""
        from scipy.sparse.linalg import eigsh

        return float(eigsh(self.hamiltonian.matrix(), k=1, which="SA")[0][0])


def ring_hamiltonian(n: int, coupling: float, drive: float) -> Observable:
    """``-coupling * sum Z_i Z_{i+1} - drive * sum X_i`` on a ring of ``n`` qubits."""
    terms = {}
    for i in range(n):
        zz = ["I"] * n
        zz[i] = zz[(i + 1) % n] = "Z"
        terms["".join(zz)] = terms.get("".join(zz), 0.0) - coupling
        x = ["I"] * n
        x[i] = "X"
        terms["".join(x)] = -drive
    return Observable(terms)


def ring_circuit(n: int, layers: int, noise: float = 0.0) -> Circuit:
    """Layers that follow the ring Hamiltonian itself, one coupling and one drive angle each.

    Every qubit starts in |+> (H); each layer is RZZ on every ring edge sharing one angle,
    then RX on every qubit sharing another (2 * ``layers`` parameters). With ``noise`` > 0
    every qubit is depolarised with that probability after each ring of RZZ (a simple model
    of two-qubit gate error; the parameters stay the same).
    """
    c = Circuit(n)
    for q in range(n):
        c.h(q)
    for layer in range(layers):
        for q in range(n):
            c.rzz(q, (q + 1) % n, param=2 * layer)
        if noise:
            for q in range(n):
                c.noise(q, channels.depolarizing(noise))
        for q in range(n):
            c.rx(q, param=2 * layer + 1)
    return c


def bench_ring(n: int = 6, layers: int | None = None, seed: int = 7) -> Scenario:
    """The bench ring R6 scenario (defaults: 6 qubits, n // 2 layers).

    Its device budget is 1000 shots per measurement setting per circuit, and its noise
    model a 1% depolarising error on every qubit after each ring of RZZ gates (both invented).
    """
    layers = max(1, n // 2) if layers is None else layers
    circuit = ring_circuit(n, layers)
    rng = np.random.default_rng(seed)
    theta0 = 0.3 + rng.normal(0.0, 0.05, size=circuit.n_params)
    return Scenario(
        name=f"bench ring R{n}",
        story=(f"{n} qubits on the ring of the invented lab bench R{n}: ZZ coupling J = 1.0 "
               "between neighbours, transverse drive g = 0.7 on every qubit"),
        hamiltonian=ring_hamiltonian(n, 1.0, 0.7),
        circuit=circuit,
        theta0=theta0,
        noisy_circuit=ring_circuit(n, layers, noise=0.01),
        noise=0.01,
        shots=1000,
    )
