"""The memory guard tells the truth: its estimates bound the measured peak, and under an
address-space limit the refusal is the guard's StateTooLarge, never NumPy's MemoryError.

Outside references: ``tracemalloc`` (the standard library's allocation tracer) measures the
peak of every engine path against the estimate its module publishes; the kernel's
``RLIMIT_AS`` (``resource.setrlimit``) is the limit a child process runs under.
"""
import json
import subprocess
import sys
import textwrap
import tracemalloc

import numpy as np
import pytest
from autograd import grad

import qgradlib as qg
from qgradlib.engine import memory
from qgradlib.engine.adjoint import adjoint_gradient, adjoint_states
from qgradlib.engine.density import density_states, run_density
from qgradlib.engine.measure import apply_observables, observable_scratch
from qgradlib.engine.tangents import derivative_states, state_derivatives
from qgradlib.evaluation.expectation import _spec
from qgradlib.evaluation.rows import measure_rows_here, peak_states
from qgradlib.rules.plans import first_order_points

N = 16     # a mid-size state: 1 MiB, large next to the fixed overhead of a call


def _circuit(n, noise=False):
    c = qg.Circuit(n)
    for q in range(n):
        c.h(q).ry(q)
    for q in range(n - 1):
        c.cnot(q, q + 1)
    for q in range(n):
        c.rx(q).rz(q)
    c.crx(0, 1)
    if noise:
        c.noise(0, qg.channels.depolarizing(0.01))
    return c


def _small(n):
    """Few parameters on a mid-size register: the memory is the same, the work far less."""
    return qg.Circuit(n).h(0).ry(0).cnot(0, 1).ry(1).crx(1, 2).rz(2).cnot(2, 3).rx(3).ry(n - 1)


pytestmark = pytest.mark.usefixtures("no_scratch_pool")


def _peak(fn):
    fn()                                  # compiled programs and caches are built once
    tracemalloc.start()
    try:
        fn()
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def _assert_bound(peak, estimate):
    # the estimate is an upper bound, and not a loose one
    assert peak <= estimate <= 1.5 * peak, (peak, estimate, estimate / peak)


WORDS = {"one Z": {"Z" + "I" * (N - 1): 1.0},
         "wide Z word": {"Z" * N: 1.0},
         "mixed": {"X" * N: 1.0, "Z" * N: 0.5, "Y" + "I" * (N - 1): 0.2},
         "many Z pairs": {"I" * k + "ZZ" + "I" * (N - k - 2): 1.0 for k in range(N - 1)}}


@pytest.mark.parametrize("words", list(WORDS))
@pytest.mark.parametrize("shots", [None, 100])
def test_forward_estimate_bounds_the_measured_peak(words, shots):
    c = _circuit(N)
    H = qg.Observable(WORDS[words])
    theta = np.random.default_rng(0).normal(size=c.n_params)
    spec = _spec(c, "expect", observables=(H,), shots=shots, seed=0)
    _assert_bound(_peak(lambda: qg.expect(c, H, theta, shots=shots, seed=0)),
                  memory.state_bytes(N, peak_states(spec, 1)))


def test_probabilities_estimate_bounds_the_measured_peak():
    c = _circuit(N)
    theta = np.random.default_rng(1).normal(size=c.n_params)
    spec = _spec(c, "probs")
    _assert_bound(_peak(lambda: qg.probabilities(c, theta)), memory.state_bytes(N, peak_states(spec, 1)))


def test_shift_gradient_batch_estimate_bounds_the_measured_peak():
    # the shifted points of one gradient, run as one chunk (branches of a shared trunk)
    c = _small(N)
    H = qg.Observable(WORDS["one Z"])
    phi = np.atleast_2d(c.angles(np.random.default_rng(2).normal(size=c.n_params)))
    spec = _spec(c, "expect", observables=(H,))
    points = np.asarray(first_order_points(c, phi, None, spec.columns)[0])
    P = points.shape[0]
    _assert_bound(_peak(lambda: measure_rows_here(points, spec, None)),
                  memory.state_bytes(N, peak_states(spec, P)))


@pytest.mark.parametrize("words", ["one Z", "wide Z word"])
def test_adjoint_estimate_bounds_the_measured_peak(words):
    c = _small(N)
    H = qg.Observable(WORDS[words])
    phi = np.atleast_2d(c.angles(np.random.default_rng(3).normal(size=c.n_params)))

    def into(psi, out, scratch):
        apply_observables(psi, N, [H], None, out, scratch)
    estimate = memory.state_bytes(N, adjoint_states(1, observable_scratch(N, [H])))
    _assert_bound(_peak(lambda: adjoint_gradient(c, phi, observable_into=into)), estimate)
    # through autograd: the forward pass keeps its state for the backward pass
    theta = np.random.default_rng(3).normal(size=c.n_params)
    _assert_bound(_peak(lambda: grad(lambda t: qg.expect(c, H, t, gradient="adjoint"))(theta)), estimate)


