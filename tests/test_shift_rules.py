"""Shift rules: published formulas, exactness on trigonometric polynomials, gate rules."""
import numpy as np
import pytest
from autograd import grad
from hypothesis import given, settings, strategies as st

import qgradlib as qg
from derivative_cases import random_pauli_observable, scramble, to_circuit
from qgradlib.rules.shift_rules import ShiftRule, frequencies_of, rule_for_frequencies
from reference import derivatives as ref


def _trig_poly(freqs, rng):
    """f(a) = c0 + sum_l (a_l cos(w_l a) + b_l sin(w_l a)) and its derivative, by hand."""
    c0 = rng.normal()
    A = rng.normal(size=len(freqs))
    B = rng.normal(size=len(freqs))
    w = np.asarray(freqs, dtype=float)

    def f(a):
        return c0 + np.sum(A * np.cos(w * a) + B * np.sin(w * a))

    def df(a):
        return np.sum(w * (-A * np.sin(w * a) + B * np.cos(w * a)))
    return f, df


def test_two_term_rule_is_plus_minus_pi_over_two_with_one_half():
    # common practice: d/da f = (f(a + pi/2) - f(a - pi/2)) / 2 for RX, RY, RZ
    for gate in (qg.gates.RX, qg.gates.RY, qg.gates.RZ):
        rule = gate.shift_rule
        order = np.argsort(rule.shifts)
        np.testing.assert_allclose(rule.shifts[order], [-np.pi / 2, np.pi / 2], atol=1e-15)
        np.testing.assert_allclose(rule.coefficients[order], [-0.5, 0.5], atol=1e-15)


@pytest.mark.parametrize("s", [0.1, 0.7, np.pi / 2, 2.5, 3.1])
def test_continuous_shift_coefficient(s):
    # Schuld, Bergholm, Gogolin, Izaac and Killoran, Phys. Rev. A 99, 032331 (2019):
    # f'(a) = (f(a + s) - f(a - s)) / (2 sin s) for a frequency-1 function
    rule = ShiftRule.two_term(1.0, s)
    order = np.argsort(rule.shifts)
    np.testing.assert_allclose(rule.shifts[order], [-s, s], atol=1e-15)
    np.testing.assert_allclose(rule.coefficients[order], np.array([-1, 1]) / (2 * np.sin(s)), rtol=1e-14)
    # and through expect(shift=s), against expm_frechet on the dense circuit
    rng = np.random.default_rng(4)
    ops = scramble(2, rng) + [("RY", (0,), (0, 1.0, 0.0)), ("RXX", (0, 1), (1, 1.0, 0.0))]
    c = to_circuit(ops, 2)
    obs, M = random_pauli_observable(2, rng)
    theta = np.array([0.3, -1.2])
    g = grad(lambda t: qg.expect(c, obs, t, shift=s))(theta)
    np.testing.assert_allclose(g, ref.gradient(ops, theta, 2, M), atol=1e-11)


def test_two_term_rule_with_frequency_scales_the_shift():
    # the same formula with s/w shifts and factor w / (2 sin s) (Schuld et al. 2019, frequency w)
    rng = np.random.default_rng(0)
    for w in (0.5, 1.0, 3.0):
        rule = ShiftRule.two_term(w, 1.1)
        f, df = _trig_poly([w], rng)
        assert abs(rule.derivative(f, 0.37) - df(0.37)) < 1e-12


def _classes(rule, period):
    """{shift mod period: summed coefficient}: a rule as an equivalence class of shifts."""
    out = {}
    for s, c in zip(rule.shifts, rule.coefficients):
        key = round(float(np.mod(s, period)), 9) % round(period, 9)
        out[key] = out.get(key, 0.0) + float(c)
    return out


