"""Short text for results: a number as itself, an array by its shape and range.

Result types print in one or two lines in a notebook (a Hessian of 30 parameters is not 900
numbers on the screen); the arrays stay one attribute away.

Examples
--------
>>> import numpy as np
>>> brief(np.arange(900.0).reshape(30, 30))
'array (30, 30) in [0, 899]'
>>> brief(np.array([0.5, -1.25]))
'[0.5, -1.25]'
>>> describe("Estimate", value=-1.2345678, standard_error=0.01, shots=1000)
'Estimate(value=-1.23457, standard_error=0.01, shots=1000)'
"""
from __future__ import annotations

import numpy as np

__all__ = ["brief", "describe", "SMALL"]

# arrays of at most this many entries are shown in full
SMALL = 6


def _number(v, digits):
    if isinstance(v, (bool, np.bool_)):
        return repr(bool(v))
    if isinstance(v, (int, np.integer)):
        return str(int(v))
    if isinstance(v, (complex, np.complexfloating)):
        return f"{complex(v):.{digits}g}"
    return f"{float(v):.{digits}g}"


def brief(x, digits: int = 6) -> str:
    """One short line for ``x``: numbers in ``digits`` significant digits, arrays of up to
    `SMALL` entries in full, larger ones as their shape and the range of their entries."""
    if x is None or isinstance(x, str):
        return repr(x)
    if isinstance(x, (bool, np.bool_, int, np.integer, float, np.floating, complex,
                      np.complexfloating)):
        return _number(x, digits)
    try:
        a = np.asarray(x)
    except Exception:
        a = None
    if a is None or a.dtype == object:
        text = repr(x)
        return text if len(text) <= 60 else f"<{type(x).__name__}>"
    if a.ndim == 0:
        return _number(a.item(), digits)
    if a.size <= SMALL:
        return "[" + ", ".join(_number(v, 4) for v in a.ravel()) + "]" if a.ndim == 1 else \
            f"array {a.shape}: " + "[" + ", ".join(_number(v, 4) for v in a.ravel()) + "]"
    if a.size == 0:
        return f"array {a.shape}"
    if np.iscomplexobj(a):
        return f"complex array {a.shape}, largest |entry| {np.abs(a).max():.4g}"
    return f"array {a.shape} in [{np.min(a):.4g}, {np.max(a):.4g}]"


def describe(name: str, **fields) -> str:
    """``name(field=brief(value), ...)``: the repr of a result type."""
    return f"{name}(" + ", ".join(f"{k}={brief(v)}" for k, v in fields.items()) + ")"
