"""Shared-prefix batches: branching changes neither the values nor the ledger.

References: the unbranched engine run of each row (the same rows, one batch, no trunk), and
an independent dense simulation for the values; the ledger's counts of a two-term gradient
(2 circuits per parameter, # common practice).
"""
import numpy as np
import pytest
from autograd import grad
from hypothesis import given, strategies as st

import qgradlib as qg
from qgradlib.engine.branch import RUNS, divergence, prefix_tree, run_branched, run_prefix_tree
from qgradlib.engine.statevector import run
from qgradlib.rules.plans import first_order_points

try:
    from .test_fusion import PULSE, circuits, dense_reference
except ImportError:  # tests/ is not a package
    from test_fusion import PULSE, circuits, dense_reference


def _plan(c, seed, B=1):
    phi = np.atleast_2d(c.angles(np.random.default_rng(seed).normal(size=(B, c.n_params))))
    cols = [k for k, op in enumerate(c.parametric_operations) if op.param is not None]
    points, ins, _, _ = first_order_points(c, phi, None, cols)
    return phi, np.asarray(points), ins


@given(circuits(max_n=5, pulses=True), st.integers(0, 2 ** 31), st.booleans(), st.integers(1, 3))
def test_branched_rows_equal_separate_runs(c, seed, fuse, B):
    # several parameter rows: the reference row mixes their angles, rows diverge anywhere
    phi, points, ins = _plan(c, seed, B)
    if points.shape[0] < 2:
        return
    got = run_branched(c, points, ins, fuse=fuse, min_saving=0.0)
    if got is None:
        return
    assert np.max(np.abs(got - run(c, points, ins, fuse=False))) <= 1e-12
    if ins is None:
        # reference: dense kron/expm simulation of one row
        assert np.allclose(got[0], dense_reference(c, points[0]), atol=1e-10)


def test_rows_diverge_at_their_shifted_column():
    c = qg.Circuit(2).ry(0).ry(1).cz(0, 1).rx(0)
    phi, points, _ = _plan(c, 1)
    ref, _, first = divergence(points)
    assert np.allclose(ref, phi[0])  # the column-wise mode of a shift plan: unshifted angles
    assert first.tolist() == [0, 0, 1, 1, 2, 2]


def test_arbitrary_batches_fall_back_to_a_plain_run():
    c = qg.Circuit(2).ry(0).ry(1)
    rows = np.random.default_rng(0).normal(size=(5, 2))
    assert run_branched(c, rows) is None


def _ising(n):
    terms = {"I" * q + "ZZ" + "I" * (n - q - 2): -1.0 for q in range(n - 1)}
    terms.update({"I" * q + "X" + "I" * (n - q - 1): -0.5 for q in range(n)})
    return qg.Observable(terms)


def _layered(n, layers):
    c = qg.Circuit(n)
    for _ in range(layers):
        for q in range(n):
            c.ry(q)
        for q in range(n - 1):
            c.cz(q, q + 1)
    return c


@pytest.mark.parametrize("memory", [None, 3 * 16 * 2 ** 5 * 4])
def test_gradient_ledger_and_values_unchanged_by_branching(memory, monkeypatch):
    n = 5
    c = _layered(n, 2)
    H = _ising(n)
    theta = np.random.default_rng(2).normal(size=c.n_params)
    f = lambda t: qg.expect(c, H, t, memory=memory)  # noqa: E731
    with qg.Ledger() as book:
        g = grad(f)(theta)
    # common practice: two-term rule, 2 circuits per parameter, plus the forward value
    assert book.circuits == 2 * c.n_params + 1
    import qgradlib.evaluation.rows as ex
    monkeypatch.setattr(ex, "run_branched", lambda *a, **k: None)
    with qg.Ledger() as plain_book:
        g_plain = grad(f)(theta)
    assert np.max(np.abs(g - g_plain)) <= 1e-12
    assert plain_book.circuits == book.circuits and plain_book.executions == book.executions
    # reference: adjoint method (a different algorithm) agrees with the shift rule
    g_adj = grad(lambda t: qg.expect(c, H, t, gradient="adjoint"))(theta)
    assert np.allclose(g, g_adj, atol=1e-10)


