"""The figures of the performance table, each a ratio against a same-run baseline."""
from __future__ import annotations

import json
import os
import subprocess
import sys
import time

import numpy as np
from autograd import grad, hessian
from autograd.extend import defvjp, primitive

import qgradlib as qg

from . import data_sets, jax_sim
from .circuits import angles, deep_narrow, ising, ising_terms, layered, ring
from .plain_sim import layered_energy
from .timing import SETTLE_SECONDS, paired, summary

__all__ = ["FIGURES", "SIZES", "OPTIONS"]

# switched by the command line: {"jax": False} skips the JAX rows (with a message)
OPTIONS = {"jax": True}

# full and quick sizes of every workload
SIZES = {
    "full": {"gate_n": 22, "gate_layers": 2, "adj_n": 16, "adj_layers": 4, "shift_n": 10,
             "shift_layers": 4, "fwd_mem_n": 26, "adj_mem_n": 24, "mem_layers": 1,
             "overhead_layers": 300, "hess_n": 6, "hess_layers": 5, "min_time": 0.05, "roto_layers": 50,
             "jax_qubits": [4, 6, 8, 10, 12, 14, 16], "jax_layers": 3, "jax_shift": (6, 5),
             "first": (10, 5), "data_n": 8, "data_N": 256, "data_m": 48,
             "deep": (4, 10_000, 1_641), "threads": (14, 4), "fwd_single_n": 30},
    "quick": {"gate_n": 12, "gate_layers": 2, "adj_n": 8, "adj_layers": 4, "shift_n": 6,
              "shift_layers": 4, "fwd_mem_n": 12, "adj_mem_n": 10, "mem_layers": 1,
              "overhead_layers": 20, "hess_n": 3, "hess_layers": 2, "min_time": 0.002, "roto_layers": 2,
              "jax_qubits": [3], "jax_layers": 1, "jax_shift": (3, 1), "first": (4, 1), "data_n": 3, "data_N": 8, "data_m": 6,
              "deep": (3, 60, 10), "threads": (4, 2), "fwd_single_n": None},
}


def _result(key, figure, target, op, samples, unit="ratio", seconds=None, **details):
    """One row; ``seconds`` (per-repeat times of the target) feeds the environments table."""
    s = summary(samples)
    met = s["median"] <= target if op == "<=" else s["median"] >= target
    out = {"key": key, "figure": figure, "target": target, "op": op, "unit": unit,
           "met": bool(met), **s, "details": details}
    if seconds is not None:
        out["seconds"] = float(np.median(seconds))
    return out


def _skipped(key, figure, target, op, reason, unit="ratio"):
    """A row that could not run here, with the reason printed in its place."""
    return {"key": key, "figure": figure, "target": target, "op": op, "unit": unit,
            "skipped": reason, "met": None, "details": {}}


def gate_pass(sz, repeats):
    n, L = sz["gate_n"], sz["gate_layers"]
    c = layered(n, L)
    theta = angles(c)
    G = len(c.operations)
    psi = np.ones((1, 2 ** n), dtype=complex)
    buf = np.empty_like(psi)
    base = lambda: np.multiply(psi, 1.0001, out=buf)  # noqa: E731
    t, b = paired(lambda: qg.state(c, theta), base, repeats, sz["min_time"])
    tu, bu = paired(lambda: qg.state(c, theta, fuse=False), base, repeats, sz["min_time"])
    return _result("gate_pass", f"layered circuit, n = {n}: time per gate / one state pass", 2.0,
                   "<=", t / G / b, seconds=t, gates=G, seconds_per_gate=float(np.median(t) / G),
                   seconds_per_pass=float(np.median(b)),
                   unfused_ratio=float(np.median(tu / G / bu)))


def _ising_setup(n, L):
    c = layered(n, L)
    return c, ising(n), angles(c)


def adjoint_forward(sz, repeats):
    n, L = sz["adj_n"], sz["adj_layers"]
    c, H, theta = _ising_setup(n, L)
    fwd = lambda: qg.expect(c, H, theta)  # noqa: E731
    adj = lambda: grad(lambda t: qg.expect(c, H, t, gradient="adjoint"))(theta)  # noqa: E731
    t, b = paired(adj, fwd, repeats, sz["min_time"])
    return _result("adjoint_forward", f"adjoint gradient / forward value, n = {n}, {L} layers "
                   f"(m = {c.n_params})", 3.0, "<=", t / b, seconds=t, m=c.n_params,
                   seconds_adjoint=float(np.median(t)), seconds_forward=float(np.median(b)))


