"""Child process: peak memory of one forward run or one adjoint gradient, as JSON on stdout.

``python -m benchmarks.memory_probe {forward|forward-single|adjoint} N LAYERS``
(forward-single: ``precision="single"``, against a complex64 state). Two measures: the peak of
traced allocations (tracemalloc sees every NumPy data buffer) and the growth of the
process's peak resident set (ru_maxrss) over its resident set just before the call.
"""
from __future__ import annotations

import json
import resource
import sys
import tracemalloc


def _rss():
    with open("/proc/self/statm") as fh:
        pages = int(fh.read().split()[1])
    import os
    return pages * os.sysconf("SC_PAGE_SIZE")


def main(argv):
    what, n, layers = argv[0], int(argv[1]), int(argv[2])
    import gc

    from autograd import grad

    import qgradlib as qg
    from benchmarks.circuits import angles, ising, layered

    c = layered(n, layers)
    theta = angles(c)
    H = ising(n)
    state = 16 * 2 ** n
    if what == "forward":
        fn = lambda: qg.expect(c, H, theta)  # noqa: E731
    elif what == "forward-single":
        fn = lambda: qg.expect(c, H, theta, precision="single")  # noqa: E731
        state = 8 * 2 ** n
    elif what == "adjoint":
        fn = lambda: grad(lambda t: qg.expect(c, H, t, gradient="adjoint"))(theta)  # noqa: E731
    else:
        raise SystemExit(f"unknown workload {what!r}")
    gc.collect()
    before = _rss()
    tracemalloc.start()
    fn()
    _, traced = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    print(json.dumps({"what": what, "n": n, "layers": layers, "state_bytes": state,
                      "traced_peak_bytes": traced, "rss_before": before, "rss_peak": peak,
                      "rss_growth_bytes": max(0, peak - before)}))


if __name__ == "__main__":
    main(sys.argv[1:])
