"""Progress bars: shown with progress=True, silent with progress=False and when not a terminal."""
import autograd.numpy as anp
import numpy as np
import pytest

import qgradlib as qg
from qgradlib import models
from qgradlib.train.progress import wants_progress


def quad(t):
    return anp.sum((t - 0.5) ** 2)


def test_progress_true_writes_a_bar_with_the_cost(capfd):
    qg.optimize.minimize(quad, np.zeros(2), method="gd", steps=5, progress=True)
    err = capfd.readouterr().err
    assert "gd" in err and "cost=" in err and "5/5" in err


def test_progress_false_is_silent(capfd):
    qg.optimize.minimize(quad, np.zeros(2), method="gd", steps=5, progress=False)
    out = capfd.readouterr()
    assert out.err == "" and out.out == ""


def test_progress_default_is_off_when_stderr_is_not_a_terminal(capfd):
    # under pytest standard error is captured, not a terminal
    c = models.layered(2, 1)
    qg.optimize.minimize_expectation(c, models.ising_chain(2, periodic=False),
                                     np.zeros(c.n_params), method="rotosolve", steps=2)
    assert capfd.readouterr().err == ""
    assert wants_progress(None) is False


def test_progress_default_follows_isatty(monkeypatch):
    class Terminal:
        def isatty(self):
            return True
    monkeypatch.setattr("sys.stderr", Terminal())
    assert wants_progress(None) is True


def test_rotosolve_progress_counts_sweeps(capfd):
    c = models.layered(2, 1)
    qg.optimize.minimize_expectation(c, models.ising_chain(2, periodic=False), np.zeros(c.n_params),
                                     method="rotosolve", steps=3, tol=0.0, progress=True)
    assert "3/3" in capfd.readouterr().err


def test_progress_rejects_other_values():
    with pytest.raises(TypeError, match="progress must be None"):
        wants_progress("auto")