def shift_forward(sz, repeats):
    n, L = sz["shift_n"], sz["shift_layers"]
    c, H, theta = _ising_setup(n, L)
    fwd = lambda: qg.expect(c, H, theta)  # noqa: E731
    sh = lambda: grad(lambda t: qg.expect(c, H, t))(theta)  # noqa: E731
    t, b = paired(sh, fwd, repeats, sz["min_time"])
    return _result("shift_forward", f"shift-rule gradient / forward value, n = {n}, {L} layers "
                   f"(m = {c.n_params})", 15.0, "<=", t / b, seconds=t, m=c.n_params,
                   circuits=2 * c.n_params + 1, seconds_shift=float(np.median(t)),
                   seconds_forward=float(np.median(b)))


def _agree_and_time(target, baseline, sz, repeats):
    """Largest difference of the two results (a silent mismatch would void the ratio), then
    their paired times."""
    diff = float(np.max(np.abs(np.asarray(target()) - np.asarray(baseline()))))
    return (diff,) + paired(target, baseline, repeats, sz["min_time"])


def backprop_adjoint(sz, repeats):
    n, L = sz["adj_n"], sz["adj_layers"]
    c, H, theta = _ising_setup(n, L)
    terms = ising_terms(n)
    adj = lambda: grad(lambda t: qg.expect(c, H, t, gradient="adjoint"))(theta)  # noqa: E731
    bp = lambda: grad(layered_energy)(theta, n, L, terms)  # noqa: E731
    diff, t, b = _agree_and_time(bp, adj, sz, repeats)
    return _result("backprop_adjoint", f"autograd backprop through a plain tensordot simulator / "
                   f"our adjoint gradient, n = {n}, m = {c.n_params}", 4.0, ">=", t / b, seconds=b,
                   max_gradient_difference=diff, seconds_backprop=float(np.median(t)),
                   seconds_adjoint=float(np.median(b)))


def hessian_adjoint(sz, repeats):
    n, L = sz["hess_n"], sz["hess_layers"]
    c, H, theta = _ising_setup(n, L)
    adj = lambda: hessian(lambda t: qg.expect(c, H, t, gradient="adjoint"))(theta)  # noqa: E731
    sh = lambda: hessian(lambda t: qg.expect(c, H, t))(theta)  # noqa: E731
    diff, t, b = _agree_and_time(adj, sh, sz, repeats)
    return _result("hessian_adjoint", f"autograd.hessian through gradient='adjoint' / through "
                   f"'shift', n = {n}, m = {c.n_params}", 1.0, "<=", t / b, seconds=t,
                   max_hessian_difference=diff, seconds_adjoint=float(np.median(t)),
                   seconds_shift=float(np.median(b)))


