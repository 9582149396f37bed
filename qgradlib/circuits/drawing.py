"""A circuit drawn as plain text: one line per qubit, operations in layers.

The layout is our own and deliberately plain (ASCII lines, no boxes, no labels beyond the
qubit number), so that it reads the same in a terminal, a log file or a docstring:

- each qubit is one line of ``-``, starting with its number;
- operations stand in layers (columns): an operation goes to the first layer after the last
  one that touches any row it spans, so the text reads left to right in circuit order;
- a parametric gate shows its angle map in brackets: ``RY(θ3)``, ``RZ(2·θ0+0.25)``, a data
  input ``RY(x2)`` (feature 2 of a data point), or a fixed angle to four significant digits
  ``RX(0.25)``; with ``theta`` the parameters are bound (data inputs stay symbols);
- a gate on several qubits writes its label on each of its rows with ``:k``, the position of
  that qubit in the gate (``CNOT:1`` is the control, ``CNOT:2`` the target), and a ``|``
  connector runs down the column through the gap lines between qubit lines and across the
  lines of qubits in between;
- a noise channel is marked with tildes: ``~depolarizing~``;
- wide circuits wrap at ``width`` columns into blocks, each headed ``layers a-b`` (the
  layers it shows, counted from 1).

Examples
--------
>>> import qgradlib as qg
>>> print(qg.Circuit(2).h(0).cnot(0, 1).ry(1))
0 -H-CNOT:1--------
     |
1 ---CNOT:2-RY(θ0)-
"""
from __future__ import annotations

import numpy as np

__all__ = ["draw", "layers", "angle_text", "number"]


def number(v) -> str:
    """A real number to four significant digits (``-0`` shown as ``0``)."""
    v = float(v)
    text = f"{v:.4g}"
    return "0" if text in ("-0", "0") else text


def angle_text(op, theta=None) -> str:
    """The angle of a parametric operation as text: its map, or its value at ``theta``."""
    feature = getattr(op, "input", None)
    if op.param is None and feature is None:
        return number(op.angle)
    if theta is not None and feature is None:
        return number(op.scale * float(theta[op.param]) + op.offset)
    sym = f"θ{op.param}" if feature is None else f"x{feature}"
    if op.scale == 1.0:
        text = sym
    elif op.scale == -1.0:
        text = "-" + sym
    else:
        text = f"{number(op.scale)}·{sym}"
    if op.offset != 0.0:
        off = number(op.offset)
        text += off if off.startswith("-") else "+" + off
    return text


def _label(op, theta):
    g = op.gate
    if g.kind == "channel":
        return f"~{g.name}~"
    if g.parametric:
        return f"{g.name}({angle_text(op, theta)})"
    return g.name


def layers(operations, span=False) -> list:
    """Layer index (from 0) of each operation.

    An operation goes to the first layer after the last one using any of its qubits; with
    ``span=True`` every qubit between its lowest and highest counts as used (for drawing,
    where the connector crosses them).
    """
    last = {}
    out = []
    for op in operations:
        qs = range(min(op.qubits), max(op.qubits) + 1) if span else op.qubits
        k = 1 + max((last.get(q, -1) for q in qs), default=-1)
        for q in qs:
            last[q] = k
        out.append(k)
    return out


def draw(circuit, theta=None, width=100) -> str:
    """The circuit as text (see the module notes for the layout).

    Parameters
    ----------
    circuit : Circuit
    theta : ndarray, shape (n_params,), optional
        Bind the parameters (already checked by `Circuit.draw`): angles are shown as numbers.
    width : int
        Wrap into blocks of at most this many columns (a single wider layer stands alone).

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> c = qg.Circuit(1).ry(0, scale=2.0, offset=0.25)
    >>> print(draw(c)); print(draw(c, theta=np.array([0.5])))
    0 -RY(2·θ0+0.25)-
    0 -RY(1.25)-
    """
    if isinstance(width, (bool, np.bool_)) or not isinstance(width, (int, np.integer)) or width < 10:
        raise ValueError(f"width must be an int of at least 10 (columns of text); got {width!r}")
    n = circuit.n_qubits
    ops = circuit.operations
    where = layers(ops, span=True)
    n_layers = max(where, default=-1) + 1
    # cells[layer][row]: text on qubit lines; links[layer]: the gaps a connector crosses
    cells = [dict() for _ in range(n_layers)]
    links = [set() for _ in range(n_layers)]
    for op, k in zip(ops, where):
        label = _label(op, theta)
        if len(op.qubits) == 1:
            cells[k][op.qubits[0]] = label
            continue
        for i, q in enumerate(op.qubits):
            cells[k][q] = f"{label}:{i + 1}"
        lo, hi = min(op.qubits), max(op.qubits)
        for q in range(lo + 1, hi):
            cells[k].setdefault(q, "|")
        links[k].update(range(lo, hi))
    widths = [max((len(t) for t in col.values()), default=1) for col in cells]
    pad = len(str(n - 1))
    prefix = [f"{q:>{pad}} " for q in range(n)]
    blocks, start = [], 0
    while start < n_layers or not blocks:
        used, stop = len(prefix[0]) + 1, start
        while stop < n_layers and (stop == start or used + widths[stop] + 1 <= width):
            used += widths[stop] + 1
            stop += 1
        blocks.append((start, stop, _block(cells, links, widths, prefix, range(start, stop), n)))
        start = stop
    if len(blocks) == 1:
        return blocks[0][2]
    # a header names each block's layers: gap lines may be blank, so a blank line alone
    # could not tell where a block ends
    return "\n".join((f"layers {a + 1}-{b}" if b > a + 1 else f"layer {b}") + "\n" + text
                     for a, b, text in blocks)


def _block(cells, links, widths, prefix, cols, n):
    lines = []
    for q in range(n):
        row = "-" + "".join(cells[k].get(q, "").ljust(widths[k], "-") + "-" for k in cols)
        lines.append(prefix[q] + row)
        if q < n - 1:
            gap = " " + "".join(("|" if q in links[k] else "").ljust(widths[k]) + " " for k in cols)
            lines.append((" " * len(prefix[q]) + gap).rstrip())
    return "\n".join(lines)
