"""Progress bars: shown with progress=True, silent with progress=False; by default on in a
notebook or an interactive terminal, off in CI and when nobody watches."""
import sys
import types

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


class Terminal:
    def isatty(self):
        return True

    def write(self, text):
        return len(text)

    def flush(self):
        pass


def test_progress_default_follows_isatty(monkeypatch):
    monkeypatch.delenv("CI", raising=False)
    monkeypatch.setattr("sys.stderr", Terminal())
    assert wants_progress(None) is True


@pytest.mark.parametrize("value", ["true", "1", "yes", "True"])
def test_progress_default_is_off_in_ci_even_on_a_terminal(monkeypatch, value):
    # regression (issue 11, case 17): CI services set CI=true (common practice); a bar in a
    # CI log is noise, whatever the log's stream claims to be
    monkeypatch.setenv("CI", value)
    monkeypatch.setattr("sys.stderr", Terminal())
    assert wants_progress(None) is False
    assert wants_progress(True) is True          # asked for explicitly, it is shown


@pytest.mark.parametrize("value", ["", "0", "false", "no"])
def test_ci_set_to_a_false_value_does_not_count(monkeypatch, value):
    monkeypatch.setenv("CI", value)
    monkeypatch.setattr("sys.stderr", Terminal())
    assert wants_progress(None) is True


def fake_notebook(monkeypatch):
    """A Jupyter kernel as tqdm and we detect it: ipykernel loaded, IPython's shell the
    ZMQ one."""
    shell_type = type("ZMQInteractiveShell", (), {})
    ipython = types.ModuleType("IPython")
    ipython.get_ipython = lambda: shell_type()
    monkeypatch.setitem(sys.modules, "IPython", ipython)
    monkeypatch.setitem(sys.modules, "ipykernel", types.ModuleType("ipykernel"))


def test_progress_default_is_on_in_a_notebook_with_the_notebook_aware_bar(monkeypatch):
    # regression (issue 11, case 17): a notebook's output is not a terminal, so no bar showed
    from tqdm.auto import tqdm as auto_tqdm

    monkeypatch.delenv("CI", raising=False)
    fake_notebook(monkeypatch)
    from qgradlib.train.progress import in_notebook, progress_bar

    assert in_notebook() and wants_progress(None) is True
    bar = progress_bar(None, total=2, desc="nb")
    try:
        assert isinstance(bar, auto_tqdm)
    finally:
        bar.close()


def test_notebook_in_ci_stays_quiet(monkeypatch):
    monkeypatch.setenv("CI", "true")
    fake_notebook(monkeypatch)
    assert wants_progress(None) is False


def test_a_plain_ipython_terminal_shell_is_not_a_notebook(monkeypatch):
    ipython = types.ModuleType("IPython")
    ipython.get_ipython = lambda: type("TerminalInteractiveShell", (), {})()
    monkeypatch.setitem(sys.modules, "IPython", ipython)
    monkeypatch.setitem(sys.modules, "ipykernel", types.ModuleType("ipykernel"))
    from qgradlib.train.progress import in_notebook

    assert not in_notebook()


def test_rotosolve_progress_counts_sweeps(capfd):
    c = models.layered(2, 1)
    qg.optimize.minimize_expectation(c, models.ising_chain(2, periodic=False), np.zeros(c.n_params),
                                     method="rotosolve", steps=3, tol=0.0, progress=True)
    assert "3/3" in capfd.readouterr().err


def test_progress_rejects_other_values():
    with pytest.raises(TypeError, match="progress must be None"):
        wants_progress("auto")
