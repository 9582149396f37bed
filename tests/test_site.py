"""The documentation site builds with warnings as errors (Sphinx, from the docs extra).

The build is the README's command, ``python -m sphinx -W -b html docs build/docs``, run in a
child process into a temporary directory: a broken cross-reference, a docstring that numpydoc
cannot parse, a public name without a docstring or a guide page left out of the table of
contents fails it. The test extra brings the docs extra along.
"""
import re
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
DOCS = ROOT / "docs"


def toctree_entries(page):
    """Documents named in the ```{toctree} blocks of a MyST page."""
    out = []
    for block in re.findall(r"^```\{toctree\}\n(.*?)^```", page.read_text(encoding="utf-8"), re.S | re.M):
        out += [ln.strip() for ln in block.splitlines() if ln.strip() and not ln.startswith(":")]
    return out


def test_every_guide_page_is_in_the_table_of_contents():
    # a page missing here would also fail the -W build; this says which line to add
    listed = set(toctree_entries(DOCS / "index.md"))
    for page in sorted(DOCS.glob("*.md")):
        if page.stem != "index":
            assert page.stem in listed, f"add {page.stem} to a toctree in docs/index.md"


def test_the_site_builds_with_warnings_as_errors(tmp_path):
    out = subprocess.run(
        [sys.executable, "-m", "sphinx", "-W", "--keep-going", "-q", "-b", "html",
         "-d", str(tmp_path / "doctrees"), str(DOCS), str(tmp_path / "html")],
        cwd=ROOT, capture_output=True, text=True, timeout=900)
    assert out.returncode == 0, f"sphinx -W failed:\n{out.stderr[-6000:]}"
    html = tmp_path / "html"
    assert (html / "index.html").exists()
    # the generated reference documents the public names, the notebooks come out executed
    api = (html / "api" / "qgradlib.html").read_text(encoding="utf-8")
    assert 'id="qgradlib.expect"' in api and 'id="qgradlib.Circuit"' in api
    for nb in sorted((DOCS / "examples").glob("*.ipynb")):
        page = (html / "examples" / f"{nb.stem}.html").read_text(encoding="utf-8")
        assert "cell_output" in page, f"{nb.name} was rendered without outputs"
