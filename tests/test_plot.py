"""Plots: PNG files are written and non-empty; matplotlib stays optional and lazily imported."""
import os
import pathlib
import subprocess
import sys

import numpy as np
import pytest

import qgradlib as qg
from qgradlib import models

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"  # common practice: the PNG file signature


@pytest.fixture(scope="module")
def runs():
    c = models.layered(2, 1)
    H = models.ising_chain(2, periodic=False)
    x0 = np.full(c.n_params, 0.2)
    return c, H, {m: qg.optimize.minimize_expectation(c, H, x0, method=m, steps=15)
                  for m in ("adam", "rotosolve")}


def test_training_plot_is_written(tmp_path, runs):
    _, _, results = runs
    path = tmp_path / "train.png"
    fig = qg.plot.training(results["adam"], path, title="one run")
    data = path.read_bytes()
    assert data.startswith(PNG_MAGIC) and len(data) > 5000
    assert len(fig.axes) == 3  # cost, executions (twin), gradient norm
    cost_line = fig.axes[0].lines[0]
    assert np.allclose(cost_line.get_ydata(), results["adam"].history["cost"])


def test_training_plot_of_several_runs(tmp_path, runs):
    _, _, results = runs
    path = tmp_path / "both.png"
    fig = qg.plot.training(results, path)
    assert path.stat().st_size > 5000
    assert [t.get_text() for t in fig.axes[0].get_legend().get_texts()] == ["adam", "rotosolve"]


def test_landscape_plot_is_written_batched_and_not(tmp_path, runs):
    c, H, results = runs
    x = results["rotosolve"].x
    p1, p2 = tmp_path / "a.png", tmp_path / "b.png"
    qg.plot.landscape(lambda t: qg.expect(c, H, t), x, 0, 1, p1, points=9, batched=True)
    qg.plot.landscape(lambda t: qg.expect(c, H, t), x, 0, 1, p2, points=9)
    for p in (p1, p2):
        data = p.read_bytes()
        assert data.startswith(PNG_MAGIC) and len(data) > 5000


def test_plot_input_checks(runs):
    c, H, results = runs
    with pytest.raises(TypeError, match="history"):
        qg.plot.training({"x": 1.0})
    with pytest.raises(ValueError, match="different"):
        qg.plot.landscape(lambda t: 0.0, np.zeros(3), 1, 1)
    with pytest.raises(ValueError, match="parameter index"):
        qg.plot.landscape(lambda t: 0.0, np.zeros(3), 0, 3)
    with pytest.raises(ValueError, match="NaN"):
        qg.plot.landscape(lambda t: np.nan, np.zeros(2), 0, 1, points=3)


def test_missing_matplotlib_gives_a_clear_message(monkeypatch):
    for name in ("matplotlib", "matplotlib.figure", "matplotlib.backends.backend_agg"):
        monkeypatch.setitem(sys.modules, name, None)
    with pytest.raises(ImportError, match=r"pip install 'qgradlib\[plot\]'"):
        qg.plot.landscape(lambda t: 0.0, np.zeros(2), 0, 1)


def test_package_import_does_not_import_matplotlib():
    code = "import sys, qgradlib; print('matplotlib' in sys.modules); qgradlib.plot; print('matplotlib' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True,
                         env={**os.environ, "PYTHONPATH": str(pathlib.Path(qg.__file__).parents[1])})
    assert out.stdout.split() == ["False", "False"]  # even qgradlib.plot imports it only when drawing