def _probe(what, n, layers):
    env = dict(os.environ)
    root = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    env["PYTHONPATH"] = root + os.pathsep + env.get("PYTHONPATH", "")
    out = subprocess.run([sys.executable, "-m", "benchmarks.memory_probe", what, str(n), str(layers)],
                         capture_output=True, text=True, env=env, cwd=root, check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def _memory(key, what, n, layers, target, repeats, label, amplitude=16):
    runs = [_probe(what, n, layers) for _ in range(repeats)]
    ratios = [r["traced_peak_bytes"] / r["state_bytes"] for r in runs]
    rss = [r["rss_growth_bytes"] / r["state_bytes"] for r in runs]
    return _result(key, label, target, "<=", ratios, unit="states",
                   state_bytes=runs[0]["state_bytes"], rss_growth_states=rss,
                   measure=f"tracemalloc peak of the call in a child process / {amplitude} * 2**n bytes")


def forward_memory(sz, repeats):
    n = sz["fwd_mem_n"]
    return _memory("forward_memory", "forward", n, sz["mem_layers"], 1.5, repeats,
                   f"peak memory of a forward run, n = {n} / one state")


def forward_memory_single(sz, repeats):
    n = sz["fwd_single_n"]
    key, target = "forward_memory_single", 1.5
    if n is None:
        return _skipped(key, "peak memory of a single-precision forward run, n = 30 / one "
                        "complex64 state", target, "<=", "full run only (the state alone is 8 GiB)",
                        unit="states")
    return _memory(key, "forward-single", n, sz["mem_layers"], target, repeats,
                   f"peak memory of a single-precision forward run, n = {n} / one complex64 state",
                   amplitude=8)


def adjoint_memory(sz, repeats):
    n = sz["adj_mem_n"]
    return _memory("adjoint_memory", "adjoint", n, sz["mem_layers"], 4.5, repeats,
                   f"peak memory of an adjoint gradient, n = {n} / one state")


def overhead(sz, repeats):
    n, L = 4, sz["overhead_layers"]
    c, H, theta = _ising_setup(n, L)
    G = len(c.operations)
    a = np.ones((1, 16), dtype=complex)
    o = np.empty_like(a)
    base = lambda: np.multiply(a, 1.0001, out=o)  # noqa: E731
    t, b = paired(lambda: qg.expect(c, H, theta), base, repeats, sz["min_time"])
    return _result("overhead_n4", f"Python overhead per gate at n = 4 ({G} gates, expect())", 15.0,
                   "<=", t / G * 1e6, unit="us", seconds=t, gates=G,
                   ufunc_call_us=float(np.median(b) * 1e6),
                   per_gate_over_ufunc_call=float(np.median(t / G / b)))


def _import_seconds(module, env, root, first=""):
    code = f"import time; {first}t = time.perf_counter(); import {module}; print(time.perf_counter() - t)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env,
                         cwd=root, check=True)
    return float(out.stdout.strip().splitlines()[-1])


def import_time(sz, repeats):
    env = dict(os.environ)
    root = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    env["PYTHONPATH"] = root + os.pathsep + env.get("PYTHONPATH", "")
    # as a user imports it: with the bytecode Python writes on the first import. With
    # PYTHONDONTWRITEBYTECODE set every import compiles every module again (its cost is
    # reported beside the figure), which grows with the source, not with what runs.
    cold = dict(env)
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    for module in ("qgradlib", "numpy"):
        _import_seconds(module, env, root)          # writes the bytecode once
    pairs = [(_import_seconds("qgradlib", env, root), _import_seconds("numpy", env, root))
             for _ in range(repeats)]
    t = np.array([a for a, _ in pairs])
    b = np.array([b for _, b in pairs])
    cold.setdefault("PYTHONDONTWRITEBYTECODE", "1")
    compiled = [_import_seconds("qgradlib", cold, root) / _import_seconds("numpy", cold, root)
                for _ in range(max(1, min(repeats, 3)))]
    # the environments table times qgradlib's own import once numpy's is over: numpy's import
    # starts OpenBLAS's worker threads when the variables are unset, and a new worker spins
    # for about a tenth of a second (from memory; a development reading next to a busy
    # process: 62 ms unset against 51 ms pinned right after `import numpy`, 53 against
    # 54 ms after a 0.3 s wait), a cost of whatever code runs next, not of ours
    after = [_import_seconds("qgradlib", env, root, f"import numpy; time.sleep({SETTLE_SECONDS}); ")
             for _ in range(repeats)]
    return _result("import_time", "import qgradlib / import numpy, each in a fresh interpreter", 3.0,
                   "<=", t / b, seconds=after, seconds_added_to_numpy=float(np.median(t - b)),
                   seconds_qgradlib=float(np.median(t)),
                   seconds_numpy=float(np.median(b)),
                   ratio_without_bytecode=float(np.median(compiled)))


def _sweep_rows(c, theta, freqs):
    """The circuits a one-sweep rotosolve run evaluates (start, both shifts per parameter,
    then the final value and two-term gradient), as rows for one call each."""
    rows = [theta]
    for p, ws in enumerate(freqs):
        # a shared or multi-frequency parameter has several frequencies: two shifts each
        for w in np.atleast_1d(ws):
            h = np.zeros(theta.size)
            h[p] = np.pi / (2 * float(w))
            rows += [theta + h, theta - h]
    return rows + rows


