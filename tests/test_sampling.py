"""Finite-shot sampling: frequencies against exact probabilities (scipy.stats.chisquare),
reproducibility from seeds, and shot estimates of expectation values against exact values
within a stated number of standard errors.

Every statistical check uses a fixed seed, so the suite is deterministic; the stated
false-failure rate is the chance that a correct sampler would fail the check for a seed
picked at random.
"""
import numpy as np
import pytest
import scipy.stats

import qgradlib as qg
from qgradlib.engine.measurement import measurement_settings
from reference import circuit_state, dense_expectation, dense_marginals, observable_dense

P_THRESHOLD = 1e-3   # chi-square: false-failure rate 0.1 % per check
K_SIGMA = 4.0        # shot estimates: |error| < 4 standard errors, two-sided normal
                     # false-failure rate 6.3e-5 per check (central limit theorem)


def spread_circuit():
    """Three qubits with every outcome reasonably likely."""
    return qg.Circuit(3).ry(0).ry(1).ry(2).cnot(0, 1).crx(1, 2).rzz(0, 2).rx(0)


THETA = np.array([0.9, 2.1, -1.3, 0.7, 0.4, 1.7])


def _chisquare_p(counts, p, shots):
    expected = shots * p
    keep = expected >= 5          # pool rare outcomes so the chi-square approximation holds
    obs = np.append(counts[keep], counts[~keep].sum())
    exp = np.append(expected[keep], expected[~keep].sum())
    if exp[-1] == 0:
        obs, exp = obs[:-1], exp[:-1]
    return scipy.stats.chisquare(obs, exp).pvalue


def test_sample_frequencies_against_probabilities():
    c, shots = spread_circuit(), 20000
    p = np.abs(circuit_state(c, THETA)) ** 2            # the dense reference
    s = qg.sample(c, THETA, shots=shots, seed=2024)
    assert s.shape == (shots,) and np.issubdtype(s.dtype, np.integer)
    assert s.min() >= 0 and s.max() < 8
    counts = np.bincount(s, minlength=8)
    # scipy.stats.chisquare, p-value threshold P_THRESHOLD
    assert _chisquare_p(counts, p, shots) > P_THRESHOLD


def test_sample_chi_square_rejects_a_wrong_distribution():
    # the same check fails for a distribution the sampler is not drawing from
    c, shots = spread_circuit(), 20000
    p = np.abs(circuit_state(c, THETA)) ** 2
    s = qg.sample(c, THETA, shots=shots, seed=2024)
    wrong = np.roll(p, 1)
    assert _chisquare_p(np.bincount(s, minlength=8), wrong, shots) < P_THRESHOLD


def test_sample_batch_rows_follow_their_own_probabilities():
    c, shots = spread_circuit(), 8000
    thetas = np.stack([THETA, -THETA, THETA[::-1]])
    s = qg.sample(c, thetas, shots=shots, seed=7)
    assert s.shape == (3, shots)
    for row, theta in zip(s, thetas):
        p = np.abs(circuit_state(c, theta)) ** 2
        assert _chisquare_p(np.bincount(row, minlength=8), p, shots) > P_THRESHOLD


def test_probabilities_with_shots_are_frequencies():
    c, shots = spread_circuit(), 10000
    qubits = [2, 0]
    f = qg.probabilities(c, THETA, qubits=qubits, shots=shots, seed=5)
    counts = f * shots
    np.testing.assert_allclose(counts, np.round(counts), atol=1e-9)
    assert np.isclose(f.sum(), 1.0)
    p = dense_marginals(circuit_state(c, THETA), 3, qubits)
    assert _chisquare_p(np.round(counts), p, shots) > P_THRESHOLD


def test_sample_reproducible_from_seed():
    c = spread_circuit()
    a = qg.sample(c, THETA, shots=200, seed=3)
    np.testing.assert_array_equal(a, qg.sample(c, THETA, shots=200, seed=3))
    np.testing.assert_array_equal(a, qg.sample(c, THETA, shots=200, seed=np.random.default_rng(3)))
    assert not np.array_equal(a, qg.sample(c, THETA, shots=200, seed=4))


def test_expect_with_shots_reproducible_from_seed():
    c = spread_circuit()
    H = qg.Observable({"ZZI": 1.0, "IXX": -0.5, "YIY": 0.25})
    a = qg.expect(c, H, THETA, shots=500, seed=11)
    assert a == qg.expect(c, H, THETA, shots=500, seed=11)
    assert a == qg.expect(c, H, THETA, shots=500, seed=np.random.default_rng(11))
    assert a != qg.expect(c, H, THETA, shots=500, seed=12)
    assert a != qg.expect(c, H, THETA)


