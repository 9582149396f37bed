"""Every ```python block in docs/*.md runs, and every docstring example in the package passes.

A page's blocks run in order in one namespace (a page builds on its earlier blocks), in a
temporary directory so that examples which write files leave nothing behind.
"""
import doctest
import importlib
import pkgutil
import re
from pathlib import Path

import pytest

import qgradlib

DOCS = Path(__file__).resolve().parent.parent / "docs"
PAGES = sorted(DOCS.glob("*.md")) + [DOCS.parent / "README.md"]
BLOCK = re.compile(r"^```python[ \t]*\n(.*?)^```", re.S | re.M)
# __main__ runs the command line on import: its behaviour is tested through the CLI instead
MODULES = ["qgradlib"] + sorted(m.name for m in pkgutil.walk_packages(qgradlib.__path__, "qgradlib.")
                               if not m.name.endswith("__main__"))


def python_blocks(page):
    return BLOCK.findall(page.read_text(encoding="utf-8"))


def test_the_guide_has_examples():
    assert (DOCS / "guide.md").exists()
    assert len(python_blocks(DOCS / "guide.md")) >= 5


@pytest.mark.parametrize("page", PAGES, ids=[p.name for p in PAGES])
def test_doc_page_examples_run(page, tmp_path, monkeypatch):
    blocks = python_blocks(page)
    if not blocks:
        pytest.skip(f"{page.name} has no python blocks")
    monkeypatch.chdir(tmp_path)
    monkeypatch.setenv("MPLBACKEND", "Agg")        # a page that plots must not open windows
    namespace = {"__name__": f"docs_{page.stem}"}
    for i, code in enumerate(blocks):
        exec(compile(code, f"{page.name} [python block {i + 1}]", "exec"), namespace)
    # a page that writes figures must write real ones (a blank PNG is a few hundred bytes)
    for png in tmp_path.glob("*.png"):
        assert png.stat().st_size > 5000, f"{page.name} wrote a near-empty figure {png.name}"


@pytest.mark.parametrize("name", MODULES)
def test_module_docstring_examples(name):
    module = importlib.import_module(name)
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    assert result.failed == 0, f"{result.failed} docstring example(s) failed in {name}"


def test_the_package_has_docstring_examples():
    finder = doctest.DocTestFinder()
    examples = sum(len(t.examples) for m in MODULES for t in finder.find(importlib.import_module(m)))
    assert examples > 20


def test_the_guide_states_what_each_extra_pulls_in():
    # regression (issue 11, case 18): the guide named three of the four dependencies and
    # nothing of the extras; its table must say what pyproject.toml says
    tomllib = pytest.importorskip("tomllib")
    project = tomllib.loads((DOCS.parent / "pyproject.toml").read_text())["project"]
    wanted = {".": project["dependencies"], **{f'".[{k}]"': v for k, v in
                                                 project["optional-dependencies"].items()}}
    rows = {}
    for line in (DOCS / "guide.md").read_text(encoding="utf-8").splitlines():
        cells = [c.strip() for c in line.strip().strip("|").split("|")]
        if len(cells) == 3 and cells[0].startswith("`") and cells[0].strip("`") in wanted:
            listed = re.sub(r"\([^)]*\)", "", cells[1])
            rows[cells[0].strip("`")] = sorted(r.replace(" ", "") for r in listed.split(",") if r.strip())
    assert rows == {k: sorted(v) for k, v in wanted.items()}


def test_the_readme_creates_a_virtual_environment_before_installing():
    # regression (issue 11, case 18): a bare pip install fails on an externally managed Python
    text = (DOCS.parent / "README.md").read_text(encoding="utf-8")
    venv = text.index("python -m venv .venv && . .venv/bin/activate")
    assert venv < text.index("python -m pip install . && qgradlib demo")
    assert venv < text.index('python -m pip install ".[test]" && python -m pytest')
