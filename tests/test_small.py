"""The small-state paths agree with the general engine and with an independent dense simulator.

`qgradlib.engine.small` (the lean run and adjoint pass), the phase-vector readout of
`qgradlib.engine.measure`, and the memoised parts of a call (checked options, shift plans,
unique rows, memory readings) must change nothing but speed: every result is compared with
the references of tests/reference (numpy.kron of every gate's full matrix, generator gates
by scipy.linalg.expm, exact derivatives by scipy.linalg.expm_frechet) and with the general
engine (``fuse=False``), to 1e-12.
"""
import numpy as np
import pytest
from autograd import grad
from hypothesis import given, strategies as st

import qgradlib as qg
from qgradlib.engine import adjoint, memory, small
from qgradlib.engine.measure import apply_observables, expectations
from qgradlib.engine.statevector import run
from qgradlib.rules.plans import first_order_points
from test_fusion import circuits
from reference import (angle_gradient, circuit_ops, dense_expectation, dense_state,
                       observable_dense)

# random circuits of standard gates, fixed angles included (the strategy of the fusion tests);
# up to 8 qubits, where the widened tail products start (2**8 amplitudes)
SIZES = 8


def _rows(c, seed, B, same):
    rng = np.random.default_rng(seed)
    phi = rng.uniform(-4, 4, size=(B, len(c.parametric_operations)))
    if same:
        phi[:] = phi[0]
    return phi


def _words(n, rng, k):
    return {"".join(rng.choice(list("IXYZ"), n)): float(rng.normal()) for _ in range(k)}


@given(circuits(max_n=SIZES), st.integers(0, 2 ** 31), st.integers(1, 3), st.booleans())
def test_small_run_equals_dense_reference_and_general_engine(c, seed, B, same):
    phi = _rows(c, seed, B, same)
    got = small.run(c, phi)
    # reference: dense simulator of tests/reference (kron-built gates, expm for generators)
    want = np.array([dense_state(circuit_ops(c, row), c.n_qubits) for row in phi])
    assert np.max(np.abs(got - want)) <= 1e-12
    assert np.max(np.abs(got - run(c, phi, fuse=False))) <= 1e-12


@given(circuits(max_n=6), st.integers(0, 2 ** 31), st.integers(1, 3), st.booleans())
def test_small_adjoint_equals_exact_derivatives(c, seed, B, same):
    n = c.n_qubits
    phi = _rows(c, seed, B, same)
    H = qg.Observable(_words(n, np.random.default_rng(seed), 3))
    M = observable_dense(H.terms, n)
    into = lambda psi, out, scratch: apply_observables(psi, n, [H], None, out, scratch)  # noqa: E731
    got = adjoint.adjoint_gradient(c, phi, observable_into=into)
    # reference: 2 Re <psi|O|d_k psi> with dU/da from the dense simulator
    want = np.array([angle_gradient(c, row, M) for row in phi]).reshape(got.shape)
    assert np.max(np.abs(got - want), initial=0.0) <= 1e-12
    general = adjoint.adjoint_gradient(c, phi, observable_into=into, fuse=False)
    assert np.max(np.abs(got - general), initial=0.0) <= 1e-12


def test_small_adjoint_leaves_unwanted_columns_at_zero():
    c = qg.Circuit(3).ry(0).cnot(0, 1).rx(1).rzz(1, 2).ry(2)
    phi = np.array([[0.3, -0.8, 1.1, 0.4]])
    H = qg.Observable({"ZZI": 1.0, "IXY": 0.5})
    into = lambda psi, out, scratch: apply_observables(psi, 3, [H], None, out, scratch)  # noqa: E731
    full = adjoint.adjoint_gradient(c, phi, observable_into=into)
    part = adjoint.adjoint_gradient(c, phi, observable_into=into, columns=[1, 3])
    assert part[0, 0] == 0.0 and part[0, 2] == 0.0
    np.testing.assert_allclose(part[0, [1, 3]], full[0, [1, 3]], atol=1e-14)


@pytest.mark.parametrize("n", [1, 3, 6, 10])
def test_phase_vector_readout_equals_dense_matrices(n):
    rng = np.random.default_rng(n)
    obs = [qg.Observable(_words(n, rng, 5)), qg.Observable(_words(n, rng, 2))]
    psi = rng.normal(size=(3, 2 ** n)) + 1j * rng.normal(size=(3, 2 ** n))
    psi /= np.linalg.norm(psi, axis=1, keepdims=True)
    mats = [observable_dense(o.terms, n) for o in obs]
    # reference: <psi|O|psi> and O psi with the dense matrices of tests/reference
    want = np.array([[dense_expectation(p, m) for m in mats] for p in psi])
    np.testing.assert_allclose(expectations(psi, n, obs), want, atol=1e-12)
    w = rng.normal(size=(3, 2))
    applied = apply_observables(psi, n, obs, w)
    want_applied = np.array([sum(w[b, k] * mats[k] @ psi[b] for k in range(2)) for b in range(3)])
    np.testing.assert_allclose(applied, want_applied, atol=1e-12)
    one = apply_observables(psi, n, obs[:1], w[:, :1])
    np.testing.assert_allclose(one, np.array([w[b, 0] * mats[0] @ psi[b] for b in range(3)]),
                               atol=1e-12)


