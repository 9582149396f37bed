"""Scale-out: executors and a dask cluster give the serial results, seeds and ledger included.

The serial results are anchored to tests/reference/curv_dense.py (full matrices from
scipy.linalg.expm and expm_frechet); everything distributed is then held to the serial
result to 1e-12, which is what the executor option promises. One dask LocalCluster (two
worker processes) serves the whole module.
"""
import multiprocessing
import os
import pickle
from concurrent.futures import ProcessPoolExecutor, ThreadPoolExecutor

import numpy as np
import pytest
from autograd import grad
from scipy.linalg import expm

import qgradlib as qg
from qgradlib import curvature, gates
from qgradlib.evaluation import distribute
from qgradlib.evaluation.distribute import ChunkError
from reference import curv_dense as ref

X = np.array([[0, 1], [1, 0]], dtype=complex)


# -- module-level helpers, importable by worker processes ---------------------------------------
def rx_matrix(a):
    """RX(a) = expm(-1j a X / 2) in closed form."""
    return np.cos(a / 2) * np.eye(2) - 1j * np.sin(a / 2) * X


class DiesOnce:
    """RX(a), but the first call in a worker process ends that process (a crash mid-plan).

    The marker file is created atomically, so exactly one call in one worker dies.
    """

    def __init__(self, marker, parent):
        self.marker, self.parent = marker, parent

    def __call__(self, a):
        if os.getpid() != self.parent:
            try:
                os.close(os.open(self.marker, os.O_CREAT | os.O_EXCL | os.O_WRONLY))
            except FileExistsError:
                pass
            else:
                os._exit(3)
        return rx_matrix(a)


def fails_above_five(a):
    """RX(a) for a <= 5; a clear error beyond (stands for a failure inside one chunk)."""
    if a > 5.0:
        raise ValueError(f"angle {a} is beyond this gate's calibrated range")
    return rx_matrix(a)


def scenario():
    """Three qubits, shared and scaled parameters, two- and four-term rules, two settings."""
    c = qg.Circuit(3).h(0).ry(1).cnot(0, 1).crx(1, 2).rz(2, param=0, scale=2.0).rzz(0, 2).ry(2)
    H = qg.Observable({"ZZI": 1.0, "IXX": 0.5, "ZIZ": -0.3})
    return c, H, np.array([0.3, 0.7, -0.4, 1.1])


# -- fixtures ----------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def pool():
    # spawn: the parent runs the dask client's threads, which a fork would copy mid-flight
    with ProcessPoolExecutor(2, mp_context=multiprocessing.get_context("spawn")) as p:
        yield p


@pytest.fixture(scope="module")
def client():
    distributed = pytest.importorskip("distributed")   # the optional extra qgradlib[distributed]
    saved = dict(os.environ)    # dask's nannies write their workers' environment into ours
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster, \
            distributed.Client(cluster) as c:
        yield c
    os.environ.clear()
    os.environ.update(saved)


@pytest.fixture(scope="module")
def serial():
    c, H, t = scenario()
    with qg.Ledger() as book:
        g = grad(lambda x: qg.expect(c, H, x))(t)
        r = curvature.hessian(c, H, t)
    return g, r, book


def test_serial_results_match_the_dense_reference(serial):
    c, H, t = scenario()
    g, r, _ = serial
    # reference: dense simulator with scipy.linalg.expm_frechet derivatives
    assert np.allclose(g, ref.gradient(c, H, t), atol=1e-12)
    # reference: central differences of the dense simulator's exact gradient (error ~ 1e-9)
    assert np.allclose(r.hessian, ref.hessian_fd(c, H, t), atol=1e-7)


def _distributed(executor, chunk=None):
    c, H, t = scenario()
    with qg.Ledger() as book:
        g = grad(lambda x: qg.expect(c, H, x, executor=executor, chunk=chunk))(t)
        r = curvature.hessian(c, H, t, executor=executor, chunk=chunk)
    return g, r, book


@pytest.fixture(params=["process-pool", "dask-client", "dask-executor"])
def executor(request):
    if request.param == "process-pool":
        return request.getfixturevalue("pool")
    client = request.getfixturevalue("client")
    return client if request.param == "dask-client" else client.get_executor()


@pytest.mark.parametrize("chunk", [None, 5])
def test_executors_agree_with_serial_and_count_the_same(executor, chunk, serial):
    g0, r0, book0 = serial
    g, r, book = _distributed(executor, chunk)
    assert np.allclose(g, g0, rtol=0, atol=1e-12)
    assert np.allclose(r.hessian, r0.hessian, rtol=0, atol=1e-12)
    assert np.allclose(r.gradient, r0.gradient, rtol=0, atol=1e-12)
    assert abs(r.value - r0.value) < 1e-12
    assert (book.circuits, book.executions, book.shots) == \
        (book0.circuits, book0.executions, book0.shots)
    assert book.by_purpose == book0.by_purpose
    assert r.executions == r0.executions


