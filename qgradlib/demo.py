"""The demo scenarios: bench ring R6, and the greenhouse G7 sensor readings.

An invented lab bench, code R6, holds six coupled qubits on a ring. Neighbours
couple through ZZ and every qubit is driven transversally; the lab wants the ring's ground
state prepared by a shallow layered circuit before it books device time. The numbers are
ours (J = 1.0, g = 0.7 in units of the coupling) and describe no real device.

An invented greenhouse, hall G7, has humidity sensors that drift as they age; each reading is
two numbers (a humidity and a temperature offset), labelled sound (0) or drifting (1). The
readings are generated here: drifting sensors sit on a ring around the sound ones.

Everything here is simulation: energies and gradients are exact statevector results (or
simulated shot noise), not measurements on hardware.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .circuits import channels
from .circuits.circuit import Circuit
from .circuits.observables import Observable

__all__ = ["Scenario", "bench_ring", "DataScenario", "greenhouse", "sensor_readings",
           "reuploading_classifier", "angle_feature_map"]


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


@dataclass(frozen=True)
class DataScenario:
    """A two-class data set with a model circuit and a feature circuit for a kernel."""

    name: str
    story: str
    X_train: np.ndarray
    y_train: np.ndarray
    X_test: np.ndarray
    y_test: np.ndarray
    model: Circuit
    observable: Observable
    feature: Circuit
    theta0: np.ndarray


def sensor_readings(n: int, rng) -> tuple:
    """``n`` invented readings (n, 2) and labels (n,): 0 sound (near the origin), 1 drifting
    (on a ring of radius 1.1 to 1.6), with a little measurement jitter."""
    label = rng.integers(0, 2, size=n)
    radius = np.where(label == 1, rng.uniform(1.1, 1.6, n), rng.uniform(0.0, 0.7, n))
    angle = rng.uniform(0, 2 * np.pi, n)
    X = np.stack([radius * np.cos(angle), radius * np.sin(angle)], axis=1)
    return X + rng.normal(0, 0.05, X.shape), label


def reuploading_classifier(layers: int = 3) -> Circuit:
    """Two qubits; each layer uploads both features (RY), then four weights and a CZ."""
    c = Circuit(2)
    for _ in range(layers):
        c.ry(0, input=0).ry(1, input=1)
        c.rz(0).rz(1).ry(0).ry(1)
        c.cz(0, 1)
    return c


def angle_feature_map(layers: int = 2) -> Circuit:
    """A feature circuit for the fidelity kernel: H, RZ(x_k), RZZ(0.3 x_k), repeated."""
    c = Circuit(2)
    for _ in range(layers):
        c.h(0).h(1)
        c.rz(0, input=0).rz(1, input=1)
        c.rzz(0, 1, input=0, scale=0.3).rzz(0, 1, input=1, scale=0.3)
    return c


def greenhouse(n_train: int = 60, n_test: int = 40, seed: int = 11) -> DataScenario:
    """The greenhouse G7 scenario: sensor readings, a re-uploading classifier read out as
    ``p(drifting) = (1 - <Z0>) / 2``, and a feature circuit for a kernel classifier.

    Examples
    --------
    >>> sc = greenhouse(20, 10)
    >>> sc.X_train.shape, sc.model.n_params, sc.model.n_inputs
    ((20, 2), 12, 2)
    """
    rng = np.random.default_rng(seed)
    X_train, y_train = sensor_readings(n_train, rng)
    X_test, y_test = sensor_readings(n_test, rng)
    model = reuploading_classifier()
    return DataScenario(
        name="greenhouse G7 sensor readings",
        story=(f"{n_train} labelled readings for training, {n_test} for testing, from the "
               "invented humidity sensors of greenhouse hall G7 (two features each; class 1: "
               "drifting)"),
        X_train=X_train, y_train=y_train, X_test=X_test, y_test=y_test,
        model=model, observable=Observable({"ZI": 1.0}), feature=angle_feature_map(),
        theta0=np.random.default_rng(seed + 1).normal(0, 0.5, model.n_params))
