"""A guard that refuses allocations the machine cannot hold, before they are made."""
from __future__ import annotations

import os

__all__ = ["available_bytes", "guard", "StateTooLarge"]


class StateTooLarge(ValueError):
    """Raised when a state (or batch of states) would not fit in memory.

    Examples
    --------
    >>> from qgradlib.engine import StateTooLarge, guard
    >>> try:
    ...     guard(1 << 70, "a 66-qubit state")
    ... except StateTooLarge as err:
    ...     print(str(err).split(" needs ")[0])
    a 66-qubit state
    """


def available_bytes() -> int:
    """Memory available to this process now (MemAvailable, else physical pages).

    Examples
    --------
    >>> from qgradlib.engine import available_bytes
    >>> available_bytes() > 16 * 2 ** 10      # at least a 10-qubit state fits
    True
    """
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    try:
        return os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):
        return 1 << 62


def guard(nbytes: int, what: str) -> None:
    """Raise `StateTooLarge` if ``nbytes`` exceed what is available.

    Examples
    --------
    >>> from qgradlib.engine import guard
    >>> guard(16 * 2 ** 10, "a 10-qubit state") is None    # fits: returns quietly
    True
    """
    avail = available_bytes()
    if nbytes > avail:
        raise StateTooLarge(f"{what} needs {nbytes:,} bytes ({nbytes / 2**30:.2f} GiB) but only "
                            f"{avail:,} bytes ({avail / 2**30:.2f} GiB) are available")
