"""Ledger counts: exact numbers of circuit executions and shots a device would need.

Counting facts marked `# common practice`: a gradient of m two-term parameters takes 2m
shifted circuits, plus one for the value; a four-term rule takes 4 circuits per parameter,
a rule for R frequencies 2R; with shots the total is executions x shots per execution.
"""
import contextvars
import threading

import numpy as np
import pytest
from autograd import grad, hessian, jacobian, value_and_grad

import qgradlib as qg

Z0 = qg.Observable({"ZI": 1.0})


def _ry_circuit(m):
    c = qg.Circuit(2)
    for k in range(m):
        c.ry(k % 2)
        c.cnot(0, 1)
    return c


@pytest.mark.parametrize("m", [1, 2, 5])
def test_two_term_gradient_takes_2m_plus_one(m):
    # common practice: 2m shifted executions, plus 1 for the value
    c = _ry_circuit(m)
    theta = np.linspace(0.1, 0.9, m)
    with qg.Ledger() as book:
        value_and_grad(lambda t: qg.expect(c, Z0, t))(theta)
    assert book.executions == 2 * m + 1
    assert book.by_purpose == {"value": 1, "RY": 2 * m}
    with qg.Ledger() as only_value:
        qg.expect(c, Z0, theta)
    assert only_value.executions == 1


def test_controlled_rotation_takes_four():
    # common practice / Anselmetti et al., New J. Phys. 23, 113010 (2021): four circuits
    c = qg.Circuit(2).h(0).crx(0, 1).cry(1, 0)
    with qg.Ledger() as book:
        grad(lambda t: qg.expect(c, Z0, t))(np.array([0.3, 0.4]))
    assert book.by_purpose == {"value": 1, "CRX": 4, "CRY": 4}
    assert book.executions == 9


@pytest.mark.parametrize("eigs, R", [([0.0, 1.0, 2.0, 3.0], 3), ([0.0, 1.0, 2.7, 0.0], 3),
                                     ([-1.0, 0.0, 0.0, 1.0], 2)])
def test_gate_with_R_frequencies_takes_2R(eigs, R):
    # Wierichs, Izaac, Wang and Lin, Quantum 6, 677 (2022): 2R evaluations for R frequencies
    g = qg.Gate.from_generator("spread", np.diag(eigs))
    assert g.frequencies.size == R
    c = qg.Circuit(2).h(0).h(1).add(g, (0, 1))
    with qg.Ledger() as book:
        grad(lambda t: qg.expect(c, qg.Observable({"XX": 1.0}), t))(np.array([0.2]))
    assert book.by_purpose["spread"] == 2 * R
    assert book.executions == 2 * R + 1


def test_shots_are_executions_times_shots_per_execution():
    # common practice: every execution takes the same number of shots, per setting
    c = _ry_circuit(3)
    H = qg.Observable({"ZI": 1.0, "IZ": 0.5, "XX": 0.2})     # two qubit-wise commuting groups
    assert qg.shots.n_settings(H) == 2
    with qg.Ledger() as book:
        grad(lambda t: qg.expect(c, H, t, shots=100, seed=0))(np.array([0.1, 0.2, 0.3]))
    assert book.circuits == 2 * 3 + 1
    assert book.executions == book.circuits * 2
    assert book.shots == book.executions * 100
    assert sum(book.by_purpose.values()) == book.executions


def test_identical_circuits_within_one_call_count_once():
    c = _ry_circuit(2)
    theta = np.array([0.3, 0.5])
    batch = np.stack([theta, theta, theta + 1.0])
    with qg.Ledger() as book:
        jacobian(lambda t: qg.expect(c, Z0, t))(batch)
    # two distinct rows: 2 values and 2 * 4 shifted circuits
    assert book.executions == 2 * (1 + 4)
    # a parameter shared by two gates on one qubit: RY(t) RY(t) -> columns shifted separately,
    # but the two columns' shifted circuits differ, so nothing merges
    c2 = qg.Circuit(1).ry(0).ry(0, param=0)
    with qg.Ledger() as book2:
        grad(lambda t: qg.expect(c2, qg.Observable({"Z": 1.0}), t))(np.array([0.4]))
    assert book2.executions == 1 + 4
    # two calls are two calls: the ledger does not merge across them
    with qg.Ledger() as book3:
        qg.expect(c, Z0, theta)
        qg.expect(c, Z0, theta)
    assert book3.executions == 2


def test_points_equal_up_to_rounding_or_a_period_count_once():
    # (a + pi/2) - pi/2 is a in exact arithmetic but not always in floating point, and
    # RY(a + 2 pi) = -RY(a) is the same circuit up to a global phase (common practice)
    c = qg.Circuit(1).ry(0)
    Z = qg.Observable({"Z": 1.0})
    for a in (0.3, 0.1, 1.234567, -2.9):
        with qg.Ledger() as book:
            hessian(lambda t: qg.expect(c, Z, t))(np.array([a]))
        # value; a +- pi/2; then a + pi = a - pi (mod 2 pi) and a, once each
        assert book.executions == 1 + 2 + 2
    with qg.Ledger() as book:
        v = qg.expect(c, Z, np.array([[0.4], [0.4 + 2 * np.pi], [0.4 - 4 * np.pi], [0.5]]))
    assert book.executions == 2
    np.testing.assert_allclose(v[:3], np.cos(0.4), atol=1e-12)     # <Z> = cos a (common practice)
    c2 = qg.Circuit(2).ry(0).ry(1).cnot(0, 1)
    with qg.Ledger() as book:
        hessian(lambda t: qg.expect(c2, qg.Observable({"ZZ": 1.0}), t))(np.array([0.3, 0.7]))
    # 1 value + 4 first-order points + 7 distinct second-order points
    assert book.executions == 12


