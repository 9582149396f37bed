"""Rules checked against the gate, and thresholds relative to the generator's scale
(issue 19 items 4 and 5)."""
import numpy as np
import pytest
from autograd import grad
from scipy.linalg import expm

import qgradlib as qg
from qgradlib import curvature
from qgradlib.rules.shift_rules import ShiftRule, check_rule, frequencies_of

Z = np.diag([1.0, -1.0])
X = np.array([[0.0, 1.0], [1.0, 0.0]])


def test_a_two_term_rule_for_a_four_term_spectrum_is_refused():
    # eigenvalues 0, 1, 2.7, 0: frequencies 1, 1.7, 2.7; a two-term rule for frequency 1 is
    # exact for that frequency only (before: accepted, and the gradient came out wrong)
    M = np.diag([0.0, 1.0, 2.7, 0.0])
    with pytest.raises(ValueError, match="not exact for the gate's frequencies"):
        qg.Gate.from_generator("hop", M, shift_rule=ShiftRule.two_term(1.0))
    # the gate's own (general) rule passes the same check (common practice: a rule is exact
    # for f = 1, cos(w x), sin(w x) of every frequency w)
    g = qg.Gate.from_generator("hop", M)
    check_rule(g.shift_rule, g.frequencies)
    # a correct rule of one's own is accepted and used: for a single frequency any shift
    # s in (0, pi) gives an exact two-term rule (Schuld et al., PRA 99, 032331 (2019))
    own = ShiftRule.two_term(1.0, shift=0.4)
    g1 = qg.Gate.from_generator("tilt", X / 2, shift_rule=own)
    assert g1.shift_rule is own
    c = qg.Circuit(1).h(0).add(g1, (0,))
    H = qg.Observable({"Y": 1.0})
    d = grad(lambda t: qg.expect(c, H, t))(np.array([0.3]))
    a = grad(lambda t: qg.expect(c, H, t, gradient="adjoint"))(np.array([0.3]))
    assert np.allclose(d, a, atol=1e-12)


def test_a_two_term_rule_for_a_mixer_with_several_frequencies_is_refused():
    # issue 19: a generator with several frequencies given a two-term rule gave a wrong gradient
    M = np.array([[0, 1, 0, 0], [1, 0, 0.5, 0], [0, 0.5, 0, 1.3], [0, 0, 1.3, 0]], dtype=float)
    assert frequencies_of(np.linalg.eigvalsh(M)).size > 1
    with pytest.raises(ValueError, match="not exact"):
        qg.Gate.from_generator("mixer", M, shift_rule=ShiftRule.two_term(1.0))


def _tiny_circuit(eps):
    g = qg.Gate.from_generator("tiny", eps * Z / 2)
    return qg.Circuit(1).h(0).add(g, (0,)), qg.Observable({"X": 1.0})


def test_a_tiny_generator_is_differentiated_by_every_path():
    # <X> after H and expm(-i a eps Z/2) is cos(eps a) (common practice): d/da = -eps sin(eps a),
    # d2/da2 = -eps**2 cos(eps a); before, frequency eps = 1e-9 fell under an absolute 1e-8 and
    # the shift, curvature and metric paths refused the gate
    eps = 1e-9
    c, H = _tiny_circuit(eps)
    a = 0.7e9                                     # eps * a = 0.7
    theta = np.array([a])
    assert np.isclose(qg.gates.RZ.frequencies[0], 1.0)
    assert np.allclose(frequencies_of(np.linalg.eigvalsh(eps * Z / 2)), [eps], rtol=1e-12)
    exact = -eps * np.sin(0.7)
    for method in ("shift", "adjoint"):
        g = grad(lambda t: qg.expect(c, H, t, gradient=method))(theta)[0]
        assert np.isclose(g, exact, rtol=1e-9, atol=0), (method, g)
    r = curvature.hessian(c, H, theta)
    assert np.isclose(r.gradient[0], exact, rtol=1e-9, atol=0)
    assert np.isclose(r.hessian[0, 0], -eps ** 2 * np.cos(0.7), rtol=1e-7, atol=0)
    # metric of |psi> = (e^{-i eps a/2}|0> + e^{i eps a/2}|1>)/sqrt(2): the variance of
    # eps Z/2 in that state, eps**2 / 4 (Stokes et al., Quantum 4, 269 (2020))
    for structure in ("full", "layerwise", "diagonal"):
        g = curvature.metric_tensor(c, theta, structure=structure)
        assert np.isclose(g[0, 0], eps ** 2 / 4, rtol=1e-7, atol=0), structure


def test_a_global_phase_generator_has_a_zero_derivative():
    # U(a) = expm(-i a c I) multiplies the state by a phase: no expectation value changes
    # (common practice); before, every shift path raised "does not change any expectation value"
    phase = qg.Gate.from_generator("phase", 0.8 * np.eye(2))
    assert phase.frequencies.size == 0 and phase.shift_rule is None
    c = qg.Circuit(1).ry(0).add(phase, (0,))
    H = qg.Observable({"Z": 1.0})
    theta = np.array([0.4, 1.1])
    with qg.Ledger() as book:
        g = grad(lambda t: qg.expect(c, H, t))(theta)
    assert np.allclose(g, [-np.sin(0.4), 0.0], atol=1e-12)
    assert book.executions == 3               # value + RY's two shifts; none for the phase
    assert np.allclose(grad(lambda t: qg.expect(c, H, t, gradient="adjoint"))(theta), g, atol=1e-12)
    r = curvature.hessian(c, H, theta)
    assert np.allclose(r.hessian, [[-np.cos(0.4), 0.0], [0.0, 0.0]], atol=1e-12)
    assert np.allclose(curvature.metric_tensor(c, theta), [[0.25, 0.0], [0.0, 0.0]], atol=1e-12)


def test_tiny_generators_that_do_not_commute_are_two_layers():
    # eps X and eps Z do not commute however small eps is: an absolute 1e-10 called them
    # commuting and put them in one layer
    eps = 1e-7
    a = qg.Gate.from_generator("tx", eps * X / 2)
    b = qg.Gate.from_generator("tz", eps * Z / 2)
    c = qg.Circuit(1).add(a, (0,)).add(b, (0,))
    assert len(curvature.layers(c)) == 2
    # and a tiny off-diagonal generator is not taken for a diagonal one
    assert not qg.Gate.from_generator("tx", 1e-12 * X).diagonal
    assert np.allclose(qg.Gate.from_generator("tx", 1e-12 * X).matrix(1e11),
                       expm(-1j * 1e11 * 1e-12 * X), atol=1e-12)     # scipy's expm