def rotosolve_sweep(sz, repeats):
    from qgradlib.engine.program import cache_info
    from qgradlib.train.rotosolve import frequencies_by_parameter

    n, L = 6, sz["roto_layers"]
    c = ring(n, L)
    H = qg.Observable(jax_sim.energy_terms(n))
    theta = angles(c)
    rows = _sweep_rows(c, theta, frequencies_by_parameter(c))
    sweep = lambda: qg.optimize.minimize_expectation(c, H, theta, method="rotosolve", steps=1)  # noqa: E731

    def one_at_a_time():
        for r in rows:
            qg.expect(c, H, r)
    with qg.Ledger() as book:
        sweep()
    reps = max(1, min(repeats, 3))
    t, b = paired(sweep, one_at_a_time, reps, 0.0)
    info = cache_info()
    return _result("rotosolve_sweep", f"one rotosolve sweep, n = {n}, {len(c.operations)} gates, "
                   f"m = {c.n_params} / the same {len(rows)} circuits one call at a time", 1.0, "<=",
                   t / b, seconds=t, circuits=book.executions, seconds_sweep=float(np.median(t)),
                   seconds_one_at_a_time=float(np.median(b)), programs_cached=info["programs"],
                   program_cache_bytes=info["bytes"])


def _jax_reason():
    if not OPTIONS["jax"]:
        return "JAX rows switched off (--no-jax)"
    return jax_sim.available()


def _jax_case(n, L):
    c = layered(n, L)
    H = qg.Observable(jax_sim.energy_terms(n))
    theta = angles(c)
    value, gradient = jax_sim.gradient_function(n, L)
    t0 = time.perf_counter()
    first = np.asarray(gradient(theta))
    compile_s = time.perf_counter() - t0
    jax_grad = lambda: gradient(theta).block_until_ready()  # noqa: E731
    return c, H, theta, first, compile_s, jax_grad


@primitive
def _nothing(theta):
    """A primitive that computes nothing: a gradient of it is autograd's own cost per call."""
    return 0.0


defvjp(_nothing, lambda ans, theta: lambda g: np.zeros_like(theta))


def jax_adjoint(sz, repeats):
    out = []
    L = sz["jax_layers"]
    for n in sz["jax_qubits"]:
        target = 2.0 if n <= 10 else 1.0
        label = f"our adjoint gradient / jitted JAX gradient (compile excluded), n = {n}, m = {n * L}"
        reason = _jax_reason()
        if reason:
            out.append(_skipped(f"jax_adjoint_n{n}", label, target, "<=", reason))
            continue
        c, H, theta, first, compile_s, jax_grad = _jax_case(n, L)
        ours = lambda: grad(lambda t: qg.expect(c, H, t, gradient="adjoint"))(theta)  # noqa: E731
        diff = float(np.max(np.abs(ours() - first)))
        t, b = paired(ours, jax_grad, repeats, sz["min_time"])
        # the floor under any autograd primitive: grad of one that computes nothing, against
        # the same JAX gradient (no target; it shows how much of the ratio is autograd's)
        f, fb = paired(lambda: grad(lambda t: _nothing(t))(theta), jax_grad, repeats,  # noqa: E731
                       sz["min_time"])
        out.append(_result(f"jax_adjoint_n{n}", label, target, "<=", t / b, seconds=t,
                           max_gradient_difference=diff, seconds_adjoint=float(np.median(t)),
                           seconds_jax=float(np.median(b)), seconds_jax_compile=compile_s,
                           autograd_floor_over_jax=float(np.median(f / fb)),
                           seconds_autograd_floor=float(np.median(f))))
    return out


def jax_shift(sz, repeats):
    n, L = sz["jax_shift"]
    label = f"our shift-rule gradient / jitted JAX gradient (compile excluded), n = {n}, m = {n * L}"
    reason = _jax_reason()
    if reason:
        return _skipped("jax_shift", label, 4.0, "<=", reason)
    c, H, theta, first, compile_s, jax_grad = _jax_case(n, L)
    ours = lambda: grad(lambda t: qg.expect(c, H, t))(theta)  # noqa: E731
    diff = float(np.max(np.abs(ours() - first)))
    t, b = paired(ours, jax_grad, repeats, sz["min_time"])
    return _result("jax_shift", label, 4.0, "<=", t / b, seconds=t, max_gradient_difference=diff,
                   seconds_shift=float(np.median(t)), seconds_jax=float(np.median(b)))