def test_nested_ledgers_both_count():
    c = _ry_circuit(2)
    theta = np.array([0.3, 0.5])
    with qg.Ledger() as outer:
        qg.expect(c, Z0, theta)
        with qg.Ledger() as inner:
            grad(lambda t: qg.expect(c, Z0, t))(theta)
        qg.expect(c, Z0, theta)
    assert inner.executions == 5
    assert outer.executions == 5 + 2
    assert outer.by_purpose["value"] == 3


def test_threads_count_their_own_work():
    c = _ry_circuit(2)
    theta = np.array([0.3, 0.5])
    results = {}

    def work(k):
        with qg.Ledger() as book:
            for _ in range(k):
                grad(lambda t: qg.expect(c, Z0, t))(theta)
        results[k] = book.executions

    threads = [threading.Thread(target=work, args=(k,)) for k in (1, 2, 3, 4)]
    with qg.Ledger() as main_book:
        for t in threads:
            t.start()
        for t in threads:
            t.join()
    assert results == {1: 5, 2: 10, 3: 15, 4: 20}
    assert main_book.executions == 0          # threads start with their own context


def test_one_ledger_shared_by_threads_counts_exactly():
    # the ledger's lock: many threads adding to one ledger lose nothing
    c = _ry_circuit(1)
    with qg.Ledger() as book:
        def work():
            for _ in range(20):
                grad(lambda t: qg.expect(c, Z0, t))(np.array([0.2]))
        threads = [threading.Thread(target=contextvars.copy_context().run, args=(work,))
                   for _ in range(6)]
        for t in threads:
            t.start()
        for t in threads:
            t.join()
    assert book.executions == 6 * 20 * 3


def test_sample_and_probabilities_are_counted():
    c = _ry_circuit(2)
    with qg.Ledger() as book:
        qg.sample(c, np.array([0.1, 0.2]), shots=50, seed=1)
        qg.probabilities(c, np.array([0.1, 0.2]), shots=30, seed=1)
    assert book.executions == 2
    assert book.shots == 80


def test_summary_is_readable():
    c = qg.Circuit(2).h(0).crx(0, 1).ry(1)
    with qg.Ledger() as book:
        grad(lambda t: qg.expect(c, Z0, t))(np.array([0.3, 0.4]))
    text = book.summary()
    assert "7 executions" in text and "CRX" in text and "RY" in text and "value" in text
    assert "no shots" in text
    assert repr(book) == "Ledger(executions=7, circuits=7, shots=0)"


def test_one_batch_per_vjp_and_memory_chunks_agree():
    # item 7: all shifted points of one VJP go to the engine in one call (one ledger record);
    # a tiny memory budget splits the batch into chunks without changing any number
    c = _ry_circuit(4)
    theta = np.array([0.1, 0.2, 0.3, 0.4])
    with qg.Ledger() as book:
        g = grad(lambda t: qg.expect(c, Z0, t))(theta)
    assert book.calls == 2                    # the value, then one batch of 8 shifted circuits
    g_small = grad(lambda t: qg.expect(c, Z0, t, memory=1))(theta)
    # to rounding: in one batch the two shifts of a gate come from one shared row
    # (qgradlib.engine.growing), in chunks of one row each runs alone
    np.testing.assert_allclose(g, g_small, rtol=0, atol=1e-12)


def test_a_ledger_nested_in_itself_counts_once():
    # common practice: a value and 2 shifted circuits for one two-term parameter
    c = _ry_circuit(1)
    book = qg.Ledger()
    with book:
        with book:
            grad(lambda t: qg.expect(c, Z0, t))(np.array([0.2]))
        grad(lambda t: qg.expect(c, Z0, t))(np.array([0.2]))     # still active after the inner exit
    qg.expect(c, Z0, np.array([0.2]))                             # no longer active
    assert book.executions == 2 * 3


def test_one_ledger_entered_from_several_threads_at_once():
    # issue 11 item 13: each thread enters the same ledger (its own context); before, the
    # second exit reset a token made in another thread's context (ValueError)
    c = _ry_circuit(1)
    book = qg.Ledger()
    barrier = threading.Barrier(4)
    errors = []

    def work(k):
        try:
            with book:
                barrier.wait()          # all four threads inside the ledger at once
                for _ in range(k):
                    grad(lambda t: qg.expect(c, Z0, t))(np.array([0.2]))
                barrier.wait()
        except Exception as err:        # pragma: no cover - the failure being tested
            errors.append(err)

    threads = [threading.Thread(target=work, args=(k,)) for k in (1, 2, 3, 4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert errors == []
    assert book.executions == (1 + 2 + 3 + 4) * 3       # each thread's work, counted once
    qg.expect(c, Z0, np.array([0.2]))                    # this thread never entered it
    assert book.executions == 30


def test_a_ledger_pickles_and_deep_copies_with_its_counts():
    import copy
    import pickle

    c = _ry_circuit(1)
    with qg.Ledger() as book:
        grad(lambda t: qg.expect(c, Z0, t))(np.array([0.2]))
    for other in (pickle.loads(pickle.dumps(book)), copy.deepcopy(book), copy.copy(book)):
        assert (other.executions, other.circuits, other.shots) == (3, 3, 0)
        assert other.by_purpose == book.by_purpose and other.by_purpose is not book.by_purpose
        with other:                      # a working ledger of its own, with its own lock
            qg.expect(c, Z0, np.array([0.2]))
        assert other.executions == 4 and book.executions == 3
