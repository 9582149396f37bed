"""docs/derivatives.md's finite-difference table is what benchmarks/fd_tradeoff.py prints
(tests/test_docs.py runs every page's python blocks and every module's doctests)."""
import pathlib
import subprocess
import sys

ROOT = pathlib.Path(__file__).resolve().parents[1]


def _table(text):
    return [line for line in text.splitlines() if line.startswith("| ")]


def test_fd_table_in_the_docs_is_the_benchmark_output():
    doc = (ROOT / "docs" / "derivatives.md").read_text()
    start, end = doc.index("<!-- fd-table start -->"), doc.index("<!-- fd-table end -->")
    out = subprocess.run([sys.executable, str(ROOT / "benchmarks" / "fd_tradeoff.py"), "--no-write"],
                         capture_output=True, text=True, check=True, cwd=ROOT).stdout
    rows = _table(out)
    assert rows and len(rows) == len(_table(doc[start:end]))
    for ours, printed in zip(rows[2:], _table(doc[start:end])[2:]):
        a, b = ours.split("|")[1:-1], printed.split("|")[1:-1]
        assert a[0] == b[0]
        for x, y in zip(a[1:], b[1:]):
            # rounding-level entries (the exact shift rule, ~1e-17) may differ in the last bit
            assert x == y or (float(x) < 1e-12 and float(y) < 1e-12), (ours, printed)
    # the shape the page explains: with shots the error of central differences grows as the
    # step shrinks, roughly like 1/(step * sqrt(shots)) (common practice)
    errs = {r.split("|")[1].strip(): float(r.split("|")[3]) for r in rows[2:]}
    assert errs["central FD, 0.001"] > 5 * errs["central FD, 0.01"] > 25 * errs["central FD, 0.1"]
