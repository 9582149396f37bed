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


# -- the metric under shots ----------------------------------------------------------------------
from reference import curv_dense as ref   # noqa: E402  (full matrices, scipy's expm_frechet)

SEEDS = 100


def stokes_circuit():
    """Layers with several words per generator (CRX), an identity part (PHASE), a parameter
    shared across layers, and a fixed gate between layers."""
    c = qg.Circuit(3).h(0).h(1).h(2)
    c.ry(0).ry(1).rzz(1, 2).cnot(0, 2).rx(0).rx(1).rx(2, param=0, scale=0.5)
    c.crx(0, 1).phase(2)
    return c, np.array([0.4, -0.2, 0.8, 0.1, 0.5, 0.3, -0.6])


def mari_circuit():
    c = qg.Circuit(2).ry(0).cnot(0, 1).rx(1).crx(0, 1).ry(1, param=0, scale=0.5)
    return c, np.array([0.4, -0.3, 0.9])


def draws(circuit, theta, structure, shots, seeds=SEEDS):
    ests = [curvature.metric_tensor(circuit, theta, structure, shots=shots, seed=s)
            for s in range(seeds)]
    return np.array([e.value for e in ests]), np.array([e.standard_error for e in ests])


def assert_unbiased(values, errors, exact):
    # the mean of the independent estimates, against the exact value in units of its own
    # standard error: |z| < 4.5 for every one of <= 49 entries has a false-failure rate below
    # 49 * 6.8e-6 = 3.3e-4 (common practice: a normal approximation of the mean)
    sd = values.std(axis=0, ddof=1)
    nonzero = sd > 0
    z = (values.mean(axis=0) - exact)[nonzero] / (sd[nonzero] / np.sqrt(len(values)))
    assert np.all(np.abs(z) < 4.5), np.round(z, 2)
    assert np.allclose(values[:, ~nonzero], exact[~nonzero], atol=1e-12)
    # the reported standard errors describe the spread: they are first order (delta method),
    # allowed 15 percent, plus 4 standard errors of a sample standard deviation,
    # sd / sqrt(2 (K - 1)) (common practice; false-failure rate below 49 * 6.4e-5)
    ratio = sd[nonzero] / errors.mean(axis=0)[nonzero]
    allowed = 0.15 + 4 / np.sqrt(2 * (len(values) - 1))
    assert np.all(np.abs(ratio - 1) < allowed), np.round(ratio, 2)


def test_full_metric_under_shots_is_unbiased_mari_bromley_killoran():
    # the full metric is -1/2 the Hessian of the fidelity of the overlap circuits, whose
    # all-zeros frequency is an unbiased estimate (Mari, Bromley and Killoran, Phys. Rev. A
    # 103, 012405 (2021), sec. on the metric tensor); the exact metric from scipy's
    # expm_frechet through the dense reference
    c, theta = mari_circuit()
    values, errors = draws(c, theta, "full", 400)
    assert_unbiased(values, errors, ref.metric(c, theta))


@pytest.mark.parametrize("structure", ["layerwise", "diagonal"])
def test_layerwise_and_diagonal_metrics_under_shots_are_unbiased_stokes(structure):
    # generator covariances from measured Pauli words (Stokes, Izaac, Killoran and Carleo,
    # Quantum 4, 269 (2020), eq. for the layerwise metric); the exact structures are
    # checked against the dense reference's layer covariances in tests/test_curvature.py
    c, theta = stokes_circuit()
    values, errors = draws(c, theta, structure, 300)
    assert_unbiased(values, errors, curvature.metric_tensor(c, theta, structure))


def test_a_hamiltonian_gate_layer_under_shots_is_unbiased():
    # its effective generator is measured in its eigenbasis after the gate; with one
    # parameter every structure equals the full metric (scipy's expm_frechet in the reference)
    W = np.array([[0.4, 0.3], [0.3, -0.4]])
    c = qg.Circuit(1).h(0).add(qg.Gate.from_hamiltonian("pulse", drift=W, drive="X"), 0)
    theta = np.array([0.6])
    exact = ref.metric(c, theta)
    # (the full structure's overlap plan takes 384 circuits here, quadrature nodes of the
    # stochastic rule: fewer draws)
    for structure, seeds in (("layerwise", SEEDS), ("full", 25)):
        values, errors = draws(c, theta, structure, 300, seeds)
        assert_unbiased(values, errors, exact)


