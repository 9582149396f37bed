"""Notebook displays (``_repr_html_``): well-formed HTML with the expected cells, values escaped.

Each display is parsed with the standard library's ``html.parser``: every tag opened is closed
in order, and the text of every table cell is collected, so a test can ask for the cells it
expects. The numbers in the cells are checked against the objects' own attributes (and, where
the attribute is itself the job, against an outside reference named beside the check).
"""
from html.parser import HTMLParser

import numpy as np
import pytest
from autograd import grad

import qgradlib as qg
from qgradlib import curvature
from qgradlib.circuits import display

VOID = {"br", "hr", "img", "meta", "link", "input", "col", "wbr"}
SVG_EMPTY = {"polyline", "path", "line", "circle", "rect"}


class Page(HTMLParser):
    """Checks nesting and collects table cells, text and tags of one HTML fragment."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.stack, self.cells, self.text, self.tags, self.rows = [], [], [], [], []
        self._cell = None

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        if tag in VOID:
            return
        self.stack.append(tag)
        if tag == "tr":
            self.rows.append([])
        if tag in ("td", "th"):
            self._cell = []

    def handle_startendtag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))

    def handle_endtag(self, tag):
        assert self.stack and self.stack[-1] == tag, f"</{tag}> closes {self.stack[-1:]}"
        self.stack.pop()
        if tag in ("td", "th"):
            text = "".join(self._cell)
            self.cells.append(text)
            self.rows[-1].append(text)
            self._cell = None

    def handle_data(self, data):
        self.text.append(data)
        if self._cell is not None:
            self._cell.append(data)


def parse(html):
    assert isinstance(html, str) and html.strip()
    page = Page()
    page.feed(html)
    page.close()
    assert not page.stack, f"unclosed tags {page.stack}"
    assert not any(t == "script" for t, _ in page.tags), "displays carry no JavaScript"
    classes = [a.get("class") for _, a in page.tags if a.get("class")]
    assert all(c.startswith("qgl-") for c in classes), classes
    return page


def row(page, first):
    """The cells of the table row that starts with ``first``."""
    for r in page.rows:
        if r and r[0] == first:
            return r
    raise AssertionError(f"no row starting with {first!r} in {page.rows}")


# -- the helpers --------------------------------------------------------------------------------
def test_table_escapes_every_cell_and_the_caption():
    page = parse(display.table(["<h>", "v"], [["a&b", "<script>x</script>"]], caption="c<d"))
    assert page.cells == ["<h>", "v", "a&b", "<script>x</script>"]   # text back, tags never
    assert [t for t, _ in page.tags] == ["table", "caption", "thead", "tr", "th", "th", "tbody",
                                         "tr", "td", "td"]


def test_sparkline_is_svg_with_points_in_the_box():
    svg = display.sparkline([5.0, 3.0, 4.0, 1.0], width=100, height=20)
    page = parse(svg)
    (line,) = [a for t, a in page.tags if t == "polyline"]
    pts = np.array([p.split(",") for p in line["points"].split()], dtype=float)
    assert pts.shape == (4, 2)
    assert np.all((pts >= 0) & (pts <= [100, 20]))
    # the lowest value is drawn lowest (largest y in SVG coordinates), the highest at the top
    assert pts[3, 1] == pts[:, 1].max() and pts[0, 1] == pts[:, 1].min()
    assert np.all(np.diff(pts[:, 0]) > 0)
    assert display.sparkline([1.0, float("nan")]) == ""


# -- objects of the circuits stage --------------------------------------------------------------
def test_observable_lists_its_terms_largest_first():
    H = qg.Observable({"ZZI": -1.0, "IZZ": -1.0, "XII": -0.5, "IIY": 2.0})
    page = parse(H._repr_html_())
    assert page.rows[1:] == [["IIY", "2"], ["IZZ", "-1"], ["ZZI", "-1"], ["XII", "-0.5"]]
    assert "Observable on 3 qubits, 4 Pauli terms" in "".join(page.text)


def test_observable_shows_at_most_the_limit_and_says_how_many_more():
    H = qg.Observable({f"{'IXYZ'[i % 4]}{'IXYZ'[i // 4]}": 1.0 + i for i in range(1, 16)})
    page = parse(H._repr_html_(limit=5))
    assert len(page.rows) == 1 + 5
    assert "and 10 smaller terms" in "".join(page.text)


def test_circuit_counts_operations_and_escapes_gate_names():
    M = np.diag([1.0, -1.0]) / 2
    odd = qg.Gate.from_generator("<mix&>", generator=M)
    c = qg.Circuit(2).h(0).ry(1).cnot(0, 1).ry(0).add(odd, 1)
    html = c._repr_html_()
    assert "<mix&>" not in html and "&lt;mix&amp;&gt;" in html
    page = parse(html)
    assert row(page, "RY") == ["RY", "2"]
    assert row(page, "<mix&>") == ["<mix&>", "1"]
    assert "3 parameters" in "".join(page.text)


def test_circuit_shows_its_drawing_and_resources():
    c = qg.Circuit(2).h(0).ry(1).cnot(0, 1).crx(0, 1)
    page = parse(c._repr_html_())
    assert str(c) in "".join(page.text)          # the text drawing, unescaped back exactly
    r = c.resources()
    assert row(page, "depth") == ["depth", str(r.depth)]
    # common practice: 2 shifted circuits for RY, 4 for the four-term CRX rule
    assert row(page, "circuits for one gradient") == ["circuits for one gradient", "6"]


# -- the ledger and the audit -------------------------------------------------------------------
def test_ledger_table_matches_its_counts():
    c = qg.Circuit(2).ry(0).crx(0, 1)
    H = qg.Observable({"ZZ": 1.0})
    with qg.Ledger() as book:
        grad(lambda t: qg.expect(c, H, t))(np.array([0.3, 0.4]))
    page = parse(book._repr_html_())
    # common practice: 1 value + 2 (two-term RY) + 4 (four-term CRX) shifted circuits
    assert row(page, "executions") == ["executions", "7"]
    assert row(page, "CRX") == ["CRX", "4"] and row(page, "RY") == ["RY", "2"]
    assert row(page, "shots") == ["shots", "0"]
    assert "no shots were taken" in "".join(page.text)


def test_gradient_audit_shows_every_method_and_component():
    c = qg.Circuit(2).h(0).ry(1).cnot(0, 1).crx(1, 0)
    H = qg.Observable({"ZZ": 1.0, "XI": 0.5})
    report = qg.check.gradients(c, H, np.array([0.3, 0.8]), seed=0)
    page = parse(report._repr_html_())
    assert page.rows[0] == ["d/dtheta", "shift", "adjoint", "difference", "autograd-check"]
    for j in range(2):
        cells = row(page, f"[{j}]")
        assert np.allclose([float(x) for x in cells[1:]], report.reference[j], atol=1e-8)
    assert row(page, "adjoint")[1:3] == ["reference", "sim only"]
    assert row(page, "shift")[2] == str(report["shift"].executions)
    assert row(page, "autograd-check")[-1] == "passed"
    assert "not device measurements" in "".join(page.text)


# -- estimates and curvature --------------------------------------------------------------------
def test_estimate_and_gradient_estimate_show_values_with_standard_errors():
    c = qg.Circuit(1).ry(0)
    Z = qg.Observable({"Z": 1.0})
    est = qg.estimate(c, [Z, Z], np.array([0.4]), shots=500, seed=2)
    page = parse(est._repr_html_())
    for k in range(2):
        entry, value, error = row(page, f"[{k}]")
        assert float(value) == pytest.approx(est.value[k], rel=1e-5)
        assert float(error) == pytest.approx(est.standard_error[k], rel=1e-5)
    assert row(page, "shots") == ["shots", str(est.shots)]
    g = qg.estimate_gradient(c, Z, np.array([0.4]), shots=500, seed=2)
    page = parse(g._repr_html_())
    assert float(row(page, "[0]")[1]) == pytest.approx(g.gradient[0], rel=1e-5)
    assert row(page, "executions") == ["executions", "2"]


def test_hessian_display_gives_shape_eigenvalue_range_and_cost():
    c = qg.Circuit(2).ry(0).ry(1)                # <ZZ> = cos(a) cos(b)
    a, b = 0.3, 0.5
    r = curvature.hessian(c, qg.Observable({"ZZ": 1.0}), np.array([a, b]))
    page = parse(r._repr_html_())
    exact = np.array([[-np.cos(a) * np.cos(b), np.sin(a) * np.sin(b)],
                      [np.sin(a) * np.sin(b), -np.cos(a) * np.cos(b)]])
    lo, hi = np.linalg.eigvalsh(exact)           # numpy's eigvalsh of the closed form
    shown = row(page, "Hessian eigenvalues")[1].strip("[]").split(",")
    assert [float(x) for x in shown] == pytest.approx([lo, hi], rel=1e-5)
    assert row(page, "Hessian shape") == ["Hessian shape", "(2, 2)"]
    assert row(page, "executions") == ["executions", "9"]    # Mari et al. 2021: 2 m**2 + 1
    d = curvature.derivatives(c, qg.Observable({"ZZ": 1.0}), np.array([a, b]), order=3)
    page = parse(d._repr_html_())
    assert row(page, "order 3") == ["order 3", "shape (2, 2, 2)"]


# -- training -------------------------------------------------------------------------------------
def test_training_result_shows_value_cost_and_a_sparkline_of_the_history():
    c = qg.Circuit(1).ry(0)
    r = qg.optimize.minimize_expectation(c, qg.Observable({"Z": 1.0}), np.array([0.5]),
                                         method="gd", steps=12, rate=0.3)
    page = parse(r._repr_html_())
    assert float(row(page, "fun")[1]) == pytest.approx(r.fun, rel=1e-7)
    assert row(page, "executions") == ["executions", str(r.executions)]
    assert row(page, "nit") == ["nit", "12"]
    (line,) = [a for t, a in page.tags if t == "polyline"]
    assert len(line["points"].split()) == len(r.history["cost"]) == 13
    assert "cost per step" in "".join(page.text)           # the SVG's title says what it draws
