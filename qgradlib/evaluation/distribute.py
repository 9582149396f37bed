"""Scale-out: the unique points of a plan evaluated on an executor, in chunks, in order.

Every public function that evaluates circuits takes ``executor=``: any
`concurrent.futures.Executor` (a ``ProcessPoolExecutor``, a ``ThreadPoolExecutor``, the
``get_executor()`` of a dask ``Client``) or a ``dask.distributed.Client`` itself. The one
place it is used is where `qgradlib.evaluation.expectation.evaluate` (and `qgradlib.estimate`) run
their unique rows: `measure_rows` splits them into chunks (``chunk=`` rows each, or by
default about `CHUNKS_PER_WORKER` chunks per worker), sends each chunk with a pickled copy of
the evaluation's description (circuit, observables, options; no executor and no random
generator), and gathers the values in order. The ledger is kept by the caller, in this
process, so it counts the same executions as a serial run.

Shot noise does not depend on the chunking: every call draws one integer ``base`` from the
user's generator, and point ``i`` of the call samples from ``default_rng([base, i])``
(`qgradlib.engine.measurement.PointSeeds`), wherever it runs.

Failures:

- a task that raises: the error comes back wrapped in `ChunkError` (a RuntimeError) with
  the chunk's point indices and gate angles, and the other chunks are cancelled;
- a chunk that comes back wrong: every task returns, beside its values, the position of its
  first point and a checksum of each of its angle rows, and the caller compares them (and
  the values' shape) with what it sent; a mismatch (a wrong shape, rows of another chunk or
  in another order) is a `ChunkError` too;
- a dask worker that dies: the scheduler reschedules its tasks on the remaining or restarted
  workers (up to ``distributed.scheduler.allowed-failures`` times, then dask raises
  ``KilledWorker``, which is wrapped); tasks sent to a ``Client`` also get ``retries=``
  `RETRIES` for errors raised inside them (a ``get_executor(retries=...)`` of your own wins);
- a ``ProcessPoolExecutor`` whose worker process dies cannot retry: the pool is broken for
  good, and the `ChunkError` says which points were running. Use a new pool, or dask.

Examples
--------
>>> import numpy as np
>>> import qgradlib as qg
>>> from concurrent.futures import ThreadPoolExecutor
>>> c = qg.Circuit(2).ry(0).cnot(0, 1).ry(1)
>>> H = qg.Observable({"ZZ": 1.0, "XI": 0.5})
>>> theta = np.array([0.3, 0.8])
>>> with ThreadPoolExecutor(2) as pool:
...     r = qg.curvature.hessian(c, H, theta, executor=pool, chunk=3)
>>> bool(np.allclose(r.hessian, qg.curvature.hessian(c, H, theta).hessian, atol=1e-12))
True
"""
from __future__ import annotations

import math
import os
import pickle
import sys
import time
from concurrent.futures import TimeoutError as FutureTimeout
from concurrent.futures import Executor, ThreadPoolExecutor
from dataclasses import replace
from numbers import Integral, Real

import numpy as np

from ..engine.measurement import PointSeeds
from ..engine.threads import worker_threads
from .rows import measure_rows_here

__all__ = ["ChunkError", "measure_rows", "run_chunks", "row_checksums", "workers", "check_executor", "check_timeout", "chunk_size",
           "payload", "RETRIES", "CHUNKS_PER_WORKER"]

RETRIES = 2             # dask retries of a task that raised (a dead worker is rescheduled anyway)
CHUNKS_PER_WORKER = 4   # enough to balance uneven chunks, few enough to keep the overhead small


class ChunkError(RuntimeError):
    """A chunk of points failed on an executor; the original error is ``__cause__``.

    Attributes
    ----------
    indices : tuple of int
        The chunk's points: positions in the batch of points the call evaluated (for the
        exact metric tensor: the gate-angle columns of the chunk).
    angles : ndarray (n, G)
        The gate angles of those points.

    Examples
    --------
    >>> import numpy as np
    >>> from qgradlib import ChunkError
    >>> err = ChunkError("chunk 2 failed", indices=[4, 5], angles=np.zeros((2, 3)))
    >>> err.indices, err.angles.shape
    ((4, 5), (2, 3))
    """

    def __init__(self, message, indices=(), angles=None):
        super().__init__(message)
        self.indices = tuple(int(i) for i in indices)
        self.angles = None if angles is None else np.asarray(angles, dtype=float)

    def __reduce__(self):
        return type(self), (str(self), self.indices, self.angles)


