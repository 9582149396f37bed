"""A guard that refuses work the machine cannot hold, before any large allocation is made.

The guard compares the *peak* of the planned work with the tightest of three limits:

- ``MemAvailable`` of ``/proc/meminfo`` (physical memory the kernel can hand out now);
- the soft address-space limit ``RLIMIT_AS`` minus the address space already in use
  (``VmSize`` of ``/proc/self/status``): past it an allocation fails with MemoryError;
- the cgroup memory limit minus its usage (cgroup v2 ``memory.max`` - ``memory.current``,
  v1 ``memory.limit_in_bytes`` - ``memory.usage_in_bytes``, for the process's group and every
  group above it; the inactive file cache of ``memory.stat`` is reclaimable, so it counts
  as free): past it the kernel's out-of-memory killer ends the process.

The peak is a number of states alive at once times the bytes of one state. Each engine path
says how many states it keeps, in a function beside the code it describes
(`qgradlib.engine.statevector.run_states`, `qgradlib.engine.branch.branched_states`,
`qgradlib.engine.adjoint.adjoint_states`, `qgradlib.engine.density.density_states`,
`qgradlib.engine.measure.expectation_scratch`, `qgradlib.engine.measurement.measure_scratch`,
`qgradlib.engine.tangents.derivative_states`), so a change of the engine changes its estimate
in the same place; ``tests/test_memory.py`` measures every one of them with tracemalloc.
Bytes per amplitude are 16 for complex128 (pass 8 for complex64). Besides each call's own
work, `qgradlib.engine.scratch` keeps spare buffers of small registers between calls (at
most ``POOL_BYTES``, 32 MiB, in all; none larger than 8 MiB), so a large register never
holds memory after its call; `qgradlib.engine.measure` memoises the diagonal of an
observable's Z words on up to 16 qubits (512 KiB each, eight at most).
"""
from __future__ import annotations

import math
import os
import time

__all__ = ["StateTooLarge", "AMPLITUDE_BYTES", "OVERHEAD", "limits", "available_bytes", "recent_available",
           "state_bytes", "guard", "guard_states"]

AMPLITUDE_BYTES = 16       # complex128
OVERHEAD = 1 << 19         # angles, matrices, compiled plans and small temporaries of a call
_UNLIMITED = 1 << 62       # what the kernel reports as "no limit" is at least this large
# Reading the limits costs a few system calls (about 0.3 ms here), too much for every small
# run: a reading less than _FRESH seconds old is reused for requests below 1/_MARGIN of it.
_FRESH = 1.0
_MARGIN = 64
_recent = [0.0, -1, None]  # [monotonic time, available bytes, pid] of the last reading
_reading = {}              # the limits of that reading (`guard` names the tightest from it)


class StateTooLarge(ValueError):
    """Raised when the planned work (states, batches, density matrices) would not fit.

    Examples
    --------
    >>> from qgradlib.engine import StateTooLarge, guard
    >>> try:
    ...     guard(1 << 70, "a 66-qubit state")
    ... except StateTooLarge as err:
    ...     print(str(err).split(" needs ")[0])
    a 66-qubit state
    """


def _read(path):
    try:
        with open(path) as fh:
            return fh.read()
    except OSError:
        return None


def _field(text, name):
    """The number after ``name`` in a ``key value [kB]`` listing, in bytes (None if absent)."""
    for line in (text or "").splitlines():
        parts = line.replace(":", " ").split()
        if parts and parts[0] == name and len(parts) > 1 and parts[1].isdigit():
            return int(parts[1]) * (1024 if parts[-1] == "kB" else 1)
    return None


def _memavailable(meminfo="/proc/meminfo"):
    avail = _field(_read(meminfo), "MemAvailable")
    if avail is not None:
        return avail
    try:
        return os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):
        return None


def _address_space_left(status="/proc/self/status"):
    try:
        import resource
    except ImportError:        # not a POSIX system
        return None
    soft, _ = resource.getrlimit(resource.RLIMIT_AS)
    if soft == resource.RLIM_INFINITY or soft >= _UNLIMITED:
        return None
    used = _field(_read(status), "VmSize") or 0
    return max(0, soft - used)


def _number(text):
    text = (text or "").strip()
    return int(text) if text.isdigit() else None


def _cgroup_groups(root="/sys/fs/cgroup", proc="/proc/self/cgroup"):
    """The process's cgroup directories that set a memory limit: [(dir, files), ...]."""
    found = []
    for line in (_read(proc) or "").splitlines():
        parts = line.split(":", 2)
        if len(parts) != 3:
            continue
        ident, controllers, path = parts
        if ident == "0" and controllers == "":
            base, files = root, ("memory.max", "memory.current", "inactive_file")
        elif "memory" in controllers.split(","):
            base, files = os.path.join(root, "memory"), (
                "memory.limit_in_bytes", "memory.usage_in_bytes", "total_inactive_file")
        else:
            continue
        rel = path.strip("/")
        while True:
            d = os.path.join(base, rel) if rel else base
            limit = _number(_read(os.path.join(d, files[0])))
            if limit is not None and limit < _UNLIMITED:
                found.append((d, files))
            if not rel:
                break
            rel = os.path.dirname(rel)
    return found


