"""Scale-out: wall time of a Hessian on two workers against the serial run, in the same run.

The scenario is a hardware-efficient layer on n qubits (RY on every qubit, a CNOT ladder, RX
on every qubit; 2n parameters) and an observable of two Pauli words, so the Hessian's merged
plan has ``2 (2n)**2 + 1`` distinct circuits, each measured in two settings. Each figure is
the median wall time over repeats of ``curvature.hessian``; the speed-up is the serial median
over the executor's median (and, less sensitive to bursts of other work on the machine, the
serial best run over the executor's best run). The serial job is timed twice, here (where
the local clusters' scheduler threads also run) and alone in a pool worker; the faster of
the two is the baseline. Serial and distributed runs use the same engine memory budget
(``memory=``, batches of `BATCH` circuits), so they run the same batch shapes and only the
parallelism differs. The pools are started and warmed up before timing (start-up and first
call are reported separately); the runs take turns within every repeat, so changes in the
machine's load fall on all of them alike; every distributed result is checked against the
serial one to 1e-12.

A machine's cores may be busy with other work: the last row of each size runs two copies
of the serial job at once on the process pool, one per worker; ``2 T(one copy) / T(two
copies)`` is the speed-up the free cores allowed during the run, the bound to read the other
ratios against.

Usage::

    python benchmarks/scale_out.py              # print the table, rewrite it in docs/scale-out.md
    python benchmarks/scale_out.py --no-write   # print only
    python benchmarks/scale_out.py --qubits 13 14 --repeats 5

The numbers are simulator timings on this machine, not device run times.
"""
from __future__ import annotations

import argparse
import multiprocessing
import os
import pathlib
import statistics
import sys
import time
from concurrent.futures import ProcessPoolExecutor
from contextlib import ExitStack

import numpy as np

import qgradlib as qg
from qgradlib import curvature

try:                       # run as a script (python benchmarks/...py) or as a module
    from doc_tables import rewrite_block
except ImportError:        # pragma: no cover
    from benchmarks.doc_tables import rewrite_block

DOC = pathlib.Path(__file__).resolve().parents[1] / "docs" / "scale-out.md"
MARKS = ("<!-- scale-out-table start -->", "<!-- scale-out-table end -->")
WORKERS = 2
BATCH = 32              # circuits per engine batch, the same for every run (via memory=)


def scenario(n):
    c = qg.Circuit(n)
    for q in range(n):
        c.ry(q)
    for q in range(n - 1):
        c.cnot(q, q + 1)
    for q in range(n):
        c.rx(q)
    H = qg.Observable({"Z" * n: 1.0, "X" + "I" * (n - 1): 0.5})
    return c, H, np.linspace(0.1, 1.2, c.n_params)


def timed(fn):
    t0 = time.perf_counter()
    out = fn()
    return time.perf_counter() - t0, out


def memory_for(n):
    return BATCH * 3 * 16 * 2 ** n      # the engine's bytes per circuit, times the batch


def serial_job(n):
    """One whole serial Hessian, as a task (for the capacity check)."""
    c, H, theta = scenario(n)
    return curvature.hessian(c, H, theta, memory=memory_for(n)).executions


