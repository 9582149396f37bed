"""Programs derived from the fused one, the bounded program cache, memoised gate facts.

Derived programs cut fused steps around kept columns; their states must equal unfused runs
within rounding (1e-12), the same standard as fusion itself, and the shared-prefix runs of
two rows that differ in one column (a rotosolve step) must equal separate runs.
"""
import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

import qgradlib as qg
from qgradlib.engine import program as programs
from qgradlib.engine.branch import _reference, run_branched
from qgradlib.engine.statevector import run

from test_fusion import circuits


def _phi(c, seed):
    return np.random.default_rng(seed).uniform(-3, 3, size=(1, len(c.parametric_operations)))


@given(circuits(max_n=5), st.integers(0, 3))
@settings(max_examples=40, deadline=None)
def test_keeping_a_few_columns_apart_leaves_the_state_unchanged(c, seed):
    phi = _phi(c, seed)
    ref = run(c, phi, fuse=False)
    G = phi.shape[1]
    for j in range(G):
        assert np.max(np.abs(run(c, phi, keep={j}) - ref)) <= 1e-12
    if G >= 2:
        assert np.max(np.abs(run(c, phi, keep={0, G - 1}) - ref)) <= 1e-12


@given(circuits(max_n=5), st.integers(0, 3))
@settings(max_examples=40, deadline=None)
def test_two_rows_differing_in_one_column_branch_like_separate_runs(c, seed):
    phi = _phi(c, seed)
    G = phi.shape[1]
    for j in range(G):
        rows = np.repeat(phi, 3, axis=0)
        rows[1, j] += np.pi / 2
        rows[2, j] -= np.pi / 2
        got = run_branched(c, rows, min_saving=0.0)
        if got is not None:
            assert np.max(np.abs(got - run(c, rows, fuse=False))) <= 1e-12


def test_a_derived_program_shares_the_steps_it_does_not_cut():
    c = qg.Circuit(3)
    for _ in range(4):
        for q in range(3):
            c.ry(q)
        c.cz(0, 1).cz(1, 2)
    base = programs.program(c, True)
    derived = programs.program(c, True, frozenset({5}))
    shared = {id(s) for s in base.steps} & {id(s) for s in derived.steps}
    assert len(shared) == len(base.steps) - 1        # only the step holding column 5 is cut
    assert [s.column for s in derived.steps if s.kind == "solo"] == [5]


def test_the_program_cache_is_held_to_its_byte_limit(monkeypatch):
    c = qg.Circuit(4)
    for _ in range(10):
        for q in range(4):
            c.ry(q)
        for q in range(3):
            c.cnot(q, q + 1)
    monkeypatch.setattr(programs, "CACHE_BYTES", 20_000)
    for j in range(40):
        programs.program(c, True, frozenset({j}))
    info = programs.cache_info()
    assert info["bytes"] <= 20_000 + max(programs.nbytes(programs.program(c, True)), 0)
    assert info["programs"] < 41
    # an evicted program is compiled again on demand and gives the same state
    phi = _phi(c, 1)
    assert np.max(np.abs(run(c, phi, keep={0}) - run(c, phi, fuse=False))) <= 1e-12


def test_gate_facts_are_memoised():
    g = qg.Gate.fixed("flip", np.array([[0, 1], [1, 0]]))
    assert g.diagonal is False
    assert "diagonal" in g.__dict__          # computed once, not per compilation
    assert qg.gates.CZ.diagonal and qg.gates.H.diagonal is False


def test_column_reference_is_the_most_common_value():
    # common practice: the mode per column, smallest value on ties (numpy.unique + argmax)
    rng = np.random.default_rng(3)
    for _ in range(200):
        phi = rng.integers(0, 3, size=(rng.integers(1, 9), rng.integers(1, 6))).astype(float)
        ref, _ = _reference(phi, None)
        want = []
        for col in phi.T:
            vals, counts = np.unique(col, return_counts=True)
            want.append(vals[np.argmax(counts)])
        assert np.array_equal(ref, want)
