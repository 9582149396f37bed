"""BLAS threads around engine calls: one thread where more threads only cost.

The engine's products are small (a 2x2 to 16x16 matrix against slabs of a state) or
memory-bound, so on a few cores a second BLAS thread buys little, and when another process
keeps a core busy (a second notebook, a test run, the workers of an executor) OpenBLAS's
spinning threads make a call several times slower than one thread (docs/performance.md has
the measured table). So every engine entry point runs inside `engine_threads`, which sets
BLAS to one thread for states of fewer than `THREADED_QUBITS` qubits and leaves the
caller's setting alone above; tasks on executors run with one BLAS thread per worker
(`worker_threads`).

``QGRADLIB_BLAS_THREADS`` in the environment overrides both: a positive int is the number of
BLAS threads of every engine call and every worker (for example ``2`` to let BLAS use two
cores on an otherwise idle machine).

The limit costs about a microsecond per call: the thread-pool controller is built once (and
again only when a new BLAS library was loaded), and the libraries are asked directly.

Examples
--------
>>> with engine_threads(10):
...     pass
"""
from __future__ import annotations

import functools
import os
import sys

__all__ = ["engine_threads", "worker_threads", "limited", "THREADED_QUBITS", "blas_libraries"]

# at and above this many qubits the caller's BLAS threads are kept: below it one thread was
# never slower here (measured up to 22 qubits: benchmarks' thread table)
THREADED_QUBITS = 24
_ENV = "QGRADLIB_BLAS_THREADS"

_STATE = {"key": None, "libs": ()}


def _requested():
    raw = os.environ.get(_ENV)
    if raw is None or raw.strip() == "":
        return None
    try:
        k = int(raw)
    except ValueError:
        raise ValueError(f"{_ENV} must be a positive int (BLAS threads); got {raw!r}") from None
    if k < 1:
        raise ValueError(f"{_ENV} must be a positive int (BLAS threads); got {raw!r}")
    return k


def blas_libraries():
    """The BLAS libraries loaded in this process (threadpoolctl controllers), cached."""
    # NumPy's BLAS is loaded with NumPy; SciPy brings its own with scipy.linalg
    key = "scipy.linalg" in sys.modules
    if _STATE["key"] != key:
        try:
            from threadpoolctl import ThreadpoolController
            libs = tuple(lib for lib in ThreadpoolController().lib_controllers
                         if lib.user_api == "blas")
        except Exception:       # no threadpoolctl or an unknown BLAS: leave threads alone
            libs = ()
        _STATE["libs"], _STATE["key"] = libs, key
    return _STATE["libs"]


class _Limit:
    """Set every BLAS library to ``threads`` on entry and restore it on exit."""

    __slots__ = ("threads", "saved")

    def __init__(self, threads):
        self.threads = threads
        self.saved = ()

    def __enter__(self):
        if self.threads is None:
            return self
        saved = []
        for lib in blas_libraries():
            k = lib.get_num_threads()
            if k != self.threads:
                lib.set_num_threads(self.threads)
                saved.append((lib, k))
        self.saved = saved
        return self

    def __exit__(self, *exc):
        for lib, k in self.saved:
            lib.set_num_threads(k)
        self.saved = ()
        return False


def engine_threads(n_qubits: int) -> _Limit:
    """Context: one BLAS thread for an engine call on ``n_qubits`` (see the module notes)."""
    want = _requested()
    if want is None and n_qubits < THREADED_QUBITS:
        want = 1
    return _Limit(want)


def worker_threads() -> _Limit:
    """Context for a task on an executor's worker: one BLAS thread (or ``QGRADLIB_BLAS_THREADS``)."""
    want = _requested()
    return _Limit(1 if want is None else want)


def limited(fn):
    """Decorate an engine entry point ``fn(circuit, ...)`` to run inside `engine_threads`."""
    @functools.wraps(fn)
    def call(circuit, *args, **kwargs):
        with engine_threads(circuit.n_qubits):
            return fn(circuit, *args, **kwargs)
    return call
