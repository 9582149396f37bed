"""How cost grows with qubits, layers and trainable parameters (data and a PNG plot)."""
from __future__ import annotations

import time

import numpy as np
from autograd import grad

import qgradlib as qg

from .circuits import angles, ising, layered

__all__ = ["measure", "plot"]

GRID = {
    "full": {"qubits": [4, 6, 8, 10, 12, 14, 16, 18], "layers": [1, 2, 4, 6, 8], "layers_n": 10,
             "params": [5, 10, 20, 40, 80], "params_n": 10, "params_layers": 8, "shift_max_n": 16},
    "quick": {"qubits": [3, 4, 5], "layers": [1, 2], "layers_n": 4, "params": [2, 4],
              "params_n": 4, "params_layers": 1, "shift_max_n": 5},
}


def _best(fn, repeats):
    """Fastest of ``repeats`` calls: the cost curve, with the machine's interruptions removed."""
    fn()
    ts = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        ts.append(time.perf_counter() - t0)
    return float(np.min(ts))


def _costs(c, H, repeats, shift=True):
    theta = angles(c)
    out = {"forward": _best(lambda: qg.expect(c, H, theta), repeats),
           "adjoint": _best(lambda: grad(lambda t: qg.expect(c, H, t, gradient="adjoint"))(theta), repeats)}
    if shift:
        out["shift"] = _best(lambda: grad(lambda t: qg.expect(c, H, t))(theta), repeats)
    return out


def measure(mode, repeats):
    g = GRID[mode]
    rep = max(1, min(repeats, 5))
    qubits = []
    for n in g["qubits"]:
        qubits.append({"n": n, **_costs(layered(n, 2), ising(n), rep, shift=n <= g["shift_max_n"])})
    layers = []
    n = g["layers_n"]
    for L in g["layers"]:
        layers.append({"layers": L, "m": n * L, **_costs(layered(n, L), ising(n), rep)})
    params = []
    n, L = g["params_n"], g["params_layers"]
    for m in g["params"]:
        params.append({"m": m, **_costs(layered(n, L, trainable=m), ising(n), rep)})
    return {"qubits": qubits, "layers": layers, "params": params,
            "notes": {"qubits": "2 layers", "layers": f"n = {g['layers_n']}",
                      "params": f"n = {g['params_n']}, {g['params_layers']} layers, other angles fixed"}}


def plot(data, path):
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, axes = plt.subplots(1, 3, figsize=(13, 4))
    panels = [("qubits", "n", "qubits n\n(" + data["notes"]["qubits"] + ")"),
              ("layers", "layers", "layers, m = n * layers\n(" + data["notes"]["layers"] + ")"),
              ("params", "m", "trainable parameters m\n(" + data["notes"]["params"] + ")")]
    for ax, (key, xk, label) in zip(axes, panels):
        rows = data[key]
        for what, style in (("forward", "o-"), ("adjoint", "s-"), ("shift", "^-")):
            pts = [(r[xk], r[what]) for r in rows if what in r]
            if pts:
                x, y = zip(*pts)
                ax.plot(x, y, style, label={"forward": "forward value", "adjoint": "adjoint gradient",
                                            "shift": "shift-rule gradient"}[what])
        ax.set_yscale("log")
        ax.set_xlabel(label)
        ax.set_ylabel("seconds")
        ax.grid(True, which="both", alpha=0.3)
    axes[0].legend()
    fig.suptitle("qgradlib cost growth: fastest of 5 calls (simulation on a CPU; layered RY/CZ "
                 "circuit, Ising chain observable)")
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return path