def test_stochastic_rule_points_branch_at_the_hamiltonian_gate():
    c = qg.Circuit(2).ry(0).add(PULSE, 1).cnot(0, 1).ry(1)
    phi, points, ins = _plan(c, 3)
    got = run_branched(c, points, ins, min_saving=0.0)
    assert got is not None
    assert np.max(np.abs(got - run(c, points, ins, fuse=False))) <= 1e-12


def test_fused_gate_moved_ahead_of_a_branch_point_is_not_shared():
    # RY(2) fuses into the H(2) step, which runs before RX(1)'s step; with two parameter
    # rows the reference mixes them, so rows must not share that step with the trunk
    c = qg.Circuit(3).crx(1, 2).cz(1, 0).h(2).rx(1).ry(2)
    theta = np.array([[-1.43051562, -0.26007862, 0.90747937], [0.62778725, -0.78184073, 1.64476125]])
    phi = np.atleast_2d(c.angles(theta))
    points, ins, _, _ = first_order_points(c, phi, None, [0, 1, 2])
    points = np.asarray(points)
    got = run_branched(c, points, ins, min_saving=0.0)
    assert np.max(np.abs(got - run(c, points, ins, fuse=False))) <= 1e-12


@pytest.mark.parametrize("runs", [1, 3, RUNS + 2])
def test_kept_gate_applied_run_by_run_equals_separate_runs(runs):
    # rows sharing a trunk take a kept column's angle in ``runs`` runs of equal values (the
    # branched rows keep theirs in blocks); each run gets one matrix, or every row its own
    c = qg.Circuit(3).h(0).ry(1).crx(0, 2).cz(1, 2).rz(0).ry(2).cnot(2, 0).rx(1)
    rng = np.random.default_rng(runs)
    base = rng.normal(size=len(c.parametric_operations))
    rows = np.repeat(base[None], 2 * runs + 6, axis=0)
    rows[1:1 + 2 * runs, 1] += np.repeat(rng.normal(size=runs), 2)
    rows[-3:, 3] += rng.normal(size=3)           # a few rows also differ further on
    got = run_branched(c, rows, min_saving=0.0)
    assert got is not None
    assert np.max(np.abs(got - run(c, rows, fuse=False))) <= 1e-12
    # reference: dense kron/expm simulation of single rows
    for p in (0, 1, rows.shape[0] - 1):
        assert np.allclose(got[p], dense_reference(c, rows[p]), atol=1e-10)


# -- a tree of prefixes: shift plans over a data set ------------------------------------------
def _data_plan(c, N, seed):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(N, c.n_inputs))
    phi = np.atleast_2d(c.angles(rng.normal(size=c.n_params), inputs=X))
    cols = [k for k, op in enumerate(c.parametric_operations) if op.param is not None]
    return np.asarray(first_order_points(c, phi, None, cols)[0])


def _uploading(n, layers):
    c = qg.Circuit(n)
    for _ in range(layers):
        for q in range(n):
            c.ry(q, input=q)
        for q in range(n):
            c.rz(q).rx(q)
        for q in range(n - 1):
            c.cnot(q, q + 1)
    return c


@given(st.integers(1, 4), st.integers(1, 3), st.integers(1, 6), st.booleans(), st.integers(0, 2 ** 31))
def test_prefix_tree_rows_equal_separate_runs(n, layers, N, fuse, seed):
    # reference: the unbranched run of each row (no sharing at all)
    c = _uploading(n, layers)
    points = _data_plan(c, N, seed)
    got = run_prefix_tree(c, points, fuse=fuse, min_saving=0.0)
    assert got is not None
    assert np.max(np.abs(got - run(c, points, fuse=False))) <= 1e-12


