"""The metric tensor and Fisher information: refused for noisy circuits with a pointer to
what is defined there, and (with shots=) measured as a device would."""
import numpy as np
import pytest

import qgradlib as qg
from qgradlib import curvature


def noisy_circuit(p=0.2):
    return qg.Circuit(1).ry(0).noise(0, qg.channels.depolarizing(p))


@pytest.mark.parametrize("structure", ["full", "layerwise", "diagonal"])
def test_metric_tensor_of_a_noisy_circuit_is_refused_naming_the_metric(structure):
    # regression (issue 11, case 21): the refusal came from deep inside the engine ("noise
    # channel has no unitary") and said nothing of the metric or of what is available
    with pytest.raises(ValueError, match="Fubini-Study metric .* pure states") as err:
        curvature.metric_tensor(noisy_circuit(), np.array([0.3]), structure)
    assert "kind='classical'" in str(err.value)


def test_quantum_fisher_information_of_a_noisy_circuit_is_refused():
    with pytest.raises(ValueError, match="quantum Fisher information .* pure states"):
        curvature.fisher_information(noisy_circuit(), np.array([0.3]), kind="quantum")


@pytest.mark.parametrize("a, p", [(0.3, 0.2), (1.1, 0.05), (2.5, 0.5)])
def test_classical_fisher_information_of_a_noisy_circuit_is_that_of_its_outcomes(a, p):
    # what the refusal points to. RY(a) then depolarizing(p) shrinks the Bloch vector by
    # (1 - p): p0 = (1 + (1 - p) cos a) / 2, so F = (1 - p)**2 sin(a)**2 / (1 - (1 - p)**2
    # cos(a)**2) (common practice: the Fisher information of a two-outcome distribution,
    # p0'**2 / (p0 (1 - p0)))
    F = curvature.fisher_information(noisy_circuit(p), np.array([a]))
    s = 1 - p
    assert F[0, 0] == pytest.approx(s ** 2 * np.sin(a) ** 2 / (1 - s ** 2 * np.cos(a) ** 2), abs=1e-12)
