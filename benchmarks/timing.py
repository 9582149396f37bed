"""Paired timings: each repeat times the baseline and the target back to back.

Between the two blocks the timer waits for the BLAS worker threads to go idle when BLAS runs
on more than one thread: OpenBLAS's workers keep spinning on a core after a threaded
product (about 2**28 cycles, 0.13 s at 2 GHz, its default thread timeout: from memory), so
without the wait the block that follows a threaded baseline (a plain NumPy product, a
tensordot simulator) pays for the baseline's workers, which next to one other busy process
took a core from the target (a development reading, see docs/performance.md). With one BLAS
thread there are no workers and no wait.
"""
from __future__ import annotations

import time

import numpy as np

__all__ = ["calibrate", "paired", "summary"]

SETTLE_SECONDS = 0.2


def _threaded():
    try:
        from threadpoolctl import threadpool_info
    except ImportError:
        return True
    return any(lib.get("num_threads", 1) > 1 for lib in threadpool_info() if lib.get("user_api") == "blas")


def _once(fn, inner):
    t0 = time.perf_counter()
    for _ in range(inner):
        fn()
    return (time.perf_counter() - t0) / inner


def calibrate(fn, min_time):
    """Inner repetitions so one measurement of ``fn`` lasts at least ``min_time`` seconds."""
    fn()
    t = _once(fn, 1)
    return max(1, int(np.ceil(min_time / max(t, 1e-9))))


def paired(target, baseline, repeats, min_time=0.02):
    """Per-repeat times (seconds per call) of ``target`` and ``baseline``, measured in turn."""
    it = calibrate(target, min_time)
    ib = calibrate(baseline, min_time)
    ts, bs = [], []
    wait = SETTLE_SECONDS if _threaded() else 0.0
    for _ in range(repeats):
        time.sleep(wait)
        bs.append(_once(baseline, ib))
        time.sleep(wait)
        ts.append(_once(target, it))
    return np.array(ts), np.array(bs)


def summary(samples):
    s = np.asarray(samples, dtype=float)
    q1, med, q3 = np.percentile(s, [25, 50, 75])
    return {"median": float(med), "min": float(s.min()), "max": float(s.max()),
            "q1": float(q1), "q3": float(q3), "samples": [float(x) for x in s]}
