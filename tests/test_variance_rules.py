"""Variance-aware shift rules: candidate rules, shot splits, and the variance saved."""
import numpy as np
import pytest

import qgradlib as qg
from qgradlib.rules import ShiftRule
from qgradlib.rules.variance import (candidate_rules, least_variance_rule, rule_variance,
                                     split_shots)

SETS = [[1.0], [0.5, 1.0], [1.0, 2.0, 3.0], [1.0, 3.0], [1.0, 1.7, 2.7]]


@pytest.mark.parametrize("freqs", SETS)
def test_every_candidate_is_exact_on_trigonometric_polynomials(freqs):
    # exact computation: f(x) = sum a cos(w x) + b sin(w x) has f'(x0) in closed form
    rng = np.random.default_rng(len(freqs))
    w = np.array(freqs)
    a, b, x0 = rng.normal(size=w.size), rng.normal(size=w.size), rng.normal()
    f = lambda x: np.sum(a * np.cos(w * x) + b * np.sin(w * x))   # noqa: E731
    exact = np.sum(w * (-a * np.sin(w * x0) + b * np.cos(w * x0)))
    for name, rule in candidate_rules(w).items():
        assert rule.derivative(f, x0) == pytest.approx(exact, abs=1e-9), name


@pytest.mark.parametrize("freqs", SETS)
def test_one_norm_is_at_least_the_largest_frequency(freqs):
    # exact computation: applied to sin(w_max x) at 0 an exact rule gives
    # w_max = sum c_k sin(w_max s_k) <= sum |c_k|, so the proportional split's bound
    # (sum |c_k|)**2 is at least w_max**2; the default rules reach it where the frequencies
    # are multiples of one base (Wierichs, Izaac, Wang and Lin, Quantum 6, 677 (2022))
    w_max = max(freqs)
    rules = candidate_rules(freqs)
    for rule in rules.values():
        assert rule_variance(rule, "proportional") >= w_max ** 2 * (1 - 1e-9)
    if freqs in ([1.0], [0.5, 1.0], [1.0, 2.0, 3.0]):
        assert rule_variance(rules["default"], "proportional") == pytest.approx(w_max ** 2)


@pytest.mark.parametrize("split", ["even", "proportional"])
@pytest.mark.parametrize("freqs", SETS)
def test_least_variance_rule_is_the_argmin(freqs, split):
    # exact computation: the bound of every candidate, by its coefficients
    name, rule = least_variance_rule(freqs, split)
    bounds = {k: rule_variance(r, split) for k, r in candidate_rules(freqs).items()}
    assert rule_variance(rule, split) <= min(bounds.values()) * (1 + 1e-6)
    if split == "even" and len(freqs) > 1:
        # with equal shots per term, flatter coefficients win over the equidistant shifts
        assert bounds[name] < bounds["default"] * 0.97


def test_even_split_variance_of_the_equidistant_rule_by_hand():
    # Wierichs et al. (2022), eq. (24) for R = 2 and base 1/2: coefficients
    # +-(1/2) / (8 sin^2(pi/8)) and +-(1/2) / (8 sin^2(3 pi/8)); even split: 4 sum c^2
    c1, c2 = 0.5 / (8 * np.sin(np.pi / 8) ** 2), 0.5 / (8 * np.sin(3 * np.pi / 8) ** 2)
    rule = ShiftRule.equidistant(0.5, 2)
    assert rule_variance(rule, "even") == pytest.approx(4 * 2 * (c1 ** 2 + c2 ** 2))
    assert rule_variance(rule, "proportional") == pytest.approx((2 * (c1 + c2)) ** 2)


def test_split_shots_is_proportional_and_exact():
    c = np.array([0.4, -0.1, 0.1, -0.4, 0.0])
    n = split_shots(c, 1000)
    assert n.sum() == 1000 and n.min() >= 2
    free = 1000 - 2 * c.size
    assert np.all(np.abs(n - 2 - free * np.abs(c) / np.abs(c).sum()) <= 1)
    with pytest.raises(ValueError, match="at least 2"):
        split_shots(c, 9)


def shifted_variance(c, O, theta, rule, shots):
    """Exact variance of the rule's estimate: sum_k c_k^2 (1 - f_k^2) / n_k for a +-1 outcome."""
    f = np.array([qg.expect(c, O, theta + s) for s in rule.shifts])
    return float(np.sum(rule.coefficients ** 2 * (1 - f ** 2) / shots))


def test_proportional_shots_lower_the_variance_at_the_same_total():
    c = qg.Circuit(2).h(0).ry(1, angle=0.9).crx(0, 1)
    O = qg.Observable({"IZ": 1.0})                 # one setting, outcomes +-1
    theta = np.array([0.8])
    rule = qg.gates.CRX.shift_rule
    n_prop = split_shots(rule.coefficients, 200 * rule.n_terms)
    even_exact = shifted_variance(c, O, theta, rule, np.full(rule.n_terms, 200))
    prop_exact = shifted_variance(c, O, theta, rule, n_prop)
    assert prop_exact < 0.8 * even_exact            # what the split saves here, exactly
    runs = {}
    for split in ("even", "proportional"):
        with qg.Ledger() as book:
            g = np.array([qg.estimate_gradient(c, O, theta, shots=200, seed=s, term_shots=split,
                                               rule="least-variance" if split == "proportional"
                                               else "default").gradient[0] for s in range(300)])
        runs[split] = (np.var(g, ddof=1), book.shots)
    # the same total shots in the ledger
    assert runs["even"][1] == runs["proportional"][1] == 300 * 4 * 200
    # sample variances of 300 draws: relative standard error ~8%; 30% is over 3.5 sigma, and
    # the ordering fails only if the log-ratio (sd ~0.12) moves by more than 3 sigma:
    # false-failure rate below 1e-3 in all (common practice: the normal approximation)
    assert runs["even"][0] == pytest.approx(even_exact, rel=0.3)
    assert runs["proportional"][0] == pytest.approx(prop_exact, rel=0.3)
    assert runs["proportional"][0] < runs["even"][0]


def test_reported_standard_errors_follow_the_split():
    c = qg.Circuit(2).h(0).ry(1, angle=0.9).crx(0, 1).ry(0)
    O = qg.Observable({"IZ": 1.0, "XI": 0.5})
    theta = np.array([0.8, 0.3])
    even = qg.estimate_gradient(c, O, theta, shots=4000, seed=2)
    prop = qg.estimate_gradient(c, O, theta, shots=4000, seed=2, term_shots="proportional")
    assert even.shots == prop.shots and even.circuits == prop.circuits
    # a two-term rule's coefficients are equal in size: its shots, and so its error, stay
    assert prop.standard_error[1] == pytest.approx(even.standard_error[1], rel=0.1)
    assert prop.standard_error[0] < even.standard_error[0]
    from autograd import grad
    exact = grad(lambda t: qg.expect(c, O, t))(theta)    # the exact shift-rule gradient
    # unbiased (common practice): within 4.5 standard errors (false failures < 1e-5)
    assert np.all(np.abs(prop.gradient - exact) < 4.5 * prop.standard_error)


def test_options_are_checked():
    c = qg.Circuit(1).ry(0)
    Z = qg.Observable({"Z": 1.0})
    with pytest.raises(ValueError, match="rule must be"):
        qg.estimate_gradient(c, Z, [0.1], shots=10, rule="cheapest")
    with pytest.raises(ValueError, match="term_shots must be"):
        qg.estimate_gradient(c, Z, [0.1], shots=10, term_shots="weighted")