@given(circuits(max_n=4), st.integers(0, 2 ** 31), st.integers(1, 4), st.booleans(), st.booleans())
def test_prefix_tree_with_derived_rows_equals_separate_runs(c, seed, B, fuse, with_values):
    # rows that differ from another (or from an unshifted point not among them) in one Pauli
    # rotation's angle are combined from that row and one extra branch: U(a + d) =
    # cos(d / 2) U(a) - 2i sin(d / 2) U(a) G for G = P / 2 (common practice)
    phi, points, _ = _plan(c, seed, B)
    rows = np.vstack([phi, points]) if with_values else points
    if rows.shape[0] < 2 or rows.shape[1] == 0:
        return
    got = run_prefix_tree(c, rows, fuse=fuse, min_saving=0.0)
    assert got is not None
    assert np.max(np.abs(got - run(c, rows, fuse=False))) <= 1e-12
    # reference: dense kron/expm simulation of single rows
    for p in {0, rows.shape[0] - 1}:
        assert np.allclose(got[p], dense_reference(c, rows[p]), atol=1e-10)


def test_prefix_tree_derives_shifted_rows_from_their_unshifted_point():
    # a two-term plan over 3 data points: 2m shifted rows a point, one twin made for each
    # point, so the tree runs 1 + m rows a point (m: the weights), not 2m
    from qgradlib.engine.branch import _generator_scales, _tree, _twins
    from qgradlib.engine.program import program

    c = _uploading(2, 2)
    points = _data_plan(c, 3, seed=6)
    steps = program(c, True).steps
    tree = _tree(steps, points, None, np.inf)
    derived, twin, col, extra = _twins(points, tree[4], tree[5], _generator_scales(steps, points.shape[1]))
    m = c.n_params
    assert extra.shape[0] == 3 and derived.size == 3 * 2 * m
    assert np.all(twin >= points.shape[0])      # every twin is a made row (no unshifted row given)
    # common practice: the two shifts of a two-term rule are +-pi/2 of the unshifted angle
    np.testing.assert_allclose(np.abs(points[derived, col] - extra[twin - points.shape[0], col]),
                               np.pi / 2, atol=1e-12)


def test_prefix_tree_shares_each_data_points_prefix_and_skips_unrelated_rows():
    c = _uploading(3, 2)
    points = _data_plan(c, 5, seed=1)
    # one reference row cannot serve rows of different data points; the tree can
    assert run_branched(c, points) is None
    assert run_prefix_tree(c, points) is not None
    rows = np.random.default_rng(2).normal(size=(8, len(c.parametric_operations)))
    assert run_prefix_tree(c, rows) is None         # no two rows share a first angle
    tree = prefix_tree(np.array([[0.0, 1.0], [0.0, 2.0], [0.5, 1.0], [0.5, 1.0]]))
    assert tree[2] == tree[3] and len(set(tree.tolist())) == 3


def test_data_set_gradient_values_unchanged_by_the_tree(monkeypatch):
    # the same gradient and ledger with the tree switched off (plain runs)
    import qgradlib.evaluation.rows as rows
    from autograd import numpy as anp

    c = _uploading(3, 2)
    X = np.random.default_rng(4).normal(size=(6, 3))
    theta = np.random.default_rng(5).normal(size=c.n_params)
    H = qg.Observable({"ZII": 1.0, "IXZ": 0.5})
    f = lambda t: anp.sum(qg.expect(c, H, t, inputs=X))  # noqa: E731
    calls = []
    real = rows.run_prefix_tree
    monkeypatch.setattr(rows, "run_prefix_tree", lambda *a, **k: calls.append(1) or real(*a, **k))
    with qg.Ledger() as on:
        g_on = grad(f)(theta)
    assert calls
    monkeypatch.setattr(rows, "run_prefix_tree", lambda *a, **k: None)
    with qg.Ledger() as off:
        g_off = grad(f)(theta)
    np.testing.assert_allclose(g_on, g_off, atol=1e-12)
    assert on.executions == off.executions