def test_threads_agree_with_serial(serial):
    g0, r0, _ = serial
    with ThreadPoolExecutor(3) as threads:
        g, r, _ = _distributed(threads)
    assert np.allclose(g, g0, rtol=0, atol=1e-12)
    assert np.allclose(r.hessian, r0.hessian, rtol=0, atol=1e-12)


def test_metric_fisher_and_audit_on_an_executor(pool):
    c, H, t = scenario()
    # reference: the dense simulator's metric, Re(<d_i psi|d_j psi> - <d_i psi|psi><psi|d_j psi>)
    assert np.allclose(curvature.metric_tensor(c, t, executor=pool, chunk=1), ref.metric(c, t),
                       atol=1e-12)
    for kind in ("classical", "quantum"):
        assert np.allclose(curvature.fisher_information(c, t, kind, executor=pool),
                           curvature.fisher_information(c, t, kind), rtol=0, atol=1e-12)
    report = qg.check.gradients(c, H, t, methods=("shift", "adjoint", "difference"), executor=pool)
    assert report.ok(1e-6)
    serial = qg.check.gradients(c, H, t, methods=("shift",))
    assert report["shift"].executions == serial["shift"].executions


@pytest.mark.parametrize("method", ["adam", "natural", "newton"])
def test_optimisers_on_an_executor_repeat_the_serial_run(pool, method):
    c, H, t = scenario()
    runs = [qg.optimize.minimize_expectation(c, H, t, method=method, steps=3, progress=False,
                                             **where) for where in ({}, {"executor": pool})]
    # the executor only moves where circuits run: the same points, the same ledger
    assert np.allclose(runs[0].x, runs[1].x, rtol=0, atol=1e-12)
    assert runs[0].executions == runs[1].executions > 0


# -- seeds ---------------------------------------------------------------------------------------
@pytest.mark.parametrize("chunk", [None, 2])
def test_same_seed_same_shots_serial_and_distributed(executor, chunk):
    c, H, t = scenario()
    est = [qg.estimate_gradient(c, H, t, shots=300, seed=11, executor=e, chunk=k)
           for e, k in ((None, None), (executor, chunk))]
    thetas = np.stack([t, t + 0.2, t - 0.5])
    probs = [qg.probabilities(c, thetas, shots=500, seed=4, executor=e, chunk=k)
             for e, k in ((None, None), (executor, chunk))]
    hess = [curvature.hessian(c, H, t, shots=200, seed=9, executor=e, chunk=k).hessian
            for e, k in ((None, None), (executor, chunk))]
    assert np.allclose(est[1].gradient, est[0].gradient, rtol=0, atol=1e-12)
    assert np.allclose(est[1].standard_error, est[0].standard_error, rtol=0, atol=1e-12)
    assert np.array_equal(probs[1], probs[0])       # the same counts, drawn from the same streams
    assert np.allclose(hess[1], hess[0], rtol=0, atol=1e-12)
    # the shift estimate is unbiased (common practice); a 6-sigma bound on each of the four
    # entries fails by chance with probability below 1e-8 each
    bound = 6 * est[0].standard_error + 1e-12
    assert np.all(np.abs(est[0].gradient - ref.gradient(c, H, t)) < bound)


def test_repeated_points_get_independent_streams():
    c, H, t = scenario()
    r = qg.estimate(c, H, np.stack([t, t]), shots=2000, seed=1)
    # two rows, same circuit, own streams: equal values would need identical draws (common practice:
    # independent runs differ); with 2000 shots per setting a tie has probability far below 1e-6
    assert r.value[0] != r.value[1]


# -- failures ------------------------------------------------------------------------------------
def _fragile(fn):
    c = qg.Circuit(2).ry(0).cnot(0, 1)
    c.add(qg.Gate.from_function("tilt", fn, 1), 1, param=1)
    return c, qg.Observable({"ZZ": 1.0, "IX": 0.5})


def test_an_erroring_chunk_surfaces_with_its_points(executor):
    c, H = _fragile(fails_above_five)
    thetas = np.array([[0.1, 0.2], [0.3, 0.4], [0.5, 4.0], [0.7, 5.5]])
    with pytest.raises(ChunkError) as info:
        qg.expect(c, H, thetas, executor=executor, chunk=2)
    err = info.value
    assert isinstance(err, RuntimeError) and isinstance(err.__cause__, ValueError)
    assert err.indices == (2, 3)
    assert np.allclose(err.angles, c.angles(thetas[2:]))
    assert "calibrated range" in str(err) and "2..3" in str(err)


