"""Paired timings: each repeat times the baseline and the target back to back.

Between the two blocks the timer waits for the BLAS worker threads to go idle when BLAS runs
on more than one thread: OpenBLAS's workers keep spinning on a core after a threaded
product (about 2**28 cycles, 0.13 s at 2 GHz, its default thread timeout: from memory), so
without the wait the block that follows a threaded baseline (a plain NumPy product, a
tensordot simulator) pays for the baseline's workers, which next to one other busy process
took a core from the target (a development reading, see docs/performance.md). The wait is the
same with one BLAS thread (no workers then) so that both environments are timed alike; it
keeps the calling thread busy rather than asleep, and each block starts with one untimed
call. With a sleep instead, both sides changed in ways a training loop never sees
(development readings here): our kernel matrix call ran about 10% slower right after it,
and JAX's jitted 4-qubit gradient about twice as fast as back to back.
"""
from __future__ import annotations

import time

import numpy as np

__all__ = ["calibrate", "paired", "summary"]

SETTLE_SECONDS = 0.2


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
    for _ in range(repeats):
        bs.append(_settled(baseline, ib))
        ts.append(_settled(target, it))
    return np.array(ts), np.array(bs)


def _settled(fn, inner):
    """Wait for idle BLAS workers, warm up with one untimed call, then time ``inner`` calls."""
    t0 = time.perf_counter()
    while time.perf_counter() - t0 < SETTLE_SECONDS:
        pass
    fn()
    return _once(fn, inner)


def summary(samples):
    s = np.asarray(samples, dtype=float)
    q1, med, q3 = np.percentile(s, [25, 50, 75])
    return {"median": float(med), "min": float(s.min()), "max": float(s.max()),
            "q1": float(q1), "q3": float(q3), "samples": [float(x) for x in s]}
