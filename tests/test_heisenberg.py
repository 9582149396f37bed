"""Rows that differ from one point in one angle each, by the carried rest of the circuit.

`qgradlib.engine.heisenberg` gives the final states of a first-order shift plan's rows from
one forward and one backward pass; `qgradlib.evaluation.rows` takes it for exact values of
small pure-state circuits. Every value is compared with running each row on its own through
the general engine (``fuse=False``, to 1e-12) and with the independent dense simulator of
tests/reference (numpy.kron of every gate's full matrix, generator gates by
scipy.linalg.expm); gradients with autograd's numerical check and the reference's exact
derivatives (scipy.linalg.expm_frechet for generator gates).
"""
import numpy as np
import pytest
from autograd import grad, hessian
from autograd.test_util import check_grads
from hypothesis import given, strategies as st

import qgradlib as qg
from qgradlib import curvature
from qgradlib.engine import heisenberg
from qgradlib.engine.measure import expectations
from qgradlib.engine.statevector import run
from qgradlib.evaluation import rows as rows_module
import qgradlib.evaluation.expectation as expectation
from qgradlib.evaluation.expectation import _angle_ticks, _spec, _unique_rows
from qgradlib.rules.plans import first_order_points
from test_fusion import circuits
from reference import circuit_ops, dense_expectation, dense_state, observable_dense, theta_gradient
from reference.curv_dense import hessian_fd

rng0 = np.random.default_rng(20261202)
# a dense two-qubit generator with six frequencies (not a Pauli rotation), and a three-qubit
# one with four: the carried rest of the circuit needs no structure of the gate
_M2 = rng0.normal(size=(4, 4)) + 1j * rng0.normal(size=(4, 4))
MIXER = qg.Gate.from_generator("mixer", generator=(_M2 + _M2.conj().T) / 4)
TRIPLE = qg.Gate.from_generator("braid", generator=qg.Observable({"XYZ": 0.5, "ZZI": 0.8}).matrix().toarray())


def _random_circuit(n, gates, seed, generators=True):
    """RX/RY/RZ/CRY and (with ``generators``) the generator gates, with H, S, CNOT and fixed
    angles between."""
    rng = np.random.default_rng(seed)
    c = qg.Circuit(n)
    for _ in range(gates):
        pick = int(rng.integers(10))
        q = int(rng.integers(n))
        r = (q + 1 + int(rng.integers(n - 1))) % n if n > 1 else q
        if pick < 3:
            (c.rx, c.ry, c.rz)[pick](q)
        elif pick == 3 and n > 1:
            c.cry(q, r)
        elif pick == 4 and n > 1 and generators:
            c.add(MIXER, (r, q))
        elif pick == 5 and n > 2 and generators:
            c.add(TRIPLE, tuple(int(x) for x in rng.permutation(n)[:3]))
        elif pick == 6:
            c.rx(q, angle=float(rng.uniform(-3, 3)))        # a fixed angle: a column too
        elif pick == 7 or n == 1:
            (c.h, c.s)[int(rng.integers(2))](q)
        else:
            c.cnot(q, r)
    return c


def _observables(n, seed, K):
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(K):
        terms = {"".join(rng.choice(list("IXYZ"), n)): float(rng.normal()) for _ in range(3)}
        out.append(qg.Observable(terms))
    return out


def _plan_rows(c, phi):
    """The first-order shift plan of every column at ``phi`` (G,), as rows (P, G)."""
    G = phi.size
    return np.asarray(first_order_points(c, phi[None], None, tuple(range(G)))[0])


def _separately(c, rows, observables):
    """Each row run on its own by the general engine, then read out."""
    return np.vstack([expectations(run(c, r[None], fuse=False), c.n_qubits, observables)
                      for r in rows])


def _dense(c, rows, observables):
    """Reference: the dense simulator of tests/reference (kron-built gates, expm generators)."""
    mats = [observable_dense(o.terms, c.n_qubits) for o in observables]
    return np.array([[dense_expectation(dense_state(circuit_ops(c, r), c.n_qubits), m)
                      for m in mats] for r in rows])


@pytest.mark.parametrize("n, gates, seed", [(1, 12, 1), (2, 30, 2), (3, 40, 3), (4, 60, 4),
                                            (5, 50, 5)])
