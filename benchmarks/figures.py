"""The figures of the performance table, each a ratio against a same-run baseline."""
from __future__ import annotations

import json
import os
import subprocess
import sys

import numpy as np
from autograd import grad

import qgradlib as qg

from . import data_sets
from .circuits import angles, ising, ising_terms, layered
from .plain_sim import layered_energy
from .timing import paired, summary

__all__ = ["FIGURES", "SIZES"]

# full and quick sizes of every workload
SIZES = {
    "full": {"gate_n": 22, "gate_layers": 2, "adj_n": 16, "adj_layers": 4, "shift_n": 10,
             "shift_layers": 4, "fwd_mem_n": 26, "adj_mem_n": 24, "mem_layers": 1,
             "overhead_layers": 300, "min_time": 0.05, "data_n": 8, "data_N": 256, "data_m": 48},
    "quick": {"gate_n": 12, "gate_layers": 2, "adj_n": 8, "adj_layers": 4, "shift_n": 6,
              "shift_layers": 4, "fwd_mem_n": 12, "adj_mem_n": 10, "mem_layers": 1,
              "overhead_layers": 20, "min_time": 0.002, "data_n": 3, "data_N": 8, "data_m": 6},
}


def _result(key, figure, target, op, samples, unit="ratio", **details):
    s = summary(samples)
    met = s["median"] <= target if op == "<=" else s["median"] >= target
    return {"key": key, "figure": figure, "target": target, "op": op, "unit": unit,
            "met": bool(met), **s, "details": details}


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
                   "<=", t / G / b, gates=G, seconds_per_gate=float(np.median(t) / G),
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
                   f"(m = {c.n_params})", 4.0, "<=", t / b, m=c.n_params,
                   seconds_adjoint=float(np.median(t)), seconds_forward=float(np.median(b)))


def shift_forward(sz, repeats):
    n, L = sz["shift_n"], sz["shift_layers"]
    c, H, theta = _ising_setup(n, L)
    fwd = lambda: qg.expect(c, H, theta)  # noqa: E731
    sh = lambda: grad(lambda t: qg.expect(c, H, t))(theta)  # noqa: E731
    t, b = paired(sh, fwd, repeats, sz["min_time"])
    return _result("shift_forward", f"shift-rule gradient / forward value, n = {n}, {L} layers "
                   f"(m = {c.n_params})", 15.0, "<=", t / b, m=c.n_params,
                   circuits=2 * c.n_params + 1, seconds_shift=float(np.median(t)),
                   seconds_forward=float(np.median(b)))


def backprop_adjoint(sz, repeats):
    n, L = sz["adj_n"], sz["adj_layers"]
    c, H, theta = _ising_setup(n, L)
    terms = ising_terms(n)
    adj = lambda: grad(lambda t: qg.expect(c, H, t, gradient="adjoint"))(theta)  # noqa: E731
    bp = lambda: grad(layered_energy)(theta, n, L, terms)  # noqa: E731
    diff = float(np.max(np.abs(adj() - bp())))
    t, b = paired(bp, adj, repeats, sz["min_time"])
    return _result("backprop_adjoint", f"autograd backprop through a plain tensordot simulator / "
                   f"our adjoint gradient, n = {n}, m = {c.n_params}", 4.0, ">=", t / b,
                   max_gradient_difference=diff, seconds_backprop=float(np.median(t)),
                   seconds_adjoint=float(np.median(b)))


def _probe(what, n, layers):
    env = dict(os.environ)
    root = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    env["PYTHONPATH"] = root + os.pathsep + env.get("PYTHONPATH", "")
    out = subprocess.run([sys.executable, "-m", "benchmarks.memory_probe", what, str(n), str(layers)],
                         capture_output=True, text=True, env=env, cwd=root, check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def _memory(key, what, n, layers, target, repeats, label):
    runs = [_probe(what, n, layers) for _ in range(repeats)]
    ratios = [r["traced_peak_bytes"] / r["state_bytes"] for r in runs]
    rss = [r["rss_growth_bytes"] / r["state_bytes"] for r in runs]
    return _result(key, label, target, "<=", ratios, unit="states",
                   state_bytes=runs[0]["state_bytes"], rss_growth_states=rss,
                   measure="tracemalloc peak of the call in a child process / 16 * 2**n bytes")


def forward_memory(sz, repeats):
    n = sz["fwd_mem_n"]
    return _memory("forward_memory", "forward", n, sz["mem_layers"], 2.5, repeats,
                   f"peak memory of a forward run, n = {n} / one state")


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
                   "<=", t / G * 1e6, unit="us", gates=G,
                   ufunc_call_us=float(np.median(b) * 1e6),
                   per_gate_over_ufunc_call=float(np.median(t / G / b)))


def batch_adjoint(sz, repeats):
    return data_sets.batch_adjoint(sz, repeats, _result)


def batch_shift(sz, repeats):
    return data_sets.batch_shift(sz, repeats, _result)


def kernel_gram(sz, repeats):
    return data_sets.kernel_gram(sz, repeats, _result)


FIGURES = [gate_pass, adjoint_forward, shift_forward, backprop_adjoint, forward_memory,
           adjoint_memory, overhead, batch_adjoint, batch_shift, kernel_gram]