_GROUPS = {}   # pid -> the limited cgroup directories (the hierarchy is read once a process)


def _cgroup_left(root="/sys/fs/cgroup", proc="/proc/self/cgroup"):
    """Tightest ``limit - (usage - inactive file cache)`` over the process's cgroups."""
    key = (os.getpid(), root, proc)
    if key not in _GROUPS:
        _GROUPS[key] = _cgroup_groups(root, proc)
    best = None
    for d, (limit_file, usage_file, cache_field) in _GROUPS[key]:
        limit = _number(_read(os.path.join(d, limit_file)))
        usage = _number(_read(os.path.join(d, usage_file)))
        if limit is None or usage is None or limit >= _UNLIMITED:
            continue
        cache = _field(_read(os.path.join(d, "memory.stat")), cache_field) or 0
        left = max(0, limit - max(0, usage - cache))
        best = left if best is None else min(best, left)
    return best


def limits() -> dict:
    """The limits that apply now, in bytes: {"MemAvailable": .., "RLIMIT_AS": .., "cgroup": ..}.

    Examples
    --------
    >>> all(v >= 0 for v in limits().values())
    True
    """
    found = {"MemAvailable": _memavailable(), "RLIMIT_AS": _address_space_left(),
             "cgroup": _cgroup_left()}
    return {k: int(v) for k, v in found.items() if v is not None}


def available_bytes() -> int:
    """Bytes this process may still allocate: the tightest of `limits` (read now).

    Examples
    --------
    >>> from qgradlib.engine import available_bytes
    >>> available_bytes() > 16 * 2 ** 10      # at least a 10-qubit state fits
    True
    """
    found = limits()
    avail = min(found.values(), default=_UNLIMITED)
    _reading.clear()
    _reading.update(found)
    _recent[:] = [time.monotonic(), avail, os.getpid()]
    return avail


def recent_available(nbytes: int = 0) -> int:
    """`available_bytes`, or its reading of less than a second ago when ``nbytes`` is below
    1/64 of that reading (the rule `guard` follows): small requests do not read the limits
    again.

    Examples
    --------
    >>> from qgradlib.engine.memory import recent_available
    >>> recent_available(16 * 2 ** 10) > 16 * 2 ** 10
    True
    """
    t, avail, pid = _recent
    if pid == os.getpid() and time.monotonic() - t < _FRESH and nbytes * _MARGIN <= avail:
        return avail
    return available_bytes()


def state_bytes(n_qubits: int, states: float = 1.0, amplitude_bytes: int = AMPLITUDE_BYTES, *,
                density: bool = False) -> int:
    """Bytes of ``states`` states of ``n_qubits`` qubits (density matrices with ``density``),
    plus the fixed `OVERHEAD` of one call.

    Examples
    --------
    >>> state_bytes(10, 2) == 2 * 16 * 1024 + OVERHEAD
    True
    """
    size = 4.0 ** n_qubits if density else 2.0 ** n_qubits
    return int(math.ceil(states * amplitude_bytes * size)) + OVERHEAD


def _gib(b):
    return f"{b / 2 ** 30:.2f} GiB"


def guard(nbytes: int, what: str) -> None:
    """Raise `StateTooLarge` if ``nbytes`` exceed `available_bytes` (naming both).

    A request below 1/64 of a reading less than a second old passes on that reading; any
    other is checked against the limits read now.

    Examples
    --------
    >>> from qgradlib.engine import guard
    >>> guard(16 * 2 ** 10, "a 10-qubit state") is None    # fits: returns quietly
    True
    """
    avail = recent_available(nbytes)
    if nbytes > avail:
        # named from the reading that refused (read again, the address space left has
        # moved with any allocation since, and matches nothing)
        which = [k for k, v in _reading.items() if v == avail]
        by = f" (the {which[0]} limit)" if which else ""
        raise StateTooLarge(f"{what} needs {nbytes:,} bytes ({_gib(nbytes)}) but only "
                            f"{avail:,} bytes ({_gib(avail)}) are available{by}")


def guard_states(n_qubits: int, states: float, what: str,
                 amplitude_bytes: int = AMPLITUDE_BYTES, *, density: bool = False) -> int:
    """`guard` for ``states`` states (density matrices with ``density``) of ``n_qubits``
    qubits alive at once; returns the bytes."""
    nbytes = state_bytes(n_qubits, states, amplitude_bytes, density=density)
    kind = "density matrices" if density else "states"
    count = f"{int(states):,}" if float(states).is_integer() else f"{states:.3g}"
    guard(nbytes, f"{what} ({count} {kind} of {n_qubits} qubits at once)")
    return nbytes