def measure(n, repeats):
    """Rows (label, workers, median s, ratio of medians, ratio of best runs, first-call s,
    executions) for n qubits.

    The runs take turns within every repeat, so a change in the machine's load falls on all
    of them alike.
    """
    from distributed import Client, LocalCluster

    c, H, theta = scenario(n)

    def run(executor=None):
        return curvature.hessian(c, H, theta, memory=memory_for(n), executor=executor)

    def cluster(stack):
        cl = stack.enter_context(LocalCluster(n_workers=WORKERS, threads_per_worker=1,
                                              processes=True, dashboard_address=None))
        return stack.enter_context(Client(cl))

    _, reference = timed(run)
    executors, first = {"serial, this process": None}, {}
    saved = dict(os.environ)
    with ExitStack() as stack:
        # a dask nanny writes its workers' environment (MALLOC_TRIM_THRESHOLD_, OMP_NUM_THREADS,
        # ...) into this process's os.environ, and every process started later inherits it:
        # put the environment back afterwards, and start the pool before the clusters
        stack.callback(lambda: (os.environ.clear(), os.environ.update(saved)))
        starts = [("ProcessPoolExecutor (spawn)", lambda: stack.enter_context(
                      ProcessPoolExecutor(WORKERS, mp_context=multiprocessing.get_context("spawn")))),
                  ("dask LocalCluster, MALLOC_TRIM_THRESHOLD_ unset", lambda: _unset(stack, cluster)),
                  ("dask LocalCluster, default worker environment", lambda: cluster(stack))]
        for label, start in starts:
            t0 = time.perf_counter()
            executors[label] = start()
            run(executors[label])               # warm-up: workers start and import qgradlib
            first[label] = time.perf_counter() - t0
        pool = executors["ProcessPoolExecutor (spawn)"]
        times = {label: [] for label in list(executors) + ["one", "two"]}
        for _ in range(repeats):
            for label, executor in executors.items():
                seconds, r = timed(lambda: run(executor))
                if np.max(np.abs(r.hessian - reference.hessian)) > 1e-12 \
                        or r.executions != reference.executions:
                    raise SystemExit(f"{label}: the distributed Hessian differs from the serial one")
                times[label].append(seconds)
            times["one"].append(timed(lambda: pool.submit(serial_job, n).result())[0])
            times["two"].append(timed(lambda: [f.result() for f in
                                               [pool.submit(serial_job, n) for _ in range(2)]])[0])
    med = {k: statistics.median(v) for k, v in times.items()}
    best = {k: min(v) for k, v in times.items()}
    # the baseline is the faster serial run: here (where the clusters' scheduler threads also
    # live) or alone in a pool worker
    s_med = min(med["serial, this process"], med["one"])
    s_best = min(best["serial, this process"], best["one"])
    ex = reference.executions
    label_one = "serial, alone in a pool worker"
    rows = [(label, 1 if label.startswith("serial") else WORKERS, med[label], s_med / med[label],
             s_best / best[label], first.get(label), ex) for label in executors]
    rows.insert(1, (label_one, 1, med["one"], s_med / med["one"], s_best / best["one"], None, ex))
    rows.append(("capacity check: two serial copies at once", WORKERS, med["two"],
                 2 * med["one"] / med["two"], 2 * best["one"] / best["two"], None, 2 * ex))
    return c, rows


def _unset(stack, cluster):
    import dask

    # dask starts workers with MALLOC_TRIM_THRESHOLD_=65536, which makes every large
    # temporary array of the engine a fresh mapping of zeroed pages
    with dask.config.set({"distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_": None}):
        return cluster(stack)           # the nannies read their environment when they start


def table(qubits, repeats) -> str:
    lines = ["| qubits | executions | run | workers | median wall time / s | speed-up vs serial "
             "(medians) | speed-up (best runs) | start-up + first call / s |",
             "| --- | --- | --- | --- | --- | --- | --- | --- |"]
    for n in qubits:
        c, rows = measure(n, repeats)
        for label, w, seconds, ratio, ratio_best, first, executions in rows:
            start = "" if first is None else f"{first:.2f}"
            lines.append(f"| {n} | {executions:,} | {label} | {w} | {seconds:.2f} | {ratio:.2f} "
                         f"| {ratio_best:.2f} | {start} |")
    note = (f"Hessian of a {c.n_params}-parameter layer (RY, CNOT ladder, RX) for the largest size; "
            f"median of {repeats} runs after a warm-up, engine batches of {BATCH} circuits, "
            f"default chunking ({qg.distribute.CHUNKS_PER_WORKER} tasks per worker), on a machine "
            f"with {os.cpu_count()} cores. Simulator timings, not device run times.")
    return "\n".join(lines) + "\n\n" + note + "\n"


def rewrite(text, path=DOC):
    rewrite_block(path, *MARKS, text)


def main(argv=None):
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--qubits", type=int, nargs="+", default=[6, 12],
                   help="register sizes to time (default: 6, where overhead dominates, and 12)")
    p.add_argument("--repeats", type=int, default=7)
    p.add_argument("--no-write", action="store_true", help="print only; leave the docs alone")
    args = p.parse_args(argv)
    text = table(args.qubits, args.repeats)
    print(text)
    if not args.no_write:
        rewrite(text)
        print(f"written to {DOC}", file=sys.stderr)


if __name__ == "__main__":
    main()