# -- executors --------------------------------------------------------------------------------
def _dask_client(executor):
    """The dask Client behind ``executor`` (a Client or its ClientExecutor), else None."""
    dist = sys.modules.get("distributed")        # a Client exists only if dask was imported
    if dist is not None and isinstance(executor, dist.Client):
        return executor
    cfx = sys.modules.get("distributed.cfexecutor")
    if cfx is not None and isinstance(executor, cfx.ClientExecutor):
        return executor._client
    return None


def check_timeout(timeout, executor):
    """Validate ``timeout=`` (seconds to wait for an executor's chunks, or None); returns it.

    Examples
    --------
    >>> from concurrent.futures import ThreadPoolExecutor
    >>> from qgradlib import distribute
    >>> with ThreadPoolExecutor(1) as pool:
    ...     distribute.check_timeout(2, pool)
    2.0
    """
    if timeout is None:
        return None
    if isinstance(timeout, bool) or not isinstance(timeout, Real) or not 0 < timeout < math.inf:
        raise ValueError(f"timeout must be a positive number of seconds or None; got {timeout!r}")
    if executor is None:
        raise ValueError("timeout= bounds the wait for the chunks sent to an executor: give executor= as well")
    return float(timeout)


def check_executor(executor, chunk):
    """Validate ``executor=`` and ``chunk=``; returns them (chunk as int or None).

    Examples
    --------
    >>> from qgradlib import distribute
    >>> distribute.check_executor(None, None)
    (None, None)
    >>> distribute.check_executor(None, 0)
    Traceback (most recent call last):
        ...
    ValueError: chunk must be a positive int ...
    """
    if executor is not None and not isinstance(executor, Executor) and _dask_client(executor) is None:
        raise TypeError("executor must be a concurrent.futures.Executor (ProcessPoolExecutor, "
                        "ThreadPoolExecutor, a dask Client's get_executor()) or a "
                        f"dask.distributed.Client; got {type(executor).__name__}")
    if chunk is None:
        return executor, None
    if isinstance(chunk, bool) or not isinstance(chunk, Integral) or chunk < 1:
        raise ValueError(f"chunk must be a positive int (points per task) or None; got {chunk!r}")
    if executor is None:
        raise ValueError("chunk= sizes the tasks sent to an executor: give executor= as well")
    return executor, int(chunk)


def workers(executor) -> int:
    """Workers (threads, for dask) that ``executor`` runs tasks on.

    Examples
    --------
    >>> from concurrent.futures import ThreadPoolExecutor
    >>> from qgradlib import distribute
    >>> with ThreadPoolExecutor(3) as pool:
    ...     distribute.workers(pool)
    3
    """
    client = _dask_client(executor)
    if client is not None:
        return max(1, sum(client.nthreads().values()))
    n = getattr(executor, "_max_workers", None)    # both stdlib pools keep their size here
    return n if isinstance(n, int) and n > 0 else (os.cpu_count() or 1)


def _submit(executor, fn, *args):
    cfx = sys.modules.get("distributed.cfexecutor")
    if cfx is not None and isinstance(executor, cfx.ClientExecutor):
        own = getattr(executor, "_kwargs", {})
        extra = {k: v for k, v in (("pure", False), ("retries", RETRIES)) if k not in own}
        return executor.submit(fn, *args, **extra)
    if _dask_client(executor) is executor:
        return executor.submit(fn, *args, pure=False, retries=RETRIES)
    return executor.submit(fn, *args)


def payload(executor, obj, what="the circuit and observables"):
    """What the tasks get: ``obj`` itself for threads (they share this process), else ``obj``
    pickled once for all chunks with the standard module, or a TypeError that says why not.

    Examples
    --------
    >>> from concurrent.futures import ThreadPoolExecutor
    >>> from qgradlib import distribute
    >>> data = {"circuit": "anything"}
    >>> with ThreadPoolExecutor(1) as pool:
    ...     distribute.payload(pool, data) is data       # threads share this process
    True
    """
    if isinstance(executor, ThreadPoolExecutor):
        return obj
    try:
        return pickle.dumps(obj, protocol=pickle.HIGHEST_PROTOCOL)
    except Exception as err:
        raise TypeError(f"executor= sends {what} to other processes with the standard pickle "
                        f"module, and they do not pickle: {err}") from err


def unpack(obj):
    """The inverse of `payload`, run inside a task."""
    return pickle.loads(obj) if isinstance(obj, bytes) else obj


def chunk_size(executor, count, chunk=None) -> int:
    """``chunk`` if given, else about `CHUNKS_PER_WORKER` chunks per worker (at least 1 each).

    Examples
    --------
    >>> from concurrent.futures import ThreadPoolExecutor
    >>> from qgradlib import distribute
    >>> with ThreadPoolExecutor(2) as pool:
    ...     distribute.chunk_size(pool, 80), distribute.chunk_size(pool, 80, chunk=25)
    (10, 25)
    """
    return chunk or max(1, math.ceil(count / (CHUNKS_PER_WORKER * workers(executor))))


