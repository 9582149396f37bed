"""The example notebooks in docs/examples/ are stored without outputs and run top to bottom.

Each runs in a real kernel (``ipykernel`` through ``nbclient``, the current interpreter) with
this checkout's qgradlib first on the path (nbclient and ipykernel come with the
test extra); a cell that raises, including one of the asserts
with which the notebooks check their own numbers, fails the test.
"""
import json
import os
import sys
from pathlib import Path

import nbclient
import nbformat
import pytest

ROOT = Path(__file__).resolve().parent.parent
NOTEBOOKS = sorted((ROOT / "docs" / "examples").glob("*.ipynb"))


def test_there_are_example_notebooks():
    assert len(NOTEBOOKS) >= 4, [nb.name for nb in NOTEBOOKS]


@pytest.mark.parametrize("path", NOTEBOOKS, ids=[p.stem for p in NOTEBOOKS])
def test_stored_without_outputs(path):
    nb = json.loads(path.read_text(encoding="utf-8"))
    for i, cell in enumerate(nb["cells"]):
        if cell["cell_type"] == "code":
            assert cell.get("outputs") == [] and cell.get("execution_count") is None, \
                f"{path.name} cell {i} has stored outputs: clear them before committing"


@pytest.fixture
def kernel_name(tmp_path, monkeypatch):
    """A kernelspec for the interpreter running the tests, found before any other."""
    spec = tmp_path / "jupyter" / "kernels" / "qgradlib-tests"
    spec.mkdir(parents=True)
    (spec / "kernel.json").write_text(json.dumps({
        "argv": [sys.executable, "-m", "ipykernel_launcher", "-f", "{connection_file}"],
        "display_name": "qgradlib tests", "language": "python"}))
    monkeypatch.setenv("JUPYTER_PATH", str(tmp_path / "jupyter"))
    monkeypatch.setenv("PYTHONPATH", os.pathsep.join([str(ROOT)] + [p for p in
                       os.environ.get("PYTHONPATH", "").split(os.pathsep) if p]))
    monkeypatch.setenv("MPLBACKEND", "Agg")
    return "qgradlib-tests"


@pytest.mark.parametrize("path", NOTEBOOKS, ids=[p.stem for p in NOTEBOOKS])
def test_notebook_runs(path, tmp_path, kernel_name):
    nb = nbformat.read(path, as_version=4)
    client = nbclient.NotebookClient(nb, timeout=300, kernel_name=kernel_name,
                                     resources={"metadata": {"path": str(tmp_path)}})
    client.execute()          # raises CellExecutionError on the first failing cell
    ran = [c for c in nb.cells if c.cell_type == "code"]
    assert ran and all(c.execution_count for c in ran)
    assert not [o for c in ran for o in c.outputs if o.output_type == "error"]