@pytest.mark.filterwarnings("ignore:gate .tilt. is known only")
def test_a_worker_killed_mid_plan_is_rescheduled_by_dask(client, tmp_path):
    c, H = _fragile(DiesOnce(str(tmp_path / "died"), os.getpid()))
    t = np.array([0.4, 0.9])
    expected = curvature.hessian(c, H, t)        # function gates: finite-difference stencils
    r = curvature.hessian(c, H, t, executor=client, chunk=2)
    assert (tmp_path / "died").exists()          # a worker did die
    assert np.allclose(r.hessian, expected.hessian, rtol=0, atol=1e-12)
    assert r.executions == expected.executions
    client.wait_for_workers(2, timeout=60)       # the nanny restarts it for the other tests


def test_a_dead_process_pool_worker_is_named_not_retried(tmp_path):
    c, H = _fragile(DiesOnce(str(tmp_path / "died"), os.getpid()))
    thetas = np.array([[0.1, 0.2], [0.3, 0.4]])
    spawn = multiprocessing.get_context("spawn")
    with ProcessPoolExecutor(1, mp_context=spawn) as broken:
        with pytest.raises(ChunkError, match="cannot retry") as info:
            qg.expect(c, H, thetas, executor=broken, chunk=1)
    assert info.value.indices in ((0,), (1,))


# -- pickling ------------------------------------------------------------------------------------
def test_gates_channels_circuits_and_observables_pickle():
    rule = qg.ShiftRule.two_term(1.0, np.pi / 4)
    custom = [qg.Gate.fixed("flip", X),
              qg.Gate.from_generator("hop", np.diag([0.0, 1.0, 2.7, 0.0])),
              qg.Gate.from_generator("mix", X / 2, shift_rule=rule),
              qg.Gate.from_hamiltonian("pulse", drift=np.diag([0.3, -0.3]), drive="X"),
              qg.Gate.from_function("tilt", rx_matrix, 1)]
    for g in gates.STANDARD.values():
        assert pickle.loads(pickle.dumps(g)) is g     # the standard gates come back as themselves
    for g in custom:
        h = pickle.loads(pickle.dumps(g))
        assert (h.name, h.kind, h.n_qubits) == (g.name, g.kind, g.n_qubits)
        if g.parametric:
            assert np.allclose(h.matrix(0.37), g.matrix(0.37), atol=1e-13)
    back = pickle.loads(pickle.dumps(custom[2]))
    assert np.allclose(back.shift_rule.shifts, rule.shifts)
    # reference: scipy.linalg.expm of the generator
    assert np.allclose(pickle.loads(pickle.dumps(custom[1])).matrix(0.37),
                       expm(-1j * 0.37 * np.diag([0.0, 1.0, 2.7, 0.0])), atol=1e-12)
    ch = pickle.loads(pickle.dumps(qg.channels.amplitude_damping(0.2)))
    assert ch.name == "amplitude_damping" and not ch.kraus[1].flags.writeable
    c = qg.Circuit(2).h(0).ry(1).cnot(0, 1).noise(1, qg.channels.depolarizing(0.1))
    c.add(custom[3], 0).add(custom[1], (0, 1)).add(custom[4], 1, angle=0.2)
    H = qg.Observable({"ZZ": 1.0}) + qg.Observable.from_matrix(np.diag([1.0, 0, 0, 0.5]))
    c2, H2 = pickle.loads(pickle.dumps((c, H)))
    t = np.array([0.2, -0.6, 0.9])
    assert c2.operations[1].gate is gates.RY and c2.n_params == c.n_params
    assert abs(qg.expect(c2, H2, t) - qg.expect(c, H, t)) < 1e-14


def test_unpicklable_function_gate_is_refused_up_front(pool):
    g = qg.Gate.from_function("tilt", lambda a: rx_matrix(a), 1)
    with pytest.raises(pickle.PicklingError, match="module level"):
        pickle.dumps(g)
    c = qg.Circuit(1).add(g, 0)
    with pytest.raises(TypeError, match="pickle"):
        qg.expect(c, qg.Observable({"Z": 1.0}), np.array([0.3]), executor=pool)
    # threads share the process: nothing to pickle; reference: RX(a) gives <Z> = cos(a)
    with ThreadPoolExecutor(2) as threads:
        assert abs(qg.expect(c, qg.Observable({"Z": 1.0}), np.array([0.3]), executor=threads)
                   - np.cos(0.3)) < 1e-12