# -- chunks -----------------------------------------------------------------------------------
def _describe(indices, angles, limit=3):
    idx = list(indices)
    span = f"{idx[0]}..{idx[-1]}" if len(idx) > 1 and idx == list(range(idx[0], idx[-1] + 1)) \
        else ", ".join(map(str, idx[:8])) + (", ..." if len(idx) > 8 else "")
    rows = np.array2string(np.asarray(angles)[:limit], precision=6, separator=", ",
                           max_line_width=10 ** 6).replace("\n", "")
    more = f" (first {limit} of {len(idx)})" if len(idx) > limit else ""
    return f"point(s) {span} at gate angles{more} {rows}"


def _wrap(err, k, n, indices, angles, executor):
    cause = f"{type(err).__name__}: {err}"
    verb = "failed"
    proc = sys.modules.get("concurrent.futures.process")   # loaded by whoever made a pool
    if proc is not None and isinstance(err, proc.BrokenProcessPool):
        # every unfinished future of a broken pool fails alike: the pool cannot say whose process died
        verb = "did not finish (the first unfinished chunk)"
        cause += (" -- a worker process died; a concurrent.futures process pool cannot retry and "
                  "is unusable from now on: create a new pool, or run on a dask.distributed "
                  "Client, which reschedules the work of dead workers")
    elif type(err).__name__ == "KilledWorker":
        cause += (" -- dask gave up after workers died running this task "
                  "(distributed.scheduler.allowed-failures)")
    return ChunkError(f"chunk {k + 1} of {n} on {type(executor).__name__} {verb}: "
                      f"{_describe(indices, angles)}: {cause}", indices, angles)


def in_worker(task, *args):
    """Run ``task(*args)`` on a worker with one BLAS thread: the workers share the machine's
    cores, and BLAS threads on busy cores only slow each call down
    (`qgradlib.engine.threads.worker_threads`; ``QGRADLIB_BLAS_THREADS`` asks otherwise).
    Dask's worker processes start with one BLAS thread already (its nanny sets
    ``OPENBLAS_NUM_THREADS=1``)."""
    with worker_threads():
        return task(*args)


def row_checksums(phi) -> np.ndarray:
    """One 64-bit checksum per row of ``phi`` (R, G) from the exact bits of its angles: equal
    rows give equal sums, a row moved to another place or another chunk gives another.

    Examples
    --------
    >>> import numpy as np
    >>> from qgradlib import distribute
    >>> s = distribute.row_checksums(np.array([[0.1, 0.2], [0.2, 0.1], [0.1, 0.2]]))
    >>> bool(s[0] == s[2]), bool(s[0] != s[1])
    (True, True)
    """
    bits = np.ascontiguousarray(phi, dtype=float).view(np.uint64).reshape(np.shape(phi))
    mix = (np.arange(1, bits.shape[1] + 1, dtype=np.uint64) * np.uint64(0x9E3779B97F4A7C15)) | np.uint64(1)
    with np.errstate(over="ignore"):
        return np.bitwise_xor.reduce(bits * mix, axis=1, initial=np.uint64(0)) if bits.size else \
            np.zeros(bits.shape[0], dtype=np.uint64)


def _timed_out(futures, jobs, timeout, executor):
    """ChunkError naming every point whose chunk did not finish within ``timeout``."""
    late = [k for k, f in enumerate(futures) if not f.done()] or list(range(len(jobs)))
    for k in late:
        futures[k].cancel()
    indices = np.concatenate([np.asarray(jobs[k][1]).reshape(-1) for k in late]).astype(int)
    angles = np.concatenate([np.atleast_2d(jobs[k][2]) for k in late])
    return ChunkError(f"{len(late)} of {len(jobs)} chunk(s) on {type(executor).__name__} did not "
                      f"finish within timeout={timeout:g} s: {_describe(indices, angles)} (a hung "
                      "or overloaded worker; the other chunks' results are dropped)", indices, angles)


def run_chunks(executor, task, payload, jobs, check=None, timeout=None):
    """``task(payload, *args)`` for every job ``(args, indices, angles)``; results in job order.

    ``check(k, result)`` (optional) raises ValueError for a result that does not belong to
    job ``k``. A failure raises `ChunkError` for the first failing chunk in order and cancels
    the rest; with ``timeout`` (seconds for all chunks), chunks still running then are
    cancelled and a `ChunkError` names their points.

    Examples
    --------
    >>> from concurrent.futures import ThreadPoolExecutor
    >>> from qgradlib import distribute
    >>> jobs = [((k,), [k], None) for k in range(3)]
    >>> with ThreadPoolExecutor(2) as pool:
    ...     distribute.run_chunks(pool, lambda base, k: base + k, 10, jobs)
    [10, 11, 12]
    """
    # tasks in this process (threads) take the BLAS setting of this thread: OpenBLAS ignores
    # a change asked for in a thread that did not start it
    with worker_threads():
        return _run_chunks(executor, task, payload, jobs, check, timeout)