def test_density_estimate_bounds_the_measured_peak():
    n = 8                                  # a density matrix of 8 qubits: 1 MiB
    c = _circuit(n, noise=True)
    phi = np.atleast_2d(c.angles(np.random.default_rng(4).normal(size=c.n_params)))
    _assert_bound(_peak(lambda: run_density(c, phi)),
                  memory.state_bytes(n, density_states(), density=True))
    H = qg.Observable({"X" * n: 1.0, "Z" * n: 0.5})
    theta = np.random.default_rng(4).normal(size=c.n_params)
    for shots in (None, 100):
        spec = _spec(c, "expect", observables=(H,), shots=shots, seed=0)
        _assert_bound(_peak(lambda: qg.expect(c, H, theta, shots=shots, seed=0)),
                      memory.state_bytes(n, peak_states(spec, 1), density=True))


def test_state_derivatives_estimate_bounds_the_measured_peak():
    c = _small(N)
    phi = c.angles(np.random.default_rng(5).normal(size=c.n_params))
    columns = tuple(range(5))
    _assert_bound(_peak(lambda: state_derivatives(c, phi, columns)),
                  memory.state_bytes(N, derivative_states(len(columns))))


def test_single_precision_halves_the_estimate():
    # complex64 amplitudes take 8 bytes (common practice), complex128 16
    assert (memory.state_bytes(20, 3, 8) - memory.OVERHEAD) * 2 == memory.state_bytes(20, 3) - memory.OVERHEAD


# -- limits -------------------------------------------------------------------------------
def _tree(tmp_path, files):
    for rel, text in files.items():
        p = tmp_path / rel
        p.parent.mkdir(parents=True, exist_ok=True)
        p.write_text(text)


def test_cgroup_v2_limit_is_read_up_the_hierarchy(tmp_path):
    # cgroup v2: memory.max - (memory.current - inactive_file), tightest over the ancestors
    # (the kernel's cgroup-v2 documentation; common practice for a working-set limit)
    _tree(tmp_path, {
        "proc": "0::/outer/inner\n",
        "fs/outer/memory.max": "3000000\n", "fs/outer/memory.current": "1000000\n",
        "fs/outer/memory.stat": "anon 1\ninactive_file 0\n",
        "fs/outer/inner/memory.max": "max\n", "fs/outer/inner/memory.current": "10\n",
    })
    assert memory._cgroup_left(str(tmp_path / "fs"), str(tmp_path / "proc")) == 2_000_000
    _tree(tmp_path, {"fs/outer/inner/memory.max": "1500000\n",
                     "fs/outer/inner/memory.current": "900000\n",
                     "fs/outer/inner/memory.stat": "inactive_file 400000\n"})
    memory._GROUPS.clear()
    assert memory._cgroup_left(str(tmp_path / "fs"), str(tmp_path / "proc")) == 1_000_000


def test_cgroup_v1_limit_is_read(tmp_path):
    # cgroup v1: memory.limit_in_bytes - (memory.usage_in_bytes - total_inactive_file)
    _tree(tmp_path, {
        "proc": "4:memory:/job\n3:cpu:/job\n",
        "fs/memory/job/memory.limit_in_bytes": "8000\n",
        "fs/memory/job/memory.usage_in_bytes": "5000\n",
        "fs/memory/job/memory.stat": "cache 10\ntotal_inactive_file 1000\n",
        "fs/memory/memory.limit_in_bytes": "9223372036854771712\n",
        "fs/memory/memory.usage_in_bytes": "5000\n",
    })
    memory._GROUPS.clear()
    assert memory._cgroup_left(str(tmp_path / "fs"), str(tmp_path / "proc")) == 4000
    memory._GROUPS.clear()


def test_available_is_the_tightest_limit(monkeypatch):
    monkeypatch.setattr(memory, "limits", lambda: {"MemAvailable": 5000, "RLIMIT_AS": 300, "cgroup": 900})
    monkeypatch.setattr(memory, "_recent", [0.0, -1, None])
    assert memory.available_bytes() == 300
    with pytest.raises(memory.StateTooLarge, match=r"needs 400 bytes .* only 300 bytes .* RLIMIT_AS"):
        memory.guard(400, "a test")
    memory.guard(300, "a test")


