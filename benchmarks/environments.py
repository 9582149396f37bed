"""``python -m benchmarks --environments``: every timing row, BLAS variables unset vs pinned.

Each configuration is a child ``python -m benchmarks`` run: with ``OPENBLAS_NUM_THREADS``,
``OMP_NUM_THREADS`` and ``MKL_NUM_THREADS`` removed from its environment ("unset", what a
user has by default) or set to 1 ("pinned"); on the machine as it is ("idle") and next to
one other process that keeps a core busy with a Python loop ("busy"). Unset and pinned runs
take turns, twice each by default (``--rounds``), the unset one first in even rounds and
second in odd ones, so slow phases of a shared machine fall on both. The figure per row
is the median over rounds of the row's target time in a round's unset run over that in its
pinned run, which ran right before or after it (a shared machine's slow phases last minutes and change
a row's time between child runs by up to a factor of two here: the ratio of two adjacent runs
cancels more of that than the ratio of all unset runs' median to all pinned runs', which the
JSON keeps as ``ratio_of_medians``); the target is at most 1.10 (the default never slower
than pinned by more than 10%). A row's
target is timed after its baseline's BLAS workers have gone idle (`benchmarks.timing`), so
it does not pay for the threads of a product it did not make; the import row's time is that of
``import qgradlib`` in a fresh interpreter that imported NumPy and waited the same settle
time (NumPy's import starts OpenBLAS's workers, which spin for a while after it). Other
environment variables (OPENBLAS_CORETYPE and the like) are passed on unchanged. The JAX rows
are left out (they time the same adjoint gradient as other rows) unless ``--only`` names them.
"""
from __future__ import annotations

import json
import os
import subprocess
import sys
import tempfile

__all__ = ["main", "markdown"]

_VARS = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS")
TARGET = 1.10
ROUNDS = 2


def _env(pinned):
    env = {k: v for k, v in os.environ.items() if k not in _VARS}
    if pinned:
        env.update({v: "1" for v in _VARS})
    root = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    env["PYTHONPATH"] = root + os.pathsep + env.get("PYTHONPATH", "")
    return env, root


def _child(args, pinned, out):
    env, root = _env(pinned)
    cmd = [sys.executable, "-m", "benchmarks", "--no-plot", "--out", out]
    if args.quick:
        cmd.append("--quick")
    if args.repeats:
        cmd += ["--repeats", str(args.repeats)]
    if args.only:
        cmd += ["--only", args.only]
    else:
        cmd.append("--no-jax")
    subprocess.run(cmd, env=env, cwd=root, check=True, stdout=subprocess.DEVNULL)
    with open(out) as fh:
        return {f["key"]: f for f in json.load(fh)["figures"] if "seconds" in f}


def _measure(args, load):
    runs = {False: [], True: []}
    spinner = None
    if load == "busy":
        spinner = subprocess.Popen([sys.executable, "-c", "while True:\n    pass"])
    try:
        with tempfile.TemporaryDirectory() as tmp:
            for r in range(getattr(args, "rounds", None) or ROUNDS):
                # the two children of a round swap places every other round, so a cost of
                # running first (or second) falls on both configurations alike
                for pinned in ((False, True) if r % 2 == 0 else (True, False)):
                    runs[pinned].append(_child(args, pinned, os.path.join(tmp, f"{load}{r}{pinned}.json")))
    finally:
        if spinner is not None:
            spinner.kill()
            spinner.wait()
    rows = {}
    for key, fig in runs[False][0].items():
        # in run order: round r's unset and pinned children ran one right after the other
        pairs = [(u[key]["seconds"], p[key]["seconds"]) for u, p in zip(runs[False], runs[True])
                 if key in u and key in p]
        unset, pinned = [u for u, _ in pairs], [p for _, p in pairs]
        rows[key] = {"figure": fig["figure"], "seconds_unset": _median(unset),
                     "seconds_pinned": _median(pinned),
                     "ratio": _median([u / p for u, p in pairs]),
                     "ratio_of_medians": _median(unset) / _median(pinned),
                     "samples_unset": unset, "samples_pinned": pinned}
    return rows


def _median(xs):
    xs = sorted(xs)
    k = len(xs) // 2
    return xs[k] if len(xs) % 2 else 0.5 * (xs[k - 1] + xs[k])


def markdown(doc) -> str:
    lines = [f"Measured by `python -m benchmarks --environments` ({doc['mode']}, {doc.get('rounds', ROUNDS)} alternating runs "
             "per configuration): time of each row's target with the BLAS thread variables unset, "
             "over the time with them set to 1 in the run next to it, median over rounds "
             "(in brackets: the median times of all unset and all pinned runs).", "",
             "| row | idle: unset / pinned | busy: unset / pinned | met (≤ 1.10 both) |",
             "|---|---|---|---|"]
    for key, idle in doc["idle"].items():
        busy = doc["busy"].get(key)
        b = f"{busy['ratio']:.2f} ({busy['seconds_unset'] * 1e3:.3g} / {busy['seconds_pinned'] * 1e3:.3g} ms)" \
            if busy else "-"
        met = idle["ratio"] <= TARGET and (busy is None or busy["ratio"] <= TARGET)
        lines.append(f"| {idle['figure']} | {idle['ratio']:.2f} ({idle['seconds_unset'] * 1e3:.3g} / "
                     f"{idle['seconds_pinned'] * 1e3:.3g} ms) | {b} | {'yes' if met else 'no'} |")
    return "\n".join(lines) + "\n"


def main(args):
    root = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    doc = {"mode": "quick" if args.quick else "full", "rounds": getattr(args, "rounds", None) or ROUNDS}
    for load in ("idle", "busy"):
        print(f"{load}: unset and pinned runs in turn ...", flush=True)
        doc[load] = _measure(args, load)
    text = markdown(doc)
    print(text)
    out = args.out or os.path.join(root, "benchmarks", "results", "environments.json")
    from .report import write
    write(doc, out, text, args.markdown)
    return 0