def test_plan_rows_equal_separate_runs_and_dense_reference(n, gates, seed):
    c = _random_circuit(n, gates, seed)
    obs = _observables(n, seed, 2)                          # K = 2 observables
    phi = np.random.default_rng(seed).uniform(-4, 4, size=len(c.parametric_operations))
    rows = _plan_rows(c, phi)
    # the plan's own rows and the unshifted point among them (it is the reference)
    rows = np.vstack([rows, phi[None]])
    got = expectations(heisenberg.one_column_states(c, rows), n, obs)
    assert np.max(np.abs(got - _separately(c, rows, obs))) <= 1e-12
    # reference: dense simulator (numpy.kron gates, scipy.linalg.expm for the generator
    # gates), on about 40 of the rows (it is slow on purpose) and the unshifted point
    pick = np.r_[np.arange(0, rows.shape[0] - 1, max(1, rows.shape[0] // 40)), rows.shape[0] - 1]
    assert np.max(np.abs(got[pick] - _dense(c, rows[pick], obs))) <= 1e-12


@given(circuits(max_n=5), st.integers(0, 2 ** 31), st.integers(1, 4))
def test_random_one_column_rows_equal_separate_runs(c, seed, per):
    rng = np.random.default_rng(seed)
    G = len(c.parametric_operations)
    if G == 0:
        return
    phi = rng.uniform(-4, 4, size=G)
    cols = rng.integers(0, G, size=per * G)
    rows = np.repeat(phi[None], cols.size + 1, axis=0)
    rows[np.arange(cols.size), cols] = rng.uniform(-7, 7, size=cols.size)
    obs = _observables(c.n_qubits, seed, 3)
    got = expectations(heisenberg.one_column_states(c, rows), c.n_qubits, obs)
    assert np.max(np.abs(got - _separately(c, rows, obs))) <= 1e-12
    # reference: the dense simulator of tests/reference
    assert np.max(np.abs(got - _dense(c, rows, obs))) <= 1e-12


def test_rows_in_several_backward_blocks(monkeypatch):
    # blocks of one and three columns: the carried matrix crosses block boundaries
    c = _random_circuit(3, 40, 7)
    obs = _observables(3, 7, 1)
    phi = np.random.default_rng(7).uniform(-4, 4, size=len(c.parametric_operations))
    rows = _plan_rows(c, phi)
    want = _separately(c, rows, obs)
    for cols in (1, 3):
        monkeypatch.setattr(heisenberg, "_BLOCK_BYTES", cols * 64 * 16)
        got = expectations(heisenberg.one_column_states(c, rows), 3, obs)
        assert np.max(np.abs(got - want)) <= 1e-12


def test_deviations_find_the_reference_and_refuse_two_columns():
    phi = np.array([0.1, 0.2, 0.3])
    rows = np.vstack([phi + 0.5 * np.eye(3), phi - 0.5 * np.eye(3), phi])
    ref, col = heisenberg.deviations(rows)
    assert ref.tolist() == phi.tolist()
    assert col.tolist() == [0, 1, 2, 0, 1, 2, 3]
    two = rows.copy()
    two[0, 1] += 1.0
    assert heisenberg.deviations(two) is None
    with pytest.raises(ValueError, match="at most one column"):
        heisenberg.one_column_states(qg.Circuit(1).ry(0).ry(0).rz(0), two)


def test_deviations_when_the_first_rows_mislead():
    # the first eight rows all deviate at column 0 (an eight-term rule): their most common
    # angle there is not the reference's, the rows spread over the batch find it
    phi = np.zeros(4)
    rows = np.repeat(phi[None], 8 + 60, axis=0)
    rows[:8, 0] = np.arange(1, 9)
    rows[8 + np.arange(60), 1 + np.arange(60) % 3] = np.arange(60) + 1.0
    ref, col = heisenberg.deviations(rows)
    assert ref.tolist() == phi.tolist()
    assert col[:8].tolist() == [0] * 8 and np.all(col[8:] >= 1)


def test_bad_phi_shape():
    c = qg.Circuit(2).ry(0).cnot(0, 1).rx(1)
    with pytest.raises(ValueError, match=r"phi must have shape \(P, 2\)"):
        heisenberg.one_column_states(c, np.zeros((3, 3)))


def test_cost_model():
    # common practice of the brief: one (N, N) product is about N rows through one gate
    assert heisenberg.worthwhile(5, np.array([3]), 4)
    assert not heisenberg.worthwhile(9, np.repeat(np.arange(10), 1000), 10)
    assert not heisenberg.worthwhile(6, np.repeat(np.arange(40), 2), 40)      # 41 alive < 64
    assert heisenberg.worthwhile(6, np.repeat(np.arange(70), 2), 70)          # 71 alive > 64


# -- the path inside evaluation ------------------------------------------------------------
@pytest.fixture
def calls(monkeypatch):
    """Counts the calls of the carried path from `qgradlib.evaluation.rows`, taken from
    small batches on (the tests' circuits are short)."""
    monkeypatch.setattr(rows_module, "CARRY_WORK", 0)
    seen = []
    real = heisenberg.one_column_states
    monkeypatch.setattr(heisenberg, "one_column_states",
                        lambda *a, **k: seen.append(a[1].shape[0]) or real(*a, **k))
    return seen


def _case(n=3, gates=30, seed=11, generators=True):
    c = _random_circuit(n, gates, seed, generators)
    H = _observables(n, seed, 1)[0]
    theta = np.random.default_rng(seed).uniform(-3, 3, size=c.n_params)
    return c, H, theta


def test_shift_gradient_takes_the_path_and_is_exact(calls):
    c, H, theta = _case()
    f = lambda t: qg.expect(c, H, t)                     # noqa: E731
    g = grad(f)(theta)
    assert calls and calls[-1] >= 2 * c.n_params          # the plan's rows came here
    # reference: exact derivatives of the dense simulator (scipy.linalg.expm_frechet)
    want = theta_gradient(c, theta, observable_dense(H.terms, c.n_qubits))
    assert np.max(np.abs(g - want)) <= 1e-10
    assert np.max(np.abs(g - grad(lambda t: qg.expect(c, H, t, gradient="adjoint"))(theta))) <= 1e-10
    # reference: autograd's numerical check of the VJP
    check_grads(f, modes=["rev"], order=1)(theta)


def test_gradient_of_several_observables_and_ledger(calls):
    c, _, theta = _case(4, 40, 12)
    obs = _observables(4, 12, 3)
    w = np.array([1.0, -0.5, 2.0])
    with qg.Ledger() as book:
        g = grad(lambda t: qg.expect(c, obs, t) @ w)(theta)
    assert calls
    M = sum(wk * observable_dense(o.terms, 4) for wk, o in zip(w, obs))
    # reference: exact derivatives of the dense simulator
    assert np.max(np.abs(g - theta_gradient(c, theta, M))) <= 1e-10
    # the ledger counts what a device runs, the shortcut changes nothing there: the forward
    # point and each trainable gate's rule terms (common practice: two a Pauli rotation,
    # four a CRY; the generator gates' rules from their spectra)
    terms = sum(op.gate.shift_rule.n_terms for op in c.parametric_operations if op.param is not None)
    assert book.circuits == 1 + terms


def test_batch_values_equal_separate_expect_calls(calls):
    c, H, theta = _case(4, 40, 13)
    m = c.n_params
    # thetas that each shift one parameter: one-column rows when each parameter has one gate
    shifted = np.repeat(theta[None], 2 * m, axis=0) + np.vstack([np.eye(m), -np.eye(m)]) * 0.7
    got = qg.expect(c, H, shifted)
    assert calls
    assert np.max(np.abs(got - [qg.expect(c, H, t) for t in shifted])) <= 1e-12


@pytest.mark.parametrize("how", ["shots", "noise", "single", "unfused", "hessian_plan"])
def test_path_not_taken(calls, how):
    c, H, theta = _case(generators=False)
    if how == "shots":
        grad(lambda t: qg.expect(c, H, t, shots=200, seed=1))(theta)
    elif how == "noise":
        cn = _random_circuit(3, 30, 11, generators=False)
        cn.noise(0, qg.channels.depolarizing(0.01))
        grad(lambda t: qg.expect(cn, H, t))(theta)
    elif how == "single":
        grad(lambda t: qg.expect(c, H, t, precision="single"))(theta)
    elif how == "unfused":
        grad(lambda t: qg.expect(c, H, t, fuse=False))(theta)
    else:
        # the merged second-order plan has rows that differ in two columns
        curvature.hessian(c, H, theta)
    assert calls == []


def test_path_not_taken_where_states_are_kept(calls):
    # the adjoint forward call keeps its final states: those come from the engine's run
    c, H, theta = _case()
    spec = _spec(c, "expect", observables=[H])
    rows = _plan_rows(c, c.angles(theta))
    vals, states = rows_module.measure_rows_here(rows, spec, None, keep=True)
    assert calls == [] and states is not None
    again = rows_module.measure_rows_here(rows, spec, None)
    assert calls == [rows.shape[0]]
    assert np.max(np.abs(again - vals)) <= 1e-12


def test_autograd_hessian_still_works(calls):
    c, H, theta = _case(3, 20, 14, generators=False)
    got = hessian(lambda t: qg.expect(c, H, t))(theta)
    # reference: central differences of the dense simulator's exact gradient (error ~1e-9)
    want = hessian_fd(c, H, theta)
    assert np.max(np.abs(got - want)) <= 1e-6
    assert np.max(np.abs(got - curvature.hessian(c, H, theta).hessian)) <= 1e-10


def test_cost_model_path_at_six_qubits(calls):
    # 70 two-term columns: 71 rows alive on average against N = 64 for the carried matrix
    c = qg.Circuit(6)
    for k in range(70):
        (c.rx, c.ry)[k % 2](k % 6)
        c.cnot(k % 6, (k + 1) % 6)
    H = _observables(6, 15, 1)[0]
    theta = np.random.default_rng(15).uniform(-3, 3, size=70)
    g = grad(lambda t: qg.expect(c, H, t))(theta)
    assert calls
    assert np.max(np.abs(g - grad(lambda t: qg.expect(c, H, t, gradient="adjoint"))(theta))) <= 1e-10


def test_unique_rows_of_one_column_plans_as_the_full_grid(monkeypatch):
    # rows shifted by a period, or by zero, are the reference again; the keys of deviating
    # angles only must merge exactly the rows the grid of every angle merges
    c = qg.Circuit(2).ry(0).crx(0, 1).rz(1).add(MIXER, (0, 1))
    phi = np.array([0.3, -1.2, 2.0, 0.7])
    per = [op.gate.period for op in c.parametric_operations]
    rows = np.repeat(phi[None], 9, axis=0)
    rows[1, 0] += 1.0
    rows[2, 0] += 1.0
    rows[3, 1] += per[1]                                  # the reference again
    rows[4, 2] -= 0.4
    rows[5, 3] += 0.0
    rows[6, 2] += per[2]                                  # the reference again
    rows[7, 3] -= 2.5
    monkeypatch.setattr(expectation, "ONE_COLUMN_KEYS", 0)
    seen = []
    real = expectation._one_column_ticks
    monkeypatch.setattr(expectation, "_one_column_ticks", lambda *a: seen.append(1) or real(*a))
    first, inverse = _unique_rows(rows, c, None)
    assert seen
    # the full grid of every angle (the general path)
    t = np.ascontiguousarray(_angle_ticks(rows, c))
    _, want_inv = np.unique(t.view(np.dtype((np.void, 8 * t.shape[1]))).reshape(-1), return_inverse=True)
    same = want_inv[:, None] == want_inv[None, :]
    assert np.array_equal(inverse[:, None] == inverse[None, :], same)
    assert first == [0, 1, 4, 7]


def test_memory_estimate_covers_the_run():
    import tracemalloc

    c = _random_circuit(4, 200, 16)
    phi = np.random.default_rng(16).uniform(-4, 4, size=len(c.parametric_operations))
    rows = _plan_rows(c, phi)
    heisenberg.one_column_states(c, rows)                  # the layout, memoised
    # reference: tracemalloc, the standard library's allocation tracer
    tracemalloc.start()
    try:
        heisenberg.one_column_states(c, rows)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert peak <= heisenberg.peak_bytes(4, rows.shape[0], phi.size)


def test_memory_chunks_change_no_state(calls):
    # every chunk is measured against the same reference: a row's state does not depend on
    # the rows beside it (bit for bit); the readout of a chunk is a product over its rows,
    # so values agree to rounding
    c, H, theta = _case(4, 40, 17)
    rows = _plan_rows(c, c.angles(theta))
    ref, col = heisenberg.deviations(rows)
    whole = heisenberg.one_column_states(c, rows, (ref, col))
    apart = np.vstack([heisenberg.one_column_states(c, rows[i:i + 3], (ref, col[i:i + 3]))
                       for i in range(0, rows.shape[0], 3)])
    np.testing.assert_array_equal(whole, apart)
    g = grad(lambda t: qg.expect(c, H, t))(theta)
    before = len(calls)
    g_small = grad(lambda t: qg.expect(c, H, t, memory=1))(theta)
    assert len(calls) > before + 1                         # one call a chunk, on this path
    assert np.max(np.abs(g - g_small)) <= 1e-14


@pytest.mark.parametrize("n", [3, 4, 5])
def test_layers_of_one_qubit_gates_on_distinct_qubits(calls, n):
    """Layers of RY on every qubit (whole-register blocks of the small-state loop) with CZ
    chains between: the carried path takes the blocks apart into their gates."""
    c = qg.Circuit(n)
    for _ in range(3):
        for q in range(n):
            c.ry(q)
        for q in range(n - 1):
            c.cz(q, q + 1)
    H = qg.Observable({"ZZ" + "I" * (n - 2): 1.0, "X" + "I" * (n - 1): 0.5})
    theta = np.random.default_rng(n).uniform(-3, 3, size=c.n_params)
    g = grad(lambda t: qg.expect(c, H, t))(theta)
    assert calls
    # reference: exact derivatives of the dense simulator (scipy.linalg.expm_frechet)
    want = theta_gradient(c, theta, observable_dense(H.terms, n))
    assert np.max(np.abs(g - want)) <= 1e-10