def first_gradient(sz, repeats):
    """A new circuit object each repeat (nothing cached for it): first gradient / second."""
    n, L = sz["first"]
    ratios, steady = [], []
    for _ in range(repeats):
        c = layered(n, L)
        H = qg.Observable(jax_sim.energy_terms(n))
        theta = angles(c)
        g = lambda: grad(lambda t: qg.expect(c, H, t))(theta)  # noqa: E731
        t0 = time.perf_counter()
        g()
        t1 = time.perf_counter()
        g()
        t2 = time.perf_counter()
        ratios.append((t1 - t0) / (t2 - t1))
        steady.append(t2 - t1)
    details = {"seconds_steady": float(np.median(steady))}
    if not _jax_reason():
        _, _, _, _, compile_s, jax_grad = _jax_case(n, L)
        _, b = paired(jax_grad, jax_grad, 1, sz["min_time"])
        details["jax_first_over_steady"] = float((compile_s + b[0]) / b[0])
        details["seconds_jax_compile"] = compile_s
    return _result("first_gradient", f"first shift-rule gradient of a new circuit / its next one, "
                   f"n = {n}, m = {n * L}", 3.0, "<=", ratios, seconds=steady, **details)


def deep_shift(sz, repeats):
    """Every shifted circuit of a long, narrow circuit shares the prefix before its gate."""
    n, G, m = sz["deep"]
    c = deep_narrow(n, G, m)
    H = qg.Observable({"Z" * 2 + "I" * (n - 2): 1.0, "I" * (n - 1) + "X": 0.5})
    theta = angles(c)
    sh = lambda: grad(lambda t: qg.expect(c, H, t))(theta)  # noqa: E731
    adj = lambda: grad(lambda t: qg.expect(c, H, t, gradient="adjoint"))(theta)  # noqa: E731
    diff, t, b = _agree_and_time(sh, adj, sz, max(1, min(repeats, 3)))
    return _result("deep_shift", f"shift-rule gradient / adjoint gradient of a deep narrow circuit, "
                   f"n = {n}, {G:,} gates, m = {c.n_params}", 10.0, "<=", t / b, seconds=t,
                   max_gradient_difference=diff, seconds_shift=float(np.median(t)),
                   seconds_adjoint=float(np.median(b)))


def thread_shift(sz, repeats):
    """Rows of one gradient split over a pool of two threads (NumPy releases the GIL)."""
    from concurrent.futures import ThreadPoolExecutor

    n, L = sz["threads"]
    c, H, theta = _ising_setup(n, L)
    one = lambda: grad(lambda t: qg.expect(c, H, t))(theta)  # noqa: E731
    with ThreadPoolExecutor(2) as pool:
        two = lambda: grad(lambda t: qg.expect(c, H, t, executor=pool))(theta)  # noqa: E731
        diff, t, b = _agree_and_time(one, two, sz, repeats)
    return _result("thread_shift", f"shift-rule gradient, one thread / two threads "
                   f"(executor=ThreadPoolExecutor(2)), n = {n}, m = {c.n_params}", 1.5, ">=", t / b,
                   seconds=b, max_gradient_difference=diff, seconds_one=float(np.median(t)),
                   seconds_two=float(np.median(b)))


def batch_adjoint(sz, repeats):
    return data_sets.batch_adjoint(sz, repeats, _result)


def batch_shift(sz, repeats):
    return data_sets.batch_shift(sz, repeats, _result)


def kernel_gram(sz, repeats):
    return data_sets.kernel_gram(sz, repeats, _result)


FIGURES = [gate_pass, adjoint_forward, shift_forward, backprop_adjoint, hessian_adjoint, forward_memory,
           forward_memory_single, adjoint_memory, overhead, import_time, rotosolve_sweep, jax_adjoint,
           jax_shift, first_gradient, batch_adjoint, batch_shift, kernel_gram, deep_shift, thread_shift]