def test_sampled_metric_is_charged_to_the_ledger_with_its_shots():
    # regression (issue 11, case 4): the metric was never sampled and its executions carried
    # 0 shots. Counts: the fidelity Hessian of G two-term columns needs 2 G**2 overlap
    # circuits (Mari, Bromley and Killoran 2021, the x = 0 point needs none), one setting each;
    # the layerwise structure one circuit per layer in each of its settings
    c = qg.Circuit(2).ry(0).cnot(0, 1).rx(1).ry(0).rz(1)
    theta = np.array([0.3, -0.2, 0.7, 0.5])
    with qg.Ledger() as book:
        e = curvature.metric_tensor(c, theta, "full", shots=250, seed=0)
    assert book.executions == e.executions == e.circuits == 2 * 4 ** 2
    assert book.shots == e.shots == 2 * 4 ** 2 * 250
    assert dict(book.by_purpose) == {"overlap": 32}
    lays = curvature.layers(c)
    for structure, per in (("layerwise", "n_settings"), ("diagonal", "n_variance_settings")):
        with qg.Ledger() as book:
            e = curvature.metric_tensor(c, theta, structure, shots=250, seed=0)
        settings = sum(getattr(lay, per) for lay in lays)
        assert book.executions == e.executions == settings
        assert book.circuits == e.circuits == len(lays)
        assert book.shots == e.shots == 250 * settings


def test_natural_gradient_under_shots_samples_the_metric_and_charges_its_shots():
    # regression (issue 11, case 4): with shots=1000, 15 metric executions carried 0 shots
    c = qg.Circuit(2).ry(0).ry(1).cnot(0, 1).ry(0).ry(1)
    H = qg.Observable({"ZZ": -1.0, "XI": -0.5, "IX": -0.5})
    for metric, purpose in (("layerwise", "metric"), ("full", "overlap")):
        with qg.Ledger() as book:
            r = qg.optimize.minimize_expectation(c, H, np.full(4, 0.4), method="natural",
                                                 steps=5, shots=1000, seed=1, metric=metric)
        assert book.by_purpose[purpose] > 0
        assert book.shots == r.shots == 1000 * book.executions       # every execution sampled


def test_metric_estimate_reproduces_with_its_seed_and_prints_compactly():
    c, theta = stokes_circuit()
    a = curvature.metric_tensor(c, theta, "layerwise", shots=100, seed=5)
    b = curvature.metric_tensor(c, theta, "layerwise", shots=100, seed=5)
    assert np.array_equal(a.value, b.value) and np.array_equal(a.standard_error, b.standard_error)
    assert repr(a).startswith("TensorEstimate(value=array (7, 7) in [") and len(repr(a)) < 250
    with pytest.raises(ValueError, match="shots must be an int >= 2"):
        curvature.metric_tensor(c, theta, shots=1)


# -- Fisher information under shots -------------------------------------------------------------
def test_quantum_fisher_information_under_shots_is_four_times_the_sampled_metric():
    c, theta = mari_circuit()
    q = curvature.fisher_information(c, theta, kind="quantum", shots=300, seed=4)
    g = curvature.metric_tensor(c, theta, shots=300, seed=4)
    assert np.array_equal(q.value, 4 * g.value) and np.array_equal(q.standard_error, 4 * g.standard_error)
    assert (q.executions, q.shots) == (g.executions, g.shots)


def test_classical_fisher_information_from_samples_converges_with_calibrated_errors():
    # a plug-in estimate (division by sampled probabilities): consistent, bias of order
    # 1/shots. At 20000 shots the bias (about 1e-3 here) is far below the tolerance of 4.5
    # standard errors of the mean of 40 draws; false-failure rate below 9 * 6.8e-6
    c = qg.Circuit(2).ry(0).cnot(0, 1).rx(1).ry(0)
    theta = np.array([0.8, 0.3, -0.5])
    p, dp = ref.probabilities_and_derivatives(c, theta)      # scipy's expm_frechet
    exact = (dp / p) @ dp.T
    ests = [curvature.fisher_information(c, theta, shots=20000, seed=s) for s in range(40)]
    values = np.array([e.value for e in ests])
    errors = np.array([e.standard_error for e in ests])
    assert_unbiased(values, errors, exact)
    with qg.Ledger() as book:
        e = curvature.fisher_information(c, theta, shots=500, seed=0)
    # the value point and two shifts per two-term parameter (common practice)
    assert book.circuits == e.circuits == 1 + 2 * 3
    assert book.shots == e.shots == 500 * e.executions == 500 * 7
