"""Pieces of the notebook displays: escaped tables, monospace blocks, an SVG sparkline.

Every ``_repr_html_`` in qgradlib is assembled from these, so circuits, observables, ledgers,
audits, estimates, curvature and training results share one plain layout and one set of CSS
class names (all prefixed ``qgl-``; a notebook shows them with its own table style, the
documentation site adds a few rules of its own). Only the standard library is used and no
JavaScript is emitted. The module sits in the lowest stage that has a display (observables
live here), so every higher stage can import it; it imports nothing from qgradlib.

Examples
--------
>>> print(table(["term", "coefficient"], [["ZZ", -1.0], ["X<I>", 0.5]]))
<table class="qgl-table"><thead><tr><th>term</th><th>coefficient</th></tr></thead><tbody><tr><td>ZZ</td><td>-1</td></tr><tr><td>X&lt;I&gt;</td><td>0.5</td></tr></tbody></table>
"""
from __future__ import annotations

import math
from html import escape
from numbers import Integral, Real

__all__ = ["cell", "table", "preformatted", "display", "sparkline", "summary_html", "plural"]


def cell(value, digits=6) -> str:
    """A value as escaped text for a table cell: reals to ``digits`` significant digits.

    Examples
    --------
    >>> cell(3.14159265, digits=3), cell(12), cell("a<b"), cell(None)
    ('3.14', '12', 'a&lt;b', '')
    """
    if value is None:
        return ""
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, Integral):
        return str(int(value))
    if isinstance(value, Real):
        v = float(value)
        return escape(f"{v:.{digits}g}") if math.isfinite(v) else escape(str(v))
    return escape(str(value))


def table(header, rows, caption=None, digits=6) -> str:
    """An HTML table: ``header`` a list of column names (or None), ``rows`` lists of cells.

    Examples
    --------
    >>> html = table(None, [["shots", 1000]], caption="a <small> ledger")
    >>> html.startswith('<table class="qgl-table"><caption>a &lt;small&gt; ledger</caption>')
    True
    """
    parts = ['<table class="qgl-table">']
    if caption is not None:
        parts.append(f"<caption>{escape(str(caption))}</caption>")
    if header is not None:
        parts.append("<thead><tr>" + "".join(f"<th>{escape(str(h))}</th>" for h in header)
                     + "</tr></thead>")
    parts.append("<tbody>")
    for row in rows:
        parts.append("<tr>" + "".join(f"<td>{cell(v, digits)}</td>" for v in row) + "</tr>")
    parts.append("</tbody></table>")
    return "".join(parts)


def preformatted(text) -> str:
    """Monospace text (a circuit drawing, a report) in a ``pre`` block, escaped.

    Examples
    --------
    >>> preformatted("0 -H-")
    '<pre class="qgl-drawing">0 -H-</pre>'
    """
    return f'<pre class="qgl-drawing">{escape(str(text))}</pre>'


def display(title, *parts, note=None) -> str:
    """One display: a bold title line, the given HTML parts, and an optional italic note.

    ``title`` and ``note`` are plain text (escaped here); ``parts`` are HTML already built by
    the other helpers.

    Examples
    --------
    >>> display("Ledger", table(None, [["shots", 0]]), note="simulated")[:60]
    '<div class="qgl-display"><p class="qgl-caption">Ledger</p><t'
    """
    out = [f'<div class="qgl-display"><p class="qgl-caption">{escape(str(title))}</p>']
    out += list(parts)
    if note:
        out.append(f'<p class="qgl-note">{escape(str(note))}</p>')
    out.append("</div>")
    return "".join(out)


def sparkline(values, width=180, height=36, label="cost") -> str:
    """A small inline SVG line of ``values`` (oldest left), with its first and last value.

    Non-finite values are left out; fewer than two finite values give an empty string.

    Examples
    --------
    >>> svg = sparkline([3.0, 2.0, 1.5, 1.25])
    >>> svg.startswith('<svg class="qgl-sparkline"'), "<polyline" in svg
    (True, True)
    >>> sparkline([1.0])
    ''
    """
    points = [(i, float(v)) for i, v in enumerate(values) if math.isfinite(float(v))]
    if len(points) < 2:
        return ""
    lo = min(v for _, v in points)
    hi = max(v for _, v in points)
    span = hi - lo or 1.0
    last = max(i for i, _ in points) or 1
    pad = 2.0
    coords = " ".join(f"{pad + (width - 2 * pad) * i / last:.1f},"
                      f"{pad + (height - 2 * pad) * (hi - v) / span:.1f}" for i, v in points)
    title = escape(f"{label}: {points[0][1]:.6g} to {points[-1][1]:.6g} over {len(points)} values")
    return (f'<svg class="qgl-sparkline" xmlns="http://www.w3.org/2000/svg" width="{width}" '
            f'height="{height}" viewBox="0 0 {width} {height}" role="img">'
            f"<title>{title}</title>"
            f'<polyline fill="none" stroke="currentColor" stroke-width="1.5" points="{coords}"/>'
            "</svg>")


def summary_html(title, rows, note=None, digits=6) -> str:
    """A titled two-column table of ``(name, value)`` rows: the common shape of a result.

    Examples
    --------
    >>> "<td>executions</td><td>9</td>" in summary_html("Hessian", [("executions", 9)])
    True
    """
    return display(title, table(None, rows, digits=digits), note=note)


def plural(k, word) -> str:
    """``k`` and ``word``, with an ``s`` unless ``k`` is one.

    Examples
    --------
    >>> plural(1, "qubit"), plural(3, "qubit")
    ('1 qubit', '3 qubits')
    """
    return f"{k} {word}" + ("" if k == 1 else "s")