def _run_chunks(executor, task, payload, jobs, check, timeout):
    futures, out = [], []
    deadline = None if timeout is None else time.monotonic() + timeout
    try:
        for args, _, _ in jobs:
            futures.append(_submit(executor, in_worker, task, payload, *args))
        for k, fut in enumerate(futures):
            if deadline is None:
                result = fut.result()
            else:
                try:
                    result = fut.result(timeout=max(0.0, deadline - time.monotonic()))
                except (FutureTimeout, TimeoutError):
                    raise _timed_out(futures, jobs, timeout, executor) from None
            if check is not None:
                check(k, result)
            out.append(result)
        return out
    except ChunkError:
        raise
    except Exception as err:
        # the chunk that failed: the one being submitted, or the first whose result raised
        k = len(out) if len(futures) == len(jobs) else len(futures)
        for i, f in enumerate(futures):
            if i != k:
                f.cancel()
        _, indices, angles = jobs[k]
        raise _wrap(err, k, len(jobs), indices, angles, executor) from err


def measure_chunk(spec, phi, inserts, start, base, errors):
    """The task: `measure_rows_here` on one chunk (``spec`` may come pickled); returns
    ``(start, row checksums, values)`` so the caller can tell the chunk's rows."""
    spec = unpack(spec)
    if base is not None:
        spec = replace(spec, rng=PointSeeds(base, start))
    return start, row_checksums(phi), measure_rows_here(phi, spec, inserts, errors=errors)


def _check_measured(jobs, n_out, errors):
    def check(k, result):
        (phi, _, start, _, _), _, _ = jobs[k]
        shape = (phi.shape[0], n_out)
        if not (isinstance(result, tuple) and len(result) == 3):
            raise ValueError(f"the task returned {type(result).__name__}, not (start, checksums, values)")
        got_start, sums, vals = result
        parts = vals if errors else (vals,)
        if got_start != start or not np.array_equal(np.asarray(sums), row_checksums(phi)):
            raise ValueError(f"the rows that came back are not the chunk's rows (first point {start} "
                             f"sent, {got_start} returned, or rows in another order)")
        for v in parts:
            if np.shape(v) != shape:
                raise ValueError(f"values of shape {np.shape(v)} came back for {shape[0]} point(s) "
                                 f"of {shape[1]} value(s) each: expected {shape}")
    return check


def measure_rows(phi, spec, inserts=None, *, errors=False, index=None):
    """Values (R, K), with ``errors`` also variances, at the rows of ``phi`` (R, G).

    Runs here when ``spec.executor`` is None, else in chunks on it. ``index`` gives the rows'
    positions in the caller's batch, for error messages.

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> from qgradlib.evaluation.expectation import _spec
    >>> c = qg.Circuit(1).ry(0)
    >>> spec = _spec(c, "expect", observables=[qg.Observable({"Z": 1.0})])
    >>> np.round(qg.distribute.measure_rows(np.array([[0.0], [np.pi]]), spec), 12).tolist()
    [[1.0], [-1.0]]
    """
    phi = np.asarray(phi, dtype=float)
    R = phi.shape[0]
    if spec.executor is None and spec.shots is None:
        # here and exact: no stream to hand out, no chunk to check
        return measure_rows_here(phi, spec, inserts, errors=errors)
    base = None if spec.shots is None else int(spec.rng.integers(2 ** 63))
    task_spec = replace(spec, executor=None, chunk=None, rng=None, timeout=None)
    if spec.executor is None or R == 0:
        return measure_chunk(task_spec, phi, inserts, 0, base, errors)[2]
    size = chunk_size(spec.executor, R, spec.chunk)
    index = np.arange(R) if index is None else np.asarray(index)
    jobs = [((phi[lo:lo + size], None if inserts is None else list(inserts[lo:lo + size]), lo,
              base, errors), index[lo:lo + size], phi[lo:lo + size]) for lo in range(0, R, size)]
    parts = run_chunks(spec.executor, measure_chunk, payload(spec.executor, task_spec), jobs,
                       check=_check_measured(jobs, spec.n_out, errors), timeout=spec.timeout)
    parts = [p[2] for p in parts]
    if errors:
        return np.concatenate([p[0] for p in parts]), np.concatenate([p[1] for p in parts])
    return np.concatenate(parts)
