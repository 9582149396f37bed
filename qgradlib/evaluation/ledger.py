"""The ledger: what a device would have had to run for the work done inside it.

Every evaluation of the engine reports the distinct circuits it ran, the measurement settings
each needs and the shots per setting; each active `Ledger` adds them up. The active ledgers
live in a context variable, so a ledger counts the work of the threads that entered it (and of
code that copies their context), nested ledgers all count, and counting is locked. One ledger
may be entered from several threads at once (each counts its own work into it) and nested in
itself (it counts once). A ledger pickles and deep-copies with its counts (the copy is not
active anywhere).

Examples
--------
>>> import numpy as np
>>> import qgradlib as qg
>>> from autograd import grad
>>> c = qg.Circuit(1).ry(0)
>>> Z = qg.Observable({"Z": 1.0})
>>> with qg.Ledger() as book:
...     _ = grad(lambda t: qg.expect(c, Z, t))(np.array([0.3]))
>>> book.executions        # value + two shifted circuits
3
"""
from __future__ import annotations

import contextvars
import copy
import threading
from collections import Counter

from ..circuits import display

__all__ = ["Ledger", "record"]

_ACTIVE: contextvars.ContextVar = contextvars.ContextVar("qgradlib_active_ledgers", default=())


class Ledger:
    """Counts circuit executions and shots; use as a context manager.

    Attributes
    ----------
    circuits : int
        Distinct circuits run (each at its own angles).
    executions : int
        Circuits times measurement settings: the jobs a device would run.
    shots : int
        Total shots (0 for exact simulation, where no shots are taken).
    by_purpose : Counter
        Executions broken down by why they ran: ``"value"``, or the name of the gate whose
        angle was shifted (for example ``"RY"``, ``"CRX"``).

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> c = qg.Circuit(1).ry(0)
    >>> with qg.Ledger() as book:
    ...     _ = qg.expect(c, qg.Observable({"Z": 1.0, "X": 1.0}), np.array([0.1]), shots=100, seed=0)
    >>> book.executions, book.shots          # one circuit in two measurement settings
    (2, 200)
    """

    def __init__(self):
        self._lock = threading.Lock()
        self.circuits = 0
        self.executions = 0
        self.shots = 0
        self.calls = 0
        self.by_purpose = Counter()

    # No reset tokens: a token belongs to the context that made it, so one ledger entered from
    # several threads cannot hold them. Each entry appends to this context's tuple and each
    # exit removes this ledger's last entry from it.
    def __enter__(self):
        _ACTIVE.set(_ACTIVE.get() + (self,))
        return self

    def __exit__(self, *exc):
        active = _ACTIVE.get()
        for k in range(len(active) - 1, -1, -1):
            if active[k] is self:
                _ACTIVE.set(active[:k] + active[k + 1:])
                break
        return False

    # -- copies: the lock is a property of the live object, not of its counts --------------
    def __getstate__(self):
        with self._lock:
            state = dict(self.__dict__)
        del state["_lock"]
        state["by_purpose"] = Counter(state["by_purpose"])
        return state

    def __setstate__(self, state):
        self.__dict__.update(state)
        self._lock = threading.Lock()

    def __deepcopy__(self, memo):
        new = type(self).__new__(type(self))
        new.__setstate__(copy.deepcopy(self.__getstate__(), memo))
        return new

    def _add(self, circuits, settings, shots_per_setting, purposes):
        with self._lock:
            self.calls += 1
            self.circuits += circuits
            self.executions += circuits * settings
            self.shots += circuits * settings * shots_per_setting
            for label, count in purposes.items():
                self.by_purpose[label] += count * settings

    def summary(self) -> str:
        """A short readable account."""
        lines = [f"device work: {self.executions} executions "
                 f"({self.circuits} distinct circuits), {self.shots} shots"]
        for label, count in sorted(self.by_purpose.items(), key=lambda kv: (-kv[1], kv[0])):
            lines.append(f"  {label:<12} {count:>8} executions")
        if not self.shots:
            lines.append("  (exact simulation: no shots were taken; a device would need them)")
        return "\n".join(lines)

    def _repr_html_(self):
        """The summary as tables, for notebooks."""
        totals = display.table(None, [["executions", self.executions],
                                      ["distinct circuits", self.circuits], ["shots", self.shots]])
        purposes = sorted(self.by_purpose.items(), key=lambda kv: (-kv[1], kv[0]))
        parts = [totals]
        if purposes:
            parts.append(display.table(["purpose", "executions"], purposes))
        note = None if self.shots else \
            "exact simulation: no shots were taken; a device would need them"
        return display.display("Ledger: device work", *parts, note=note)

    def __repr__(self):
        return f"Ledger(executions={self.executions}, circuits={self.circuits}, shots={self.shots})"


def record(circuits: int, settings: int = 1, shots_per_setting: int = 0, purposes=None) -> None:
    """Report work to every active ledger (called by the engine's callers).

    ``shots_per_setting`` is the mean over the settings: with a weighted shot allocation
    the settings differ, but a circuit always takes ``settings * shots_per_setting``.
    """
    active = _ACTIVE.get()
    if not active:
        return
    purposes = Counter(purposes or {"value": circuits})
    # a ledger nested in itself counts once
    for book in dict.fromkeys(active):
        book._add(circuits, settings, shots_per_setting, purposes)