def test_bad_executor_and_chunk_are_refused():
    c, H, t = scenario()
    with pytest.raises(TypeError, match="executor"):
        qg.expect(c, H, t, executor="localhost:8786")
    with ThreadPoolExecutor(1) as threads:
        for bad in (0, -2, 1.5, True):
            with pytest.raises(ValueError, match="chunk"):
                qg.expect(c, H, t, executor=threads, chunk=bad)
    with pytest.raises(ValueError, match="executor"):
        curvature.hessian(c, H, t, chunk=4)


# -- executors that misbehave (issue 19 item 6) ---------------------------------------------------
from concurrent.futures import Executor, Future  # noqa: E402


class Tampering(Executor):
    """Runs each task here, then changes what comes back (a stand-in for a faulty scheduler)."""

    def __init__(self, how):
        self.how, self.calls, self._max_workers = how, 0, 2

    def submit(self, fn, *args, **kwargs):
        fut = Future()
        self.calls += 1
        if self.how == "hang":
            return fut                           # never finishes
        result = fn(*args, **kwargs)
        start, sums, values = result
        if self.how == "shape":
            result = (start, sums, values[:-1])  # a row short
        elif self.how == "reorder":
            result = (start, sums[::-1], values[::-1])
        elif self.how == "swap" and self.calls == 1:
            args = list(args)
            k = 2 if fn is distribute.in_worker else 1   # the angles follow the task and payload
            args[k] = args[k][::-1]              # the rows ran in another order
            result = fn(*args, **kwargs)
        fut.set_result(result)
        return fut


def _chunked_case():
    c = qg.Circuit(2).ry(0).cnot(0, 1).rx(1)
    H = qg.Observable({"ZZ": 1.0, "XI": 0.5})
    thetas = np.array([[0.1, 0.2], [0.3, 0.4], [0.5, 0.6], [0.7, 0.8]])
    return c, H, thetas


@pytest.mark.parametrize("how", ["shape", "reorder", "swap"])
def test_a_chunk_that_comes_back_wrong_is_a_chunk_error(how):
    # before: a short chunk raised IndexError from deep inside, rows in another order went
    # unnoticed; the values that would have come back differ from the serial ones
    c, H, thetas = _chunked_case()
    with pytest.raises(ChunkError, match="came back|not the chunk's rows") as info:
        qg.expect(c, H, thetas, executor=Tampering(how), chunk=2)
    assert info.value.indices == (0, 1)
    # a faithful executor of the same kind gives the serial numbers
    # (serial: anchored to the dense reference in test_serial_results_match_the_dense_reference)
    np.testing.assert_allclose(qg.expect(c, H, thetas, executor=Tampering("none"), chunk=2),
                               qg.expect(c, H, thetas), atol=1e-14)


def test_a_hung_worker_is_a_chunk_error_after_the_timeout():
    c, H, thetas = _chunked_case()
    with pytest.raises(ChunkError, match=r"did not finish within timeout=0.5 s") as info:
        qg.expect(c, H, thetas, executor=Tampering("hang"), chunk=2, timeout=0.5)
    assert info.value.indices == (0, 1, 2, 3)
    assert np.allclose(info.value.angles, c.angles(thetas))
    # every function that takes executor= takes timeout= and gives up the same way
    theta = thetas[0]
    calls = [
        lambda ex: qg.probabilities(c, theta, executor=ex, timeout=0.5),
        lambda ex: qg.estimate(c, H, theta, shots=100, seed=0, executor=ex, timeout=0.5),
        lambda ex: qg.estimate_gradient(c, H, theta, shots=100, seed=0, executor=ex, timeout=0.5),
        lambda ex: curvature.hessian(c, H, theta, executor=ex, timeout=0.5),
        lambda ex: curvature.derivatives(c, H, theta, order=2, executor=ex, timeout=0.5),
        lambda ex: curvature.metric_tensor(c, theta, executor=ex, timeout=0.5),
        lambda ex: curvature.fisher_information(c, theta, executor=ex, timeout=0.5),
        lambda ex: qg.check.gradients(c, H, theta, executor=ex, timeout=0.5),
        lambda ex: qg.optimize.minimize_expectation(c, H, theta, steps=1, executor=ex, timeout=0.5),
    ]
    for call in calls:
        with pytest.raises(ChunkError, match="did not finish within timeout"):
            call(Tampering("hang"))


def test_bad_timeout_is_refused():
    c, H, thetas = _chunked_case()
    with ThreadPoolExecutor(1) as pool:
        for bad in (0, -1.0, float("inf"), "1", True):
            with pytest.raises(ValueError, match="timeout must be a positive number"):
                qg.expect(c, H, thetas, executor=pool, timeout=bad)
    with pytest.raises(ValueError, match="give executor= as well"):
        qg.expect(c, H, thetas, timeout=1.0)