def test_checked_options_are_reused_only_for_the_same_call():
    c = qg.Circuit(2).ry(0).cnot(0, 1).ry(1)
    Z = qg.Observable({"ZI": 1.0})
    X = qg.Observable({"IX": 1.0})
    theta = np.array([0.4, 0.9])
    # common practice: <Z0> = cos(theta0) after RY(theta0) on |0> (the CNOT keeps qubit 0)
    assert np.isclose(qg.expect(c, Z, theta), np.cos(0.4))
    psi = dense_state(circuit_ops(c, theta), 2)
    assert np.isclose(qg.expect(c, X, theta), dense_expectation(psi, observable_dense(X.terms, 2)))
    with qg.Ledger() as shift_book:
        g_shift = grad(lambda t: qg.expect(c, Z, t))(theta)
    with qg.Ledger() as adjoint_book:
        g_adj = grad(lambda t: qg.expect(c, Z, t, gradient="adjoint"))(theta)
    # common practice: two-term rule, 2 circuits per parameter plus the value
    assert shift_book.circuits == 2 * 2 + 1 and adjoint_book.circuits == 1
    np.testing.assert_allclose(g_shift, g_adj, atol=1e-12)
    # a bad option after a good one with equal hash (True == 1) is still refused
    qg.expect(c, Z, theta, splits=1)
    with pytest.raises(ValueError, match="splits"):
        qg.expect(c, Z, theta, splits=True)
    # a circuit that grows is evaluated as it is now
    c.rx(0, angle=np.pi)
    assert np.isclose(qg.expect(c, Z, theta), -np.cos(0.4))


def test_memory_guard_still_refuses_after_a_reused_spec(monkeypatch):
    c = qg.Circuit(3).ry(0)
    Z = qg.Observable({"ZII": 1.0})
    qg.expect(c, Z, np.array([0.1]))
    monkeypatch.setattr(memory, "available_bytes", lambda: 1000)
    monkeypatch.setattr(memory, "_recent", [0.0, -1, None])
    with pytest.raises(memory.StateTooLarge):
        qg.expect(c, Z, np.array([0.1]))


def test_recent_reading_serves_small_requests_and_not_large_ones(monkeypatch):
    reads = []
    monkeypatch.setattr(memory, "available_bytes", lambda: reads.append(1) or 10 ** 9)
    monkeypatch.setattr(memory, "_recent", [0.0, -1, None])
    memory.recent_available(10)
    assert reads == [1]             # nothing read before: a reading now
    monkeypatch.setattr(memory, "_recent", [memory.time.monotonic(), 10 ** 9, memory.os.getpid()])
    assert memory.recent_available(10 ** 6) == 10 ** 9 and reads == [1]
    memory.recent_available(10 ** 8)                     # above 1/64 of the reading
    assert reads == [1, 1]


@pytest.mark.parametrize("shift", [None, 0.7])
def test_memoised_plan_equals_the_rule_of_each_gate(shift):
    c = qg.Circuit(2).ry(0).crx(0, 1).rz(1, param=0, scale=2.0)
    phi = np.array([[0.2, 0.5, 0.4], [1.0, -0.3, 2.0]])
    cols = (0, 1, 2)
    first = first_order_points(c, phi, None, cols, shift=shift)
    again = first_order_points(c, phi + 1.0, None, cols, shift=shift)
    # the points move with phi, the coefficients and names do not
    np.testing.assert_allclose(again[0], first[0] + 1.0, atol=1e-14)
    np.testing.assert_array_equal(again[2], first[2])
    assert again[3] == first[3]
    # common practice: a two-term rule with shift s has coefficients +-1/(2 sin s)
    s = np.pi / 2 if shift is None else shift
    assert np.isclose(first[2][0].max(), 1 / (2 * np.sin(s)))
    # CRX's four-term rule is used whatever the shift (its spectrum has two frequencies)
    assert np.count_nonzero(first[2][1]) == 4


def test_repeated_and_periodic_rows_run_once_in_order():
    c = qg.Circuit(1).ry(0)
    Z = qg.Observable({"Z": 1.0})
    spec = qg.evaluation.expectation._spec(c, "expect", observables=[Z])
    # common practice: RY's expectation values have period 2 pi in its angle, so a + 2 pi
    # is the same circuit (the state differs by a global phase only)
    phi = np.array([[0.3], [1.2], [0.3 + 2 * np.pi], [1.2], [-0.5]])
    with qg.Ledger() as book:
        vals = qg.evaluation.evaluate(phi, spec)
    assert book.circuits == 3
    np.testing.assert_allclose(vals[:, 0], np.cos(phi[:, 0]), atol=1e-12)   # <Z> = cos(a)
