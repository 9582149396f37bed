"""qg.check.gradients: the audit table across methods."""
import dataclasses

import numpy as np
import pytest

import qgradlib as qg
from derivative_cases import random_pauli_observable, scramble, to_circuit
from reference import derivatives as ref


def _case():
    rng = np.random.default_rng(0)
    ops = scramble(2, rng) + [("RY", (0,), (0, 1.0, 0.0)), ("CRX", (0, 1), (1, 1.0, 0.0)),
                              ("RZ", (1,), (0, 2.0, 0.0))]
    obs, M = random_pauli_observable(2, rng)
    return ops, to_circuit(ops, 2), obs, M, np.array([0.4, -0.9])


def test_report_sets_methods_side_by_side():
    ops, c, obs, M, theta = _case()
    r = qg.check.gradients(c, obs, theta, seed=0)
    assert [m.method for m in r.methods] == ["shift", "adjoint", "difference", "autograd-check"]
    # the reference is the exact gradient (expm_frechet on the dense reference)
    np.testing.assert_allclose(r.reference, ref.gradient(ops, theta, 2, M), atol=1e-10)
    assert r["shift"].deviation < 1e-12
    assert 0 < r["difference"].deviation < 1e-8
    assert r["autograd-check"].passed is True
    assert r["autograd-check"].deviation < 1e-8        # autograd's own numerical gradient
    assert r.max_deviation == max(m.deviation for m in r.methods)
    assert r.ok(1e-6) and not r.ok(1e-14)
    # device cost, counted by the ledger: (value + 2 RY + 4 CRX + 2 RZ) x settings
    settings = qg.shots.n_settings(obs)
    assert r["shift"].executions == 9 * settings
    # finite differences step theta: value + 2 per parameter (the RZ shares theta[0])
    assert r["difference"].executions == (1 + 2 * 2) * settings
    assert r["adjoint"].executions is None
    assert all(m.seconds >= 0 for m in r.methods)
    text = str(r)
    for word in ("shift", "adjoint", "difference", "autograd-check", "passed", "sim only",
                 "not device measurements", f"{r.reference[0]:.9f}"):
        assert word in text
    with pytest.raises(dataclasses.FrozenInstanceError):
        r.shots = 5
    with pytest.raises(dataclasses.FrozenInstanceError):
        r.methods[0].deviation = 0.0


def test_a_wrong_rule_is_caught():
    # a deliberately wrong rule (twice the two-term coefficients): shift and autograd's check
    # must both flag it, while finite differences still agree with the reference
    wrong = qg.ShiftRule([np.pi / 2, -np.pi / 2], [1.0, -1.0])
    with pytest.raises(ValueError, match="not exact"):      # refused where a gate is built
        qg.Gate.from_generator("bad", ref.PY / 2, shift_rule=wrong)
    # a gate that carries it anyway (built past the constructor) is caught by the audit
    g = dataclasses.replace(qg.Gate.from_generator("bad", ref.PY / 2), rule=wrong)
    c = qg.Circuit(1).h(0).add(g, 0)
    r = qg.check.gradients(c, qg.Observable({"X": 1.0}), np.array([0.3]), seed=1)
    assert r["shift"].deviation > 0.1
    assert r["autograd-check"].passed is False
    assert r["difference"].deviation < 1e-8
    assert not r.ok(1e-3)
    assert "FAILED" in str(r)


def test_shots_and_lists_of_observables():
    ops, c, obs, M, theta = _case()
    Z = qg.Observable({"ZI": 1.0})
    r = qg.check.gradients(c, [obs, Z], theta, shots=500, seed=3)
    assert r.reference.shape == (2, 2)
    for m in r.methods:
        assert m.gradient.shape == (2, 2)
    # common practice: shots = executions x shots per execution
    assert r["shift"].shots == r["shift"].executions * 500
    assert r["autograd-check"].shots == 0
    # a shot-noise estimate deviates, but within reason. Each shifted value has variance at
    # most ||O||_1**2 / shots, and the rule's weights on theta[0] (RY: +-1/2; RZ scaled by 2:
    # +-1) have squared sum 2.5 (theta[1], CRX: 2 (c+**2 + c-**2) = 3/8 is smaller), so the
    # standard deviation is at most sqrt(2.5) ||O||_1 / sqrt(500). Six of those for the
    # largest of four entries: false-failure rate below 4 * 2e-9 (normal tail)
    bound = np.sqrt(2.5) * max(sum(abs(v) for v in o.terms.values()) for o in (obs, Z)) / np.sqrt(500)
    assert 0 < r["shift"].deviation < 6 * bound
    again = qg.check.gradients(c, [obs, Z], theta, shots=500, seed=3)
    np.testing.assert_array_equal(again["shift"].gradient, r["shift"].gradient)


def test_subset_of_methods_and_bad_input():
    _, c, obs, _, theta = _case()
    r = qg.check.gradients(c, obs, theta, methods=("shift",))
    assert [m.method for m in r.methods] == ["shift"]
    with pytest.raises(ValueError, match="methods"):
        qg.check.gradients(c, obs, theta, methods=("shift", "exact"))
    with pytest.raises(TypeError, match="methods"):
        qg.check.gradients(c, obs, theta, methods="shift")
    with pytest.raises(ValueError, match="theta"):
        qg.check.gradients(c, obs, np.zeros((2, 2)))
    with pytest.raises(KeyError, match="adjoint"):
        r["adjoint"]
    with pytest.raises(ValueError, match="tol"):
        r.ok(-1.0)


def test_global_random_state_is_left_alone():
    _, c, obs, _, theta = _case()
    np.random.seed(123)
    before = np.random.get_state()[1].copy()
    qg.check.gradients(c, obs, theta, seed=0)
    np.testing.assert_array_equal(np.random.get_state()[1], before)


def test_a_circuit_without_parameters_gets_an_empty_report():
    # before: np.max of an empty deviation raised NumPy's "zero-size array to reduction"
    c = qg.Circuit(2).h(0).cnot(0, 1)
    for obs, shape in ((qg.Observable({"ZZ": 1.0}), (0,)),
                       ([qg.Observable({"ZZ": 1.0}), qg.Observable({"XX": 1.0})], (2, 0))):
        r = qg.check.gradients(c, obs, np.zeros(0), seed=0)
        assert all(m.gradient.shape == shape for m in r.methods)
        assert r.max_deviation == 0.0 and r.ok()
        # only the value runs: one circuit per observable's setting (common practice)
        assert r["shift"].executions == r["difference"].executions == len(np.atleast_1d(obs))
        assert "no parameters" in str(r)
