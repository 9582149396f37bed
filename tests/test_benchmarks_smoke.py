"""The benchmark suite runs at small sizes and writes every figure (no timing asserts)."""
import importlib.util
import json
import os
import subprocess
import sys

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
KEYS = {"gate_pass", "adjoint_forward", "shift_forward", "backprop_adjoint", "hessian_adjoint",
        "forward_memory",
        "adjoint_memory", "overhead_n4", "import_time", "rotosolve_sweep", "first_gradient",
        "batch_adjoint", "batch_shift", "kernel_gram", "deep_shift", "thread_shift"}
# the JAX comparison rows: skipped here (--no-jax keeps the run short and JAX optional), with
# the reason in place of the figures
JAX_KEYS = {"jax_adjoint_n3", "jax_shift"}
# rows of the full run only (the 30-qubit single-precision forward needs 8 GiB): skipped here
FULL_KEYS = {"forward_memory_single"}


def test_quick_suite_writes_every_figure(tmp_path):
    out = tmp_path / "results.json"
    png = tmp_path / "growth.png"
    env = dict(os.environ)
    env["PYTHONPATH"] = ROOT + os.pathsep + env.get("PYTHONPATH", "")
    # the plot needs matplotlib (the "plot" extra); without it the suite runs with --no-plot
    plotting = importlib.util.find_spec("matplotlib") is not None
    plot_args = ["--plot", str(png)] if plotting else ["--no-plot"]
    proc = subprocess.run([sys.executable, "-m", "benchmarks", "--quick", "--repeats", "1",
                           "--no-jax", "--out", str(out)] + plot_args,
                          cwd=ROOT, env=env, capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    doc = json.loads(out.read_text())
    figs = {f["key"]: f for f in doc["figures"]}
    assert set(figs) == KEYS | JAX_KEYS | FULL_KEYS
    for key in JAX_KEYS:
        assert "--no-jax" in figs[key]["skipped"] and figs[key]["met"] is None
    for key in FULL_KEYS:
        assert "full run only" in figs[key]["skipped"] and figs[key]["met"] is None
    assert proc.stdout.count("skipped:") == len(JAX_KEYS | FULL_KEYS)
    for f in (figs[k] for k in KEYS):
        for field in ("median", "min", "max", "q1", "q3", "target", "op", "met", "samples"):
            assert field in f
        assert f["min"] <= f["median"] <= f["max"] and f["median"] > 0
    assert doc["machine"]["nproc"] >= 1 and doc["machine"]["numpy"]
    if plotting:
        assert png.exists() and png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
        assert {"qubits", "layers", "params"} <= set(doc["growth"])
    # every figure is printed as a line of the table
    assert proc.stdout.count("target") == len(KEYS | JAX_KEYS | FULL_KEYS)
    # the plain simulator's gradient agrees with ours (a silent mismatch would void the ratio)
    assert figs["backprop_adjoint"]["details"]["max_gradient_difference"] < 1e-9
    assert figs["hessian_adjoint"]["details"]["max_hessian_difference"] < 1e-9
    # shift rule against adjoint (deep circuit) and threads against one thread: same gradient
    assert figs["deep_shift"]["details"]["max_gradient_difference"] < 1e-9
    assert figs["thread_shift"]["details"]["max_gradient_difference"] < 1e-12
    # the sweep and the one-call-at-a-time baseline ran the circuits the ledger counted
    assert figs["rotosolve_sweep"]["details"]["circuits"] > 0
