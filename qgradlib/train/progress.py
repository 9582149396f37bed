"""Progress bars for long runs: on where someone watches, off in logs and CI.

``progress=None`` (the default everywhere) decides by where the output goes:

- off when the environment variable ``CI`` is set (to anything but ``""``, ``"0"``,
  ``"false"`` or ``"no"``), as continuous-integration services set it: a bar in a CI log is
  a wall of carriage returns;
- on in a Jupyter notebook (an IPython kernel), where tqdm's notebook front end draws a
  widget (``tqdm.auto``; without ipywidgets it falls back to the text bar);
- on when standard error is an interactive terminal;
- off otherwise: scripts writing to files or pipes, and test runs, stay clean.

``progress=True`` forces the bar and ``progress=False`` silences it.

Examples
--------
>>> from qgradlib.train.progress import progress_bar
>>> with progress_bar(False, total=3, desc="demo") as bar:
...     bar.update(1)
...     bar.set_postfix(cost=0.5)
"""
from __future__ import annotations

import os
import sys

import numpy as np

__all__ = ["progress_bar", "wants_progress", "in_ci", "in_notebook"]


def in_ci() -> bool:
    """True when the environment says a continuous-integration service runs us (``CI``)."""
    return os.environ.get("CI", "").strip().lower() not in ("", "0", "false", "no")


def in_notebook() -> bool:
    """True inside a Jupyter kernel (an IPython shell that talks to a notebook front end)."""
    if "ipykernel" not in sys.modules or "IPython" not in sys.modules:
        return False
    try:
        shell = sys.modules["IPython"].get_ipython()
    except Exception:  # an IPython without a running shell
        return False
    return shell is not None and type(shell).__name__ == "ZMQInteractiveShell"


def _terminal() -> bool:
    stream = sys.stderr
    try:
        return bool(stream is not None and stream.isatty())
    except (AttributeError, ValueError):  # a closed or replaced stream
        return False


def wants_progress(progress) -> bool:
    """Resolve ``progress`` (None, True or False) to a decision."""
    if progress is None:
        return not in_ci() and (in_notebook() or _terminal())
    if isinstance(progress, (bool, np.bool_)):
        return bool(progress)
    raise TypeError("progress must be None (auto: on in a notebook or an interactive terminal, "
                    f"off in CI and logs), True or False; got {progress!r}")


class _Silent:
    """Stands in for a tqdm bar when progress is off."""

    def update(self, n=1):
        pass

    def set_postfix(self, *args, **kwargs):
        pass

    def close(self):
        pass

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        return False


def progress_bar(progress, total: int, desc: str):
    """A tqdm bar (a notebook widget in a notebook, text on standard error elsewhere), or a
    silent stand-in with the same methods."""
    if not wants_progress(progress):
        return _Silent()
    if in_notebook():
        from tqdm.auto import tqdm

        return tqdm(total=total, desc=desc, leave=True)
    from tqdm import tqdm

    return tqdm(total=total, desc=desc, file=sys.stderr, dynamic_ncols=True, leave=True)