def test_controlled_rotation_rule_equals_published_four_term_rule():
    # Anselmetti, Wierichs, Gogolin and Parrish, New J. Phys. 23, 113010 (2021):
    # f'(a) = c+ [f(a + pi/2) - f(a - pi/2)] - c- [f(a + 3pi/2) - f(a - 3pi/2)],
    # c+- = (sqrt2 +- 1) / (4 sqrt2). Our rule may write 3pi/2 as -pi/2 + 2pi etc.: compare the
    # shifts modulo the 4pi period of a controlled rotation, and as functions.
    cp = (np.sqrt(2) + 1) / (4 * np.sqrt(2))
    cm = (np.sqrt(2) - 1) / (4 * np.sqrt(2))
    published = ShiftRule(np.array([np.pi / 2, -np.pi / 2, 3 * np.pi / 2, -3 * np.pi / 2]),
                          np.array([cp, -cp, -cm, cm]))
    for gate in (qg.gates.CRX, qg.gates.CRY, qg.gates.CRZ):
        ours = gate.shift_rule
        assert ours.n_terms == 4
        assert gate.period == pytest.approx(4 * np.pi)
        a, b = _classes(ours, 4 * np.pi), _classes(published, 4 * np.pi)
        assert sorted(a) == pytest.approx(sorted(b), abs=1e-9)
        for key in a:
            match = min(b, key=lambda k: abs(k - key))
            assert a[key] == pytest.approx(b[match], abs=1e-14)
        # as functions: both are exact on every trigonometric polynomial of frequencies 1/2, 1
        rng = np.random.default_rng(1)
        for _ in range(5):
            f, df = _trig_poly([0.5, 1.0], rng)
            x = rng.uniform(-4, 4)
            assert abs(ours.derivative(f, x) - df(x)) < 1e-12
            assert abs(published.derivative(f, x) - df(x)) < 1e-12


@pytest.mark.parametrize("R", [1, 2, 3, 4])
def test_equidistant_rule_exact_on_trig_polynomials(R):
    # Wierichs, Izaac, Wang and Lin, Quantum 6, 677 (2022): the 2R-term rule is exact for
    # frequencies w, 2w, ..., Rw (derivative of the polynomial written by hand)
    rng = np.random.default_rng(R)
    for w in (0.5, 1.0, 1.3):
        rule = ShiftRule.equidistant(w, R)
        assert rule.n_terms == 2 * R
        assert np.all(np.abs(rule.shifts) <= np.pi / w + 1e-12)
        f, df = _trig_poly([k * w for k in range(1, R + 1)], rng)
        for x in rng.uniform(-3, 3, size=4):
            assert abs(rule.derivative(f, x) - df(x)) < 1e-11


def test_equidistant_rule_with_one_frequency_is_the_two_term_rule():
    # common practice: R = 1 reduces to shifts +-pi/2 and factor 1/2
    a, b = ShiftRule.equidistant(1.0, 1), ShiftRule.two_term(1.0)
    assert _classes(a, 2 * np.pi) == pytest.approx(_classes(b, 2 * np.pi))


@pytest.mark.parametrize("freqs", [(1.0, 1.7, 2.7), (0.3, 1.0), (1.0, np.sqrt(2), np.pi, 4.1)])
def test_general_rule_exact_and_well_conditioned(freqs):
    # no published closed form: exactness on trigonometric polynomials (derivative by hand),
    # and a coefficient 1-norm not above the equidistant rule of the same order scaled to
    # the top frequency, which is one valid choice of shifts the optimiser started from
    rule = ShiftRule.general(freqs)
    assert rule.n_terms == 2 * len(freqs)
    rng = np.random.default_rng(len(freqs))
    for _ in range(5):
        f, df = _trig_poly(freqs, rng)
        x = rng.uniform(-3, 3)
        assert abs(rule.derivative(f, x) - df(x)) < 1e-9
    x = rule.shifts[rule.shifts > 0]
    S = np.sin(np.outer(x, freqs))
    assert np.linalg.cond(S) < 1e3
    assert np.sum(np.abs(rule.coefficients)) < 10 * max(freqs)


