"""Progress bars for long runs: on in an interactive terminal, off otherwise.

``progress=None`` (the default everywhere) shows a tqdm bar only when standard error is a
terminal, so scripts, logs, notebooks' captured output and test runs stay clean;
``progress=True`` forces the bar and ``progress=False`` silences it.

Examples
--------
>>> from qgradlib.train.progress import progress_bar
>>> with progress_bar(False, total=3, desc="demo") as bar:
...     bar.update(1)
...     bar.set_postfix(cost=0.5)
"""
from __future__ import annotations

import sys

import numpy as np

__all__ = ["progress_bar", "wants_progress"]


def wants_progress(progress) -> bool:
    """Resolve ``progress`` (None, True or False) to a decision."""
    if progress is None:
        stream = sys.stderr
        try:
            return bool(stream is not None and stream.isatty())
        except (AttributeError, ValueError):  # a closed or replaced stream
            return False
    if isinstance(progress, (bool, np.bool_)):
        return bool(progress)
    raise TypeError(f"progress must be None (auto: on in an interactive terminal), True or False; "
                    f"got {progress!r}")


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
    """A tqdm bar on standard error, or a silent stand-in with the same methods."""
    if not wants_progress(progress):
        return _Silent()
    from tqdm import tqdm

    return tqdm(total=total, desc=desc, file=sys.stderr, dynamic_ncols=True, leave=True)
