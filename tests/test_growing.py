"""The growing batch of one-column deviations (`qgradlib.engine.growing`) changes nothing but speed.

Its final states are compared with the dense simulator of tests/reference (numpy.kron of
every gate's full matrix, generator gates by scipy.linalg.expm) and with the general engine
(``fuse=False``) to 1e-12; gradients through it with autograd's numerical check
(`autograd.test_util.check_grads`); the ledger still counts every shifted circuit.
"""
import numpy as np
import pytest
from autograd import grad
from autograd.test_util import check_grads
from hypothesis import given, strategies as st

import qgradlib as qg
from qgradlib.engine import growing, small
from qgradlib.engine.heisenberg import deviations
from qgradlib.engine.statevector import run
from qgradlib.evaluation.expectation import _unique_rows
from qgradlib.rules.plans import distinct_points, first_order_points
from test_fusion import circuits
from reference import circuit_ops, dense_expectation, dense_state, observable_dense


def _plan_rows(c, seed, extra):
    """The points of a first-order plan of every column at a random point, and with
    ``extra`` more rows: the point itself, a repeated point, and one-column moves of any size."""
    rng = np.random.default_rng(seed)
    G = len(c.parametric_operations)
    phi = rng.uniform(-4, 4, size=(1, G))
    rows = np.asarray(first_order_points(c, phi, None, tuple(range(G)))[0])
    if extra and G:
        k = rng.integers(0, G, size=4)
        more = np.repeat(phi, 6, axis=0)
        more[np.arange(4), k] += rng.uniform(-7, 7, size=4)
        rows = np.vstack([more[:1], rows, more])
    return rows


@given(circuits(max_n=8), st.integers(0, 2 ** 31), st.booleans())
def test_grown_states_equal_dense_reference_and_general_engine(c, seed, extra):
    rows = _plan_rows(c, seed, extra)
    if rows.shape[0] < 2 or not small.eligible(c):
        return
    got = growing.run_grown(c, rows)
    assert got is not None
    # reference: dense simulator of tests/reference (kron-built gates, expm for generators)
    want = np.array([dense_state(circuit_ops(c, row), c.n_qubits) for row in rows])
    assert np.max(np.abs(got - want)) <= 1e-12
    assert np.max(np.abs(got - run(c, rows, fuse=False))) <= 1e-12
    # the values without the rows' states: against the dense states' values
    n = c.n_qubits
    obs = [qg.Observable({"Z" * n: 1.0, "X" + "I" * (n - 1): 0.5, "I" * (n - 1) + "Y": -0.3}),
           qg.Observable({"Y" * n: 0.7})]
    vals = growing.grown_values(c, rows, obs)
    for k, o in enumerate(obs):
        M = observable_dense(o.terms, n)
        assert np.max(np.abs(vals[:, k] - [dense_expectation(w, M) for w in want])) <= 1e-12


def test_rows_of_many_moved_columns_are_refused():
    # common practice: a row moved in two angles is no one-column deviation
    c = qg.Circuit(2).ry(0).ry(1)
    assert growing.run_grown(c, np.array([[0.0, 0.0], [0.5, 0.5], [0.0, 0.0]])) is None
    # the growing batch finds its reference with heisenberg.deviations (G: the reference itself)
    assert deviations(np.array([[0.1, 0.2], [0.3, 0.4]])) is None
    ref, col = deviations(np.array([[0.1, 0.2], [0.1, 0.4]]))   # either row is the reference
    assert ref.tolist() == [0.1, 0.2] and col.tolist() == [2, 1]


def test_reference_found_when_the_first_row_is_moved():
    phi = np.array([[9.0, 2.0, 3.0], [1.0, 2.0, 3.0], [1.0, 7.0, 3.0], [1.0, 2.0, 3.0]])
    ref, col = deviations(phi)
    assert ref.tolist() == [1.0, 2.0, 3.0] and col.tolist() == [0, 3, 1, 3]
    # and the growing batch runs from it: the states equal separate runs
    c = qg.Circuit(2).ry(0).ry(1).cz(0, 1).rx(1)
    got = growing.run_grown(c, phi)
    assert got is not None
    assert np.max(np.abs(got - run(c, phi, fuse=False))) <= 1e-12


def _mixed(n, layers):
    """Pauli rotations (twin rows), a four-term gate (CRX) and diagonal rotations."""
    c = qg.Circuit(n)
    for _ in range(layers):
        for q in range(n):
            c.ry(q)
            c.rx(q)
        for q in range(n - 1):
            c.cz(q, q + 1)
        c.crx(0, n - 1)
        c.rzz(1, 2)
        c.rz(n - 1)
    return c


@pytest.mark.parametrize("n", [6, 7])
def test_shift_gradient_through_the_growing_batch(n):
    c = _mixed(n, 2)
    H = qg.Observable({"Z" * 2 + "I" * (n - 2): 1.0, "X" + "I" * (n - 1): 0.5, "I" * (n - 1) + "Y": -0.3})
    theta = np.random.default_rng(n).uniform(-3, 3, size=c.n_params)
    f = lambda t: qg.expect(c, H, t)  # noqa: E731
    g = grad(f)(theta)
    # the general engine (unfused: no small-state path, no growing batch)
    want = grad(lambda t: qg.expect(c, H, t, fuse=False))(theta)
    assert np.max(np.abs(g - want)) <= 1e-12
    # autograd's numerical check of the shift-rule gradient
    check_grads(f, modes=["rev"], order=1)(theta)


def test_ledger_counts_every_shifted_circuit():
    # common practice: a gradient of m two-term parameters takes 2m circuits, plus the value
    c = qg.Circuit(6)
    for _ in range(5):
        for q in range(6):
            c.ry(q)
        for q in range(5):
            c.cz(q, q + 1)
    H = qg.Observable({"ZZIIII": 1.0, "XIIIII": 0.5})
    with qg.Ledger() as book:
        grad(lambda t: qg.expect(c, H, t))(np.linspace(0.1, 3.0, c.n_params))
    assert book.circuits == 2 * c.n_params + 1


@given(circuits(max_n=4), st.integers(0, 2 ** 31), st.sampled_from([None, 0.3, np.pi / 2]))
def test_points_distinct_by_construction_are_distinct(c, seed, shift):
    # the general search for repeated points (`_unique_rows`, on the grid of ticks modulo
    # each gate's period) finds none where the plan says its points are distinct
    G = len(c.parametric_operations)
    cols = tuple(j for j in range(G) if c.parametric_operations[j].param is not None)
    phi = np.random.default_rng(seed).uniform(-4, 4, size=(1, G))
    points = np.asarray(first_order_points(c, phi, None, cols, shift=shift)[0])
    if distinct_points(c, cols, shift=shift) and points.shape[0]:
        assert len(_unique_rows(points, c, None)[0]) == points.shape[0]


def test_shifts_a_whole_period_apart_are_not_distinct():
    # common practice: RX has period 4 pi, so shifts of pi/2 and pi/2 + 4 pi are one circuit
    from qgradlib.rules import plans
    pops = qg.Circuit(1).rx(0).parametric_operations
    assert not plans._distinct(np.array([[np.pi / 2], [np.pi / 2 + 4 * np.pi]]), pops)
    assert not plans._distinct(np.array([[4 * np.pi]]), pops)
    assert plans._distinct(np.array([[np.pi / 2], [-np.pi / 2]]), pops)
