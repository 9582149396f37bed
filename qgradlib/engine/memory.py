"""A guard that refuses allocations the machine cannot hold, before they are made."""
from __future__ import annotations

import os

__all__ = ["available_bytes", "guard", "StateTooLarge"]


class StateTooLarge(ValueError):
    """Raised when a state (or batch of states) would not fit in memory."""


def available_bytes() -> int:
    """Memory available to this process now (MemAvailable, else physical pages)."""
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
    """Raise `StateTooLarge` if ``nbytes`` exceed what is available."""
    avail = available_bytes()
    if nbytes > avail:
        raise StateTooLarge(f"{what} needs {nbytes:,} bytes ({nbytes / 2**30:.2f} GiB) but only "
                            f"{avail:,} bytes ({avail / 2**30:.2f} GiB) are available")