# -- under an address-space limit, in a child process ---------------------------------------
CHILD = textwrap.dedent('''
    import json, resource, sys
    import numpy as np
    from autograd import grad
    import qgradlib as qg
    from qgradlib.engine import StateTooLarge

    def vmsize():
        for line in open("/proc/self/status"):
            if line.startswith("VmSize:"):
                return int(line.split()[1]) * 1024

    MiB = 2 ** 20
    soft, hard = resource.getrlimit(resource.RLIMIT_AS)
    resource.setrlimit(resource.RLIMIT_AS, (vmsize() + 300 * MiB, hard))

    def ry_circuit(n, m=1):
        c = qg.Circuit(n)
        for q in range(m):
            c.ry(q)
        return c

    def Z(n):
        return qg.Observable({"Z" + "I" * (n - 1): 1.0})

    def noisy(n):
        return qg.Circuit(n).ry(0).noise(0, qg.channels.depolarizing(0.1))

    cases = {
        # one state of 24 qubits (256 MiB) fits, and so does its run, in place; one of 25
        # qubits (512 MiB) does not
        "forward fits": lambda: float(qg.expect(ry_circuit(24), Z(24), np.array([0.3]))),
        "forward": lambda: qg.expect(ry_circuit(25), Z(25), np.array([0.3])),
        "state": lambda: qg.state(ry_circuit(25), np.array([0.3])),
        # 23 qubits: the value fits (2 x 128 MiB), the adjoint's four states do not; at 22 they do
        "adjoint": lambda: grad(lambda t: qg.expect(ry_circuit(23), Z(23), t, gradient="adjoint"))(np.array([0.3])),
        "adjoint fits": lambda: float(grad(lambda t: qg.expect(ry_circuit(22), Z(22), t, gradient="adjoint"))(np.array([0.3]))[0]),
        # the shifted circuits run in chunks that fit: the gradient completes
        "shift gradient fits": lambda: float(grad(lambda t: qg.expect(ry_circuit(22, 2), Z(22), t))(np.array([0.3, 0.2]))[0]),
        "shift gradient": lambda: grad(lambda t: qg.expect(ry_circuit(25, 2), Z(25), t))(np.array([0.3, 0.2])),
        # four density matrices of 12 qubits (256 MiB each) do not fit; of 10 qubits they do
        "density": lambda: qg.expect(noisy(12), Z(12), np.array([0.3])),
        "density fits": lambda: float(qg.expect(noisy(10), Z(10), np.array([0.3]))),
        "density gradient": lambda: grad(lambda t: qg.expect(noisy(12), Z(12), t))(np.array([0.3])),
    }
    out = {}
    for name, fn in cases.items():
        try:
            value = fn()
            out[name] = ["ok", round(float(np.sum(value)), 9)]
        except StateTooLarge as err:
            out[name] = ["StateTooLarge", str(err)]
        except MemoryError as err:
            out[name] = ["MemoryError", str(err)]
    print(json.dumps(out))
''')


@pytest.fixture(scope="module")
def limited():
    if not sys.platform.startswith("linux"):
        pytest.skip("RLIMIT_AS and /proc/self/status are Linux's")
    done = subprocess.run([sys.executable, "-c", CHILD], capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    return json.loads(done.stdout.strip().splitlines()[-1])


@pytest.mark.parametrize("case", ["forward", "state", "adjoint", "shift gradient", "density",
                                  "density gradient"])
def test_under_an_address_space_limit_the_guard_refuses(limited, case):
    outcome, message = limited[case]
    assert outcome == "StateTooLarge", (case, outcome, message)
    assert "RLIMIT_AS" in message and "needs" in message and "available" in message


def test_under_an_address_space_limit_what_fits_runs(limited):
    # <Z> after RY(0.3) is cos(0.3), its derivative -sin(0.3) (common practice); with
    # rho -> (1 - p) rho + p I/2 on that qubit, <Z> shrinks by 1 - p (common practice)
    assert limited["shift gradient fits"] == ["ok", round(-np.sin(0.3), 9)]
    assert limited["forward fits"] == ["ok", round(np.cos(0.3), 9)]      # in place: one state
    assert limited["adjoint fits"] == ["ok", round(-np.sin(0.3), 9)]
    assert limited["density fits"] == ["ok", round((1 - 0.1) * np.cos(0.3), 9)]


def test_the_refusal_names_the_limit_of_the_reading_that_refused(monkeypatch):
    # the address space left moves with every allocation: read again, it matches nothing
    readings = iter([{"RLIMIT_AS": 1000, "MemAvailable": 5000},
                     {"RLIMIT_AS": 990, "MemAvailable": 5000}])
    monkeypatch.setattr(memory, "limits", lambda: next(readings))
    monkeypatch.setattr(memory, "_recent", [0.0, -1, None])
    with pytest.raises(memory.StateTooLarge, match=r"\(the RLIMIT_AS limit\)"):
        memory.guard(2000, "a test request")
