"""``python -m benchmarks``: every figure of the performance table, with same-run baselines.

Options: ``--quick`` (small sizes, a smoke run), ``--repeats R``, ``--out PATH`` (JSON
results), ``--markdown PATH`` (the table as Markdown), ``--plot PATH`` (the cost-growth PNG;
``--no-plot`` to skip it), ``--only KEYS`` (some figures), ``--threads T`` (pin BLAS to T
threads through OPENBLAS/OMP/MKL_NUM_THREADS; by default the environment is left as the user
has it, which is what the targets are about), ``--no-jax`` (skip the JAX comparison rows),
``--environments`` (every timing row with the BLAS variables unset and set to one, on an idle
machine and next to one busy process: `benchmarks.environments`).
"""
from __future__ import annotations

import argparse
import os
import sys


def _parse(argv):
    p = argparse.ArgumentParser(prog="python -m benchmarks", description=__doc__.split("\n")[0])
    p.add_argument("--quick", action="store_true", help="small sizes: a smoke run of a few seconds")
    p.add_argument("--repeats", type=int, default=None, help="repeats per figure (default 5, quick 2)")
    p.add_argument("--out", default=None, help="JSON results file (default benchmarks/results/latest.json)")
    p.add_argument("--plot", default=None, help="cost-growth PNG (default docs/img/cost_growth.png; "
                   "quick: benchmarks/results/cost_growth_quick.png)")
    p.add_argument("--no-plot", action="store_true", help="skip the cost-growth measurements and plot")
    p.add_argument("--threads", type=int, default=None,
                   help="pin BLAS threads (default: leave the environment as it is)")
    p.add_argument("--no-jax", action="store_true", help="skip the JAX comparison rows")
    p.add_argument("--environments", action="store_true",
                   help="timing rows with BLAS variables unset vs set to 1, idle and busy")
    p.add_argument("--only", default=None, help="comma-separated figure keys to run")
    p.add_argument("--rounds", type=int, default=None,
                   help="with --environments: alternating child runs per configuration (default 2)")
    p.add_argument("--markdown", default=None, help="also write the table as Markdown to this path")
    args = p.parse_args(argv)
    if args.repeats is not None and args.repeats < 1:
        p.error("--repeats must be a positive int")
    if args.threads is not None and args.threads < 1:
        p.error("--threads must be a positive int")
    return args


def main(argv=None):
    args = _parse(sys.argv[1:] if argv is None else argv)
    if args.environments:
        from .environments import main as environments
        return environments(args)
    if args.threads is not None:
        for var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
            os.environ[var] = str(args.threads)
    # imports after the thread settings: BLAS reads them when NumPy loads
    import platform
    import time

    import numpy as np

    from .figures import FIGURES, OPTIONS, SIZES
    OPTIONS["jax"] = not args.no_jax
    from .growth import measure, plot

    mode = "quick" if args.quick else "full"
    repeats = args.repeats or (2 if args.quick else 5)
    root = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    out = args.out or os.path.join(root, "benchmarks", "results", "latest.json")
    png = args.plot or os.path.join(root, "docs", "img", "cost_growth.png") if not args.quick else \
        (args.plot or os.path.join(root, "benchmarks", "results", "cost_growth_quick.png"))
    machine = _machine(np, platform, args.threads)
    print(f"qgradlib benchmarks ({mode}, {repeats} repeats) on {machine['cpu']} "
          f"({machine['nproc']} cores), numpy {machine['numpy']}, BLAS {machine['blas_threads']}")
    print("Times are simulation on this CPU, not device measurements.\n")
    keys = None if args.only is None else set(args.only.split(","))
    sz = SIZES[mode]
    results = []
    t0 = time.perf_counter()
    for fig in FIGURES:
        if keys is not None and fig.__name__ not in keys and _key(fig) not in keys:
            continue
        mem = fig.__name__.endswith("memory")
        got = fig(sz, 1 if (mem and args.quick) else (min(repeats, 2) if mem else repeats))
        for r in (got if isinstance(got, list) else [got]):
            results.append(r)
            _print(r)
    growth = None
    if not args.no_plot and keys is None:
        growth = measure(mode, repeats)
        os.makedirs(os.path.dirname(os.path.abspath(png)), exist_ok=True)
        plot(growth, png)
        print(f"\ncost-growth plot: {png}")
    doc = {"suite": "qgradlib benchmarks", "mode": mode, "repeats": repeats, "machine": machine,
           "seconds": time.perf_counter() - t0, "figures": results, "growth": growth,
           "plot": None if growth is None else os.path.relpath(os.path.abspath(png), root)}
    from .report import markdown, write
    write(doc, out, markdown(doc) if args.markdown else None, args.markdown)
    return 0


def _key(fig):
    return fig.__name__


def _print(r):
    unit = {"ratio": "x", "states": " states", "us": " us"}[r["unit"]]
    if r.get("skipped"):
        print(f"{r['figure']}\n    skipped: {r['skipped']}  (target {r['op']} {r['target']:g}{unit})")
        return
    ok = "met" if r["met"] else "NOT met"
    print(f"{r['figure']}\n    median {r['median']:.3g}{unit}  (min {r['min']:.3g}, max {r['max']:.3g}, "
          f"IQR {r['q1']:.3g}-{r['q3']:.3g}, {len(r['samples'])} repeats)  target {r['op']} "
          f"{r['target']:g}: {ok}")
    shown = {k: v for k, v in r["details"].items()
             if k.startswith("seconds") or k.endswith("_us") or "_over_" in k}
    if shown:
        print("    " + ", ".join(f"{k} {v:.3g}" for k, v in shown.items()))


def _machine(np, platform, threads):
    cpu = platform.processor() or "unknown"
    try:
        with open("/proc/cpuinfo") as fh:
            for line in fh:
                if line.startswith("model name"):
                    cpu = line.split(":", 1)[1].strip()
                    break
    except OSError:
        pass
    pinned = {v: os.environ[v] for v in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS")
              if v in os.environ}
    blas = ("pinned to " + str(threads) + " thread(s)") if threads is not None else \
        ("environment: " + ", ".join(f"{k}={v}" for k, v in pinned.items()) if pinned
         else "default environment (no thread variables set)")
    return {"cpu": cpu, "nproc": os.cpu_count(), "numpy": np.__version__,
            "python": platform.python_version(), "platform": platform.platform(),
            "blas_threads": blas}


if __name__ == "__main__":
    sys.exit(main())