def test_frequencies_from_spectrum():
    # the frequencies are the distinct positive eigenvalue differences (common practice)
    np.testing.assert_allclose(frequencies_of([0.0, 1.0, 2.7]), [1.0, 1.7, 2.7])
    np.testing.assert_allclose(frequencies_of([-0.5, 0.5]), [1.0])
    np.testing.assert_allclose(frequencies_of([0, 0, -0.5, 0.5]), [0.5, 1.0])
    g = qg.Gate.from_generator("tri", np.diag([0.0, 1.0, 2.7, 0.0]))
    np.testing.assert_allclose(g.frequencies, [1.0, 1.7, 2.7])
    assert g.shift_rule.n_terms == 6
    # 1, 1.7, 2.7 are multiples of 1/10: every expectation repeats after 2 pi * 10
    assert g.period == pytest.approx(20 * np.pi)
    assert qg.Gate.from_generator("irr", np.diag([0.0, 1.0, np.sqrt(2), 0.0])).period is None


def test_standard_gate_rules():
    # common practice: Pauli rotations and phase gates have one frequency (two terms);
    # controlled rotations have frequencies 1/2 and 1 (four terms)
    for name in ("RX", "RY", "RZ", "PHASE", "CPHASE", "RXX", "RYY", "RZZ"):
        assert qg.gates.STANDARD[name].shift_rule.n_terms == 2
    for name in ("CRX", "CRY", "CRZ"):
        np.testing.assert_allclose(qg.gates.STANDARD[name].frequencies, [0.5, 1.0])
        assert qg.gates.STANDARD[name].shift_rule.n_terms == 4


def test_rule_for_frequencies_picks_the_cheapest():
    assert rule_for_frequencies([2.0]).n_terms == 2
    assert rule_for_frequencies([1.0, 2.0, 3.0]).n_terms == 6
    np.testing.assert_allclose(rule_for_frequencies([2.0], shift=1.0).coefficients[0],
                               2.0 / (2 * np.sin(1.0)))
    with pytest.raises(ValueError, match="frequencies"):
        rule_for_frequencies([])


def test_bad_rules_and_shifts_are_refused():
    with pytest.raises(ValueError, match="shift"):
        ShiftRule.two_term(1.0, np.pi)
    with pytest.raises(ValueError, match="shift"):
        qg.expect(qg.Circuit(1).rx(0), qg.Observable({"Z": 1.0}), np.array([0.1]), shift=0.0)
    with pytest.raises(ValueError, match="shifts and coefficients"):
        ShiftRule([0.1, 0.2], [1.0])
    with pytest.raises(ValueError, match="frequencies"):
        ShiftRule.general([1.0, -2.0])
    with pytest.raises(TypeError, match="shift_rule"):
        qg.Gate.from_generator("g", np.diag([0.0, 1.0]), shift_rule={"pi/2": 0.5})


@settings(max_examples=15)
@given(st.lists(st.floats(0.2, 4.0), min_size=1, max_size=3,
                unique_by=lambda w: round(w, 1)).filter(
    lambda ws: min(np.diff(sorted(ws)), default=1.0) > 0.15),
       st.integers(0, 2 ** 31))
def test_derived_rule_is_exact_for_any_spectrum(freqs, seed):
    # whatever rule is chosen (two-term, equidistant or general), it differentiates every
    # trigonometric polynomial with those frequencies exactly (derivative written by hand)
    rule = rule_for_frequencies(sorted(freqs))
    rng = np.random.default_rng(seed)
    f, df = _trig_poly(freqs, rng)
    x = rng.uniform(-3, 3)
    scale = sum(abs(c) for c in rule.coefficients) * 4       # size of the summed values
    assert abs(rule.derivative(f, x) - df(x)) < 1e-9 * max(1.0, scale)
