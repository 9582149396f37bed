"""Paired timings: each repeat times the baseline and the target back to back."""
from __future__ import annotations

import time

import numpy as np

__all__ = ["calibrate", "paired", "summary"]


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
        bs.append(_once(baseline, ib))
        ts.append(_once(target, it))
    return np.array(ts), np.array(bs)


def summary(samples):
    s = np.asarray(samples, dtype=float)
    q1, med, q3 = np.percentile(s, [25, 50, 75])
    return {"median": float(med), "min": float(s.min()), "max": float(s.max()),
            "q1": float(q1), "q3": float(q3), "samples": [float(x) for x in s]}
