"""BLAS threads around engine calls and on executor workers (qgradlib.engine.threads)."""
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import pytest

import qgradlib as qg
from qgradlib.engine import threads
from qgradlib.evaluation import distribute

threadpoolctl = pytest.importorskip("threadpoolctl")


def _blas_threads():
    return [lib.get_num_threads() for lib in threads.blas_libraries()]


def _seen_in_a_run(n, monkeypatch=None):
    """BLAS threads as seen from inside the engine, through a function gate it calls."""
    seen = []

    def fn(a):
        seen.append(_blas_threads())
        return np.array([[np.cos(a / 2), -np.sin(a / 2)], [np.sin(a / 2), np.cos(a / 2)]])

    gate = qg.Gate.from_function("probe", fn, 1)
    c = qg.Circuit(n).add(gate, (0,))
    qg.state(c, np.array([0.3]))
    return seen[-1]


def test_engine_call_on_a_small_state_runs_with_one_blas_thread_and_restores():
    if not threads.blas_libraries():
        pytest.skip("threadpoolctl finds no BLAS library here")
    with threadpoolctl.threadpool_limits(2, user_api="blas"):
        before = _blas_threads()
        assert _seen_in_a_run(3) == [1] * len(before)
        assert _blas_threads() == before          # restored after the call


def test_environment_variable_sets_the_engine_threads(monkeypatch):
    if not threads.blas_libraries():
        pytest.skip("threadpoolctl finds no BLAS library here")
    monkeypatch.setenv("QGRADLIB_BLAS_THREADS", "2")
    with threadpoolctl.threadpool_limits(1, user_api="blas"):
        assert _seen_in_a_run(3) == [2] * len(threads.blas_libraries())
    monkeypatch.setenv("QGRADLIB_BLAS_THREADS", "two")
    with pytest.raises(ValueError, match="QGRADLIB_BLAS_THREADS"):
        threads.engine_threads(3)


def test_large_states_keep_the_callers_threads(monkeypatch):
    if not threads.blas_libraries():
        pytest.skip("threadpoolctl finds no BLAS library here")
    monkeypatch.setattr(threads, "THREADED_QUBITS", 3)
    with threadpoolctl.threadpool_limits(2, user_api="blas"):
        assert _seen_in_a_run(3) == [2] * len(threads.blas_libraries())


def _report(_payload):
    return _blas_threads()


def test_tasks_on_an_executor_run_with_one_blas_thread():
    if not threads.blas_libraries():
        pytest.skip("threadpoolctl finds no BLAS library here")
    with threadpoolctl.threadpool_limits(2, user_api="blas"), ThreadPoolExecutor(1) as pool:
        out = distribute.run_chunks(pool, _report, None, [((), (0,), np.zeros((1, 1)))])
        assert out == [[1] * len(threads.blas_libraries())]
        assert _blas_threads() == [2] * len(threads.blas_libraries())


def test_results_do_not_depend_on_the_thread_setting(monkeypatch):
    # same kernels, so the same numbers (BLAS may sum in another order: rounding only)
    c = qg.Circuit(4)
    for q in range(4):
        c.ry(q)
    for q in range(3):
        c.cnot(q, q + 1)
    H = qg.Observable({"ZZII": 1.0, "IXIX": 0.5})
    theta = np.linspace(0.1, 0.9, 4)
    a = qg.expect(c, H, theta)
    monkeypatch.setenv("QGRADLIB_BLAS_THREADS", "2")
    assert abs(qg.expect(c, H, theta) - a) <= 1e-12


def test_tasks_in_a_process_pool_run_with_one_blas_thread():
    from concurrent.futures import ProcessPoolExecutor
    if not threads.blas_libraries():
        pytest.skip("threadpoolctl finds no BLAS library here")
    with ProcessPoolExecutor(1) as pool:
        out = distribute.run_chunks(pool, _report, None, [((), (0,), np.zeros((1, 1)))])
    assert out[0] and set(out[0]) == {1}
