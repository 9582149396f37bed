"""iCANS (Kübler, Arrasmith, Cincio and Coles, Quantum 4, 263 (2020)): shots per component."""
import numpy as np
import pytest
from scipy.sparse.linalg import eigsh

import qgradlib as qg
from qgradlib import models
from qgradlib.shots import estimation
from qgradlib.train.icans import next_shots


def paper_shots(xi, chi, k, alpha, L, mu, b, s_min):
    """Algorithm 1 of Kübler et al. (2020), written out again from the paper, element by element."""
    m = len(xi)
    s = [int(np.ceil(2 * L * alpha / (2 - L * alpha) * xi[i] / (chi[i] ** 2 + b * mu ** k)))
         for i in range(m)]
    gamma = [((alpha - L * alpha ** 2 / 2) * chi[i] ** 2 - L * alpha ** 2 / (2 * s[i]) * xi[i]) / s[i]
             for i in range(m)]
    s_max = s[int(np.argmax(gamma))]
    return [min(max(si, s_min), max(s_max, s_min)) for si in s]


@pytest.mark.parametrize("seed", range(6))
def test_next_shots_follow_the_papers_formula(seed):
    rng = np.random.default_rng(seed)
    m = 5
    xi, chi = rng.uniform(0.1, 2.0, m), rng.normal(0, 0.5, m)
    k, L = int(rng.integers(1, 50)), rng.uniform(0.5, 4.0)
    alpha = rng.uniform(0.1, 1.9) / L
    got = next_shots(xi, chi, k, rate=alpha, lipschitz=L, mu=0.99, bias=1e-6, min_shots=2)
    assert got.tolist() == paper_shots(xi, chi, k, alpha, L, 0.99, 1e-6, 2)


@pytest.fixture(scope="module")
def problem():
    c = models.layered(2, 1)
    H = models.ising_chain(2, periodic=False)
    return c, H, np.full(c.n_params, 0.3)


def test_a_run_asks_the_formulas_shots_and_the_ledger_counts_them(problem, monkeypatch):
    c, H, x0 = problem
    calls = []
    real = estimation.estimate_gradient

    def spy(*args, **kwargs):
        r = real(*args, **kwargs)
        calls.append((np.array(kwargs["shots"]), np.array(r.gradient), np.array(r.standard_error),
                      r.shots))
        return r

    monkeypatch.setattr(estimation, "estimate_gradient", spy)
    mu, L = 0.9, float(sum(abs(v) for v in H.terms.values()))
    with qg.Ledger() as book:
        r = qg.optimize.minimize_expectation(c, H, x0, method="icans", shots=5, seed=4, steps=12,
                                             mu=mu)
    # replay: the shots of step k + 1 from the moving averages of the estimates up to step k
    xi, chi = np.zeros(x0.size), np.zeros(x0.size)
    assert calls[0][0].tolist() == [5] * x0.size
    for k, (s, g, se, _) in enumerate(calls[:-1], start=1):
        xi = mu * xi + (1 - mu) * se ** 2 * s
        chi = mu * chi + (1 - mu) * g
        want = paper_shots(xi / (1 - mu ** k), chi / (1 - mu ** k), k, 1 / L, L, mu, 1e-6, 5)
        assert calls[k][0].tolist() == want
    # every shot is in the ledger: the gradients' plus the fresh final estimate of the cost
    final = r.shots - sum(n for *_, n in calls)
    assert r.shots == book.shots and r.history["shots"][-1] == sum(n for *_, n in calls)
    # common practice: one circuit per setting, with the most shots the last gradient gave a
    # component (s_min, often 2, would leave a nearly worthless estimate)
    assert calls[-1][0].max() > 5
    assert final == calls[-1][0].max() * qg.shots.n_settings(H)
    assert len(calls) == 13


def test_icans_converges_on_a_small_problem(problem):
    c, H, x0 = problem
    ground = eigsh(H.matrix(), k=1, which="SA")[0][0]      # reference library: scipy's eigsh
    for seed in (0, 1, 2):
        r = qg.optimize.minimize_expectation(c, H, x0, method="icans", shots=10, seed=seed,
                                             steps=80)
        # fixed seeds: reaching within 1% of the ground energy; over 20 other seeds (3..22,
        # checked once) every run did by step 60, so the false-failure rate here is below 1 in 20 per
        # seed for a new seed, and zero for these
        assert r.fun_exact - ground < 0.01 * abs(ground)
        assert r.history["shots"][-1] > 80 * 10      # the shots grew as the gradient shrank


def test_budget_stops_the_run(problem):
    c, H, x0 = problem
    r = qg.optimize.minimize_expectation(c, H, x0, method="icans", shots=10, seed=0, steps=1000,
                                         budget=20000)
    assert r.status == 3 and "budget" in r.message
    # the last gradient took the ledger past the budget; the point it led to is the last entry
    assert r.history["shots"][-1] == r.history["shots"][-2] >= 20000 > r.history["shots"][-3]


def test_icans_bad_input(problem):
    c, H, x0 = problem
    with pytest.raises(ValueError, match="needs shots="):
        qg.optimize.minimize_expectation(c, H, x0, method="icans")
    with pytest.raises(ValueError, match="rate < 2 / lipschitz"):
        qg.optimize.minimize_expectation(c, H, x0, method="icans", shots=10, rate=1.0,
                                         lipschitz=4.0)
    with pytest.raises(ValueError, match="mu must be"):
        qg.optimize.minimize_expectation(c, H, x0, method="icans", shots=10, mu=1.0)
