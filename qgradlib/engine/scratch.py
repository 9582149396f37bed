"""Scratch states kept from one engine call to the next, for small registers.

A training loop calls the engine thousands of times with the same shapes. A buffer of a few
MiB taken fresh on each call comes back from the operating system as untouched pages (glibc
hands the top of its heap back once more than its trim threshold is free there), and the
first write to each 4 KiB page is a fault: about a thousand of them, some 3 ms, on every
16-qubit adjoint gradient (a development reading: 19 ms a call fell to 16 ms with its two
stacked buffers kept). Buffers that never leave the engine are therefore borrowed here with
`take` and handed back with `give`; a later call of the same shape gets them back warm.

Only arrays of at most `ARRAY_BYTES` are kept, and at most `POOL_BYTES` in all (the oldest
go first), so a large register never holds memory between calls: the memory guard's
estimates stay what they say. `clear` empties the pool. The pool is shared by the threads
of a process; an array is out of it while borrowed, so two callers never share one. A
forked child starts with an empty pool.

Examples
--------
>>> import numpy as np
>>> a = take((2, 8), np.complex128)
>>> give(a)
>>> take((2, 8), np.complex128) is a
True
"""
from __future__ import annotations

import os
import threading
from collections import OrderedDict

import numpy as np

__all__ = ["take", "give", "clear", "ARRAY_BYTES", "POOL_BYTES"]

# largest array kept (two rows of 18 qubits in double precision)
ARRAY_BYTES = 2 ** 23
# most bytes kept in all
POOL_BYTES = 2 ** 25

_free: "OrderedDict" = OrderedDict()     # (shape, dtype) -> [arrays], oldest key first
_held = [0]                              # bytes in the pool
_lock = threading.Lock()


def _after_fork():
    # a forked worker (a process pool) starts with an empty pool and a lock of its own: the
    # parent's lock may have been held by another thread at the fork
    global _lock
    _lock = threading.Lock()
    _free.clear()
    _held[0] = 0


if hasattr(os, "register_at_fork"):
    os.register_at_fork(after_in_child=_after_fork)


def take(shape, dtype=np.complex128) -> np.ndarray:
    """A C-contiguous array of ``shape`` and ``dtype`` with undefined contents: one handed
    back earlier when there is one, else a new one."""
    key = (tuple(shape), np.dtype(dtype).str)
    with _lock:
        stack = _free.get(key)
        if stack:
            a = stack.pop()
            _held[0] -= a.nbytes
            if not stack:
                del _free[key]
            return a
    return np.empty(key[0], dtype=dtype)


def give(*arrays) -> None:
    """Hand arrays back for later calls. The caller must hold no other reference to them
    (nor to a view of them): the next `take` of the same shape may write into them. Arrays
    that do not own their memory, are not C-contiguous or are too large are let go."""
    for a in arrays:
        if (not isinstance(a, np.ndarray) or a.base is not None or not a.flags.c_contiguous
                or not a.flags.writeable or a.nbytes > ARRAY_BYTES):
            continue
        key = (a.shape, a.dtype.str)
        with _lock:
            _free.setdefault(key, []).append(a)
            _free.move_to_end(key)
            _held[0] += a.nbytes
            while _held[0] > POOL_BYTES:
                old_key, stack = next(iter(_free.items()))
                _held[0] -= stack.pop(0).nbytes
                if not stack:
                    del _free[old_key]


def clear() -> int:
    """Empty the pool; returns the bytes it held."""
    with _lock:
        freed = _held[0]
        _free.clear()
        _held[0] = 0
    return freed
