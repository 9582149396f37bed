"""Optimisers under shots report honest numbers: an unbiased final cost with its standard
error, the exact value only where labelled, rotosolve's measured (not fitted) cost."""
import numpy as np
import pytest

import qgradlib as qg


def small_problem():
    c = qg.Circuit(2).ry(0).ry(1).cnot(0, 1).ry(0).ry(1)
    H = qg.Observable({"ZZ": -1.0, "XI": -0.5, "IX": -0.5})
    return c, H


def test_newton_under_shots_reports_an_unbiased_fun_not_below_the_ground_energy():
    # regression (issue 11, case 5): Newton kept the estimate that had fallen, so its fun
    # sat below the exact value at x and even below the ground energy: the longer the run
    # refuses steps near the minimum, the lower the kept estimate
    c = qg.Circuit(1).ry(0).rx(0)
    H = qg.Observable({"Z": -1.0, "X": -0.5})
    e0 = np.linalg.eigvalsh(H.matrix().toarray())[0]   # numpy's dense eigensolver
    z = []
    for seed in range(20):
        r = qg.optimize.minimize_expectation(c, H, np.full(2, 0.4), method="newton", steps=60,
                                             shots=1000, seed=seed)
        exact_at_x = qg.expect(c, H, r.x)
        # an independent standard error at x, so that the check does not trust fun_error
        se = qg.estimate(c, H, r.x, shots=1000, seed=1000 + seed).standard_error
        z.append((r.fun - exact_at_x) / se)
        assert r.fun >= e0 - 4.5 * se
        assert r.fun_error == pytest.approx(se, rel=0.3)
        assert r.fun_exact == pytest.approx(exact_at_x, abs=1e-12)
    z = np.array(z)
    # a fresh estimate is unbiased: z ~ N(0, 1) (common practice). False-failure rate of the
    # two checks together below 2e-4 (|z| < 4.5 for 20 draws; |mean| < 4 / sqrt(20)).
    assert np.all(np.abs(z) < 4.5), z
    assert abs(z.mean()) < 4 / np.sqrt(len(z)), z.mean()


def test_fun_under_shots_is_counted_in_the_ledger_and_fun_exact_is_not():
    c, H = small_problem()
    with qg.Ledger() as book:
        r = qg.optimize.minimize_expectation(c, H, np.full(4, 0.4), method="adam", steps=3,
                                             shots=200, seed=1)
    # 4 evaluations of value + gradient (1 + 2 m circuits), the fresh final estimate (1),
    # each in 2 settings of 200 shots (common practice: two-term rule, 2 m circuits)
    assert book.executions == r.executions == 2 * (4 * (1 + 2 * 4) + 1)
    assert r.shots == 200 * r.executions
    assert r.fun_error > 0


def test_exact_runs_report_fun_error_zero_and_no_fun_exact():
    c, H = small_problem()
    r = qg.optimize.minimize_expectation(c, H, np.full(4, 0.4), method="adam", steps=3)
    assert r.fun_error == 0.0 and "fun_exact" not in r
    assert r.fun == pytest.approx(qg.expect(c, H, r.x), abs=1e-12)


def test_rotosolve_under_shots_shows_the_measured_cost_not_the_fitted_minimum():
    # regression (issue 11, case 5): the fitted minimum A - sqrt(B**2 + C**2) of noisy values
    # went below -1, which no measured mean of <Z> (outcomes +-1) can (common practice)
    c = qg.Circuit(1).ry(0)
    Z = qg.Observable({"Z": 1.0})
    seen = []
    for seed in range(10):
        qg.optimize.minimize_expectation(
            c, Z, np.array([2.0]), method="rotosolve", steps=6, shots=20, seed=seed, tol=0.0,
            callback=lambda intermediate_result: seen.append(intermediate_result.fun))
    assert len(seen) == 60
    assert min(seen) >= -1.0
    # a measured mean of 20 outcomes +-1 lies on the grid k / 10 - 1
    assert np.allclose(np.round((np.array(seen) + 1) * 10), (np.array(seen) + 1) * 10)


def test_training_result_prints_compactly():
    c, H = small_problem()
    r = qg.optimize.minimize_expectation(c, H, np.full(4, 0.4), method="adam", steps=40)
    text = repr(r)
    assert text.startswith("TrainingResult(") and len(text) < 500
    assert "history: cost, grad_norm, executions, shots (41 entries)" in text
    assert isinstance(r, __import__("scipy").optimize.OptimizeResult)
    assert r.history["cost"].shape == (41,)