def test_identical_batch_rows_share_one_estimate():
    # the engine runs identical rows once (as a device would reuse one run), so with shots
    # they carry the same estimate; distinct rows are sampled independently
    c = spread_circuit()
    H = qg.Observable({"ZZI": 1.0, "IXX": -0.5})
    thetas = np.stack([THETA, THETA, THETA + 1e-3])
    e = qg.expect(c, H, thetas, shots=300, seed=1)
    assert e[0] == e[1] and e[1] != e[2]


def _group_variance(psi, groups, n):
    """Variance of one readout summed over settings: sum_s <O_s^2> - <O_s>^2, where O_s is the
    sum of the terms measured together in setting s (they commute, so their readouts are the
    eigenvalues of O_s)."""
    var = 0.0
    for terms in groups:
        O = observable_dense(terms, n)
        var += dense_expectation(psi, O @ O) - dense_expectation(psi, O) ** 2
    return var


@pytest.mark.parametrize("terms, groups", [
    # no two terms qubit-wise commute: three settings, one term each
    ({"XX": 0.8, "ZZ": -0.5, "YZ": 0.3}, [{"XX": 0.8}, {"ZZ": -0.5}, {"YZ": 0.3}]),
    # two settings, ZZZ and XXI; the identity term costs nothing
    ({"ZZI": 1.0, "IZZ": 1.0, "XII": 0.5, "IXI": 0.5, "III": 0.2},
     [{"ZZI": 1.0, "IZZ": 1.0}, {"XII": 0.5, "IXI": 0.5}]),
])
def test_shot_estimate_within_standard_errors(terms, groups):
    n = len(next(iter(terms)))
    c = qg.Circuit(n).ry(0).rx(1).cnot(0, 1).ry(n - 1)
    theta = np.array([0.8, -0.6, 1.9])
    H = qg.Observable(terms)
    assert sorted(map(dict, (s.terms for s in measurement_settings(H))), key=str) == \
        sorted(groups, key=str)
    psi = circuit_state(c, theta)
    exact = dense_expectation(psi, observable_dense(terms, n))
    shots = 4000
    se = np.sqrt(_group_variance(psi, groups, n) / shots)
    est = qg.expect(c, H, theta, shots=shots, seed=99)
    assert abs(est - exact) < K_SIGMA * se                  # false-failure rate 6.3e-5


def test_dense_observable_shot_estimate_within_standard_errors():
    c = qg.Circuit(2).ry(0).cry(0, 1)
    theta = np.array([1.1, 2.3])
    D = np.array([[1.0, 0.5, 0, 0], [0.5, -1.0, 0.2j, 0], [0, -0.2j, 0.3, 0], [0, 0, 0, 2.0]])
    psi = circuit_state(c, theta)
    mean = dense_expectation(psi, D)
    shots = 4000
    se = np.sqrt((dense_expectation(psi, D @ D) - mean ** 2) / shots)
    est = qg.expect(c, qg.Observable.from_matrix(D), theta, shots=shots, seed=5)
    assert abs(est - mean) < K_SIGMA * se                   # false-failure rate 6.3e-5


def test_shot_estimates_are_unbiased_on_average():
    # common practice: a finite-shot estimate is unbiased; the mean of R independent
    # estimates lies within K_SIGMA standard errors of the mean (false-failure rate 6.3e-5)
    c = qg.Circuit(2).ry(0).cnot(0, 1).rx(1)
    theta = np.array([0.7, 1.2])
    terms = {"ZZ": 1.0, "XI": -0.6}
    groups = [{"ZZ": 1.0}, {"XI": -0.6}]
    psi = circuit_state(c, theta)
    exact = dense_expectation(psi, observable_dense(terms, 2))
    R, shots = 300, 20
    rng = np.random.default_rng(8)        # one Generator: successive calls draw afresh
    H = qg.Observable(terms)
    ests = np.array([qg.expect(c, H, theta, shots=shots, seed=rng) for _ in range(R)])
    assert np.unique(ests).size > 10
    se_mean = np.sqrt(_group_variance(psi, groups, 2) / shots / R)
    assert abs(ests.mean() - exact) < K_SIGMA * se_mean
