"""Figures of training runs and cost landscapes (needs matplotlib: ``pip install qgradlib[plot]``).

The figures are drawn on the Agg canvas without pyplot, so importing or using this module
changes no global matplotlib state and needs no display. Each function returns the
`matplotlib.figure.Figure` and, given ``path``, writes it there (PNG by the file ending).

Examples
--------
>>> import autograd.numpy as anp
>>> import numpy as np
>>> import qgradlib as qg
>>> run = qg.optimize.minimize(lambda t: anp.sum(anp.sin(t)), np.zeros(2), method="gd", steps=5)
>>> len(qg.plot.training(run).axes)      # cost, executions (twin axis), gradient norm
3
"""
from __future__ import annotations

from numbers import Real

import numpy as np

__all__ = ["training", "landscape", "gradient_variance"]


def _figure(**kwargs):
    try:
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure
    except ImportError as err:
        raise ImportError("qgradlib.plot needs matplotlib, an optional extra: "
                          "pip install 'qgradlib[plot]' (or pip install matplotlib)") from err
    fig = Figure(**kwargs)
    FigureCanvasAgg(fig)
    return fig


def _save(fig, path):
    if path is not None:
        fig.savefig(path, dpi=120)
    return fig


def _runs(result):
    if isinstance(result, dict) and "history" not in result:
        runs = dict(result)
    else:
        runs = {str(getattr(result, "method", None) or "run"): result}
    if not runs:
        raise ValueError("result must be an OptimizeResult from qgradlib.train.optimize, or a non-empty "
                         "dict of them")
    for name, r in runs.items():
        h = r.get("history") if isinstance(r, dict) else None
        if not isinstance(h, dict) or not {"cost", "grad_norm", "executions"} <= set(h):
            raise TypeError(f"result {name!r} has no qgradlib history: pass the OptimizeResult "
                            "returned by qgradlib.train.optimize.minimize or minimize_expectation")
    return runs


def training(result, path=None, *, title=None):
    """Cost and gradient norm against step, with cumulative executions on a second axis.

    Parameters
    ----------
    result : OptimizeResult or dict of {str: OptimizeResult}
        One run, or several (drawn together, labelled by the keys).
    path : str or path-like, optional
        Where to write the figure (PNG for a ``.png`` ending).
    title : str, optional

    Returns
    -------
    matplotlib.figure.Figure
        Two panels: cost (left axis) and executions so far (right axis, dashed) against step;
        gradient norm against step on a log scale.

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> r = qg.optimize.minimize_expectation(qg.Circuit(1).ry(0), qg.Observable({"Z": 1.0}),
    ...                                      np.array([0.5]), method="gd", steps=5)
    >>> fig = qg.plot.training(r, title="one qubit")
    >>> len(fig.axes)           # cost with executions on a twin axis, and the gradient norm
    3
    """
    runs = _runs(result)
    fig = _figure(figsize=(7.0, 6.0))
    top, bottom = fig.subplots(2, 1, sharex=True)
    right = top.twinx()
    for k, (name, r) in enumerate(runs.items()):
        h = r["history"]
        steps = np.arange(len(h["cost"]))
        colour = f"C{k % 10}"
        top.plot(steps, h["cost"], color=colour, label=name)
        right.plot(steps, h["executions"], color=colour, linestyle="--", alpha=0.6)
        gn = np.asarray(h["grad_norm"], dtype=float)
        bottom.semilogy(steps, np.where(gn > 0, gn, np.nan), color=colour, label=name)
    top.set_ylabel("cost")
    right.set_ylabel("executions so far (dashed)")
    bottom.set_ylabel("gradient norm")
    bottom.set_xlabel("step")
    top.legend(loc="upper right")
    top.grid(alpha=0.3)
    bottom.grid(alpha=0.3, which="both")
    if title:
        top.set_title(title)
    fig.tight_layout()
    return _save(fig, path)


def landscape(cost, theta=None, i=None, j=None, path=None, *, span=np.pi, points=31,
              batched=False, title=None):
    """The cost on a 2-D slice through ``theta``, varying parameters ``i`` and ``j``.

    Parameters
    ----------
    cost : callable or qgradlib.landscape.Reconstruction2D
        ``cost(theta) -> float``; with ``batched=True``, ``cost(thetas)`` for thetas of shape
        (B, m) returning shape (B,) (as `qgradlib.expect` does), which is much faster. Or a
        reconstruction of two parameters (`qgradlib.landscape.reconstruct` with ``k=(i, j)``):
        then ``theta``, ``i`` and ``j`` come from it, the surface is drawn from its
        trigonometric polynomial without running any circuit, and the grid it was fixed by is
        marked with dots.
    theta : array_like, shape (m,)
        The centre of the slice; the other parameters stay at their values.
    i, j : int
        The two parameters to vary, over ``theta[i] +- span`` and ``theta[j] +- span``.
    path : str or path-like, optional
    span : float
    points : int
        Grid points per axis (at least 3).
    batched : bool
    title : str, optional

    Returns
    -------
    matplotlib.figure.Figure
        A filled contour plot with the centre marked.

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> c = qg.Circuit(2).ry(0).ry(1)
    >>> cost = lambda t: qg.expect(c, qg.Observable({"ZZ": 1.0}), t)
    >>> fig = qg.plot.landscape(cost, np.zeros(2), 0, 1, points=5, batched=True)
    >>> fig.axes[0].get_xlabel()
    'theta[0]'
    """
    from .landscape import Reconstruction2D

    slice_ = cost if isinstance(cost, Reconstruction2D) else None
    if slice_ is not None:
        if theta is not None or i is not None or j is not None:
            raise ValueError("a Reconstruction2D carries theta, i and j: pass none of them")
        theta, (i, j) = slice_.theta, slice_.params
    elif not callable(cost):
        raise TypeError(f"cost must be callable or a Reconstruction2D; got {type(cost).__name__}")
    if theta is None or i is None or j is None:
        raise ValueError("theta, i and j are needed with a cost function")
    theta = np.asarray(theta, dtype=float)
    if theta.ndim != 1 or not np.all(np.isfinite(theta)):
        raise ValueError(f"theta must be a finite 1-D array; got shape {theta.shape}")
    for name, v in (("i", i), ("j", j)):
        if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or not 0 <= v < theta.size:
            raise ValueError(f"{name} must be a parameter index in 0..{theta.size - 1}; got {v!r}")
    if i == j:
        raise ValueError("i and j must be different parameters")
    if isinstance(span, bool) or not isinstance(span, Real) or not np.isfinite(span) or span <= 0:
        raise ValueError(f"span must be a positive number; got {span!r}")
    if isinstance(points, bool) or not isinstance(points, (int, np.integer)) or points < 3:
        raise ValueError(f"points must be an int >= 3; got {points!r}")
    fig = _figure(figsize=(6.0, 5.0))
    a = theta[i] + np.linspace(-span, span, points)
    b = theta[j] + np.linspace(-span, span, points)
    A, B = np.meshgrid(a, b, indexing="xy")
    if slice_ is not None:
        vals = np.asarray(slice_(A, B), dtype=float).reshape(-1)
    else:
        grid = np.repeat(theta[None], A.size, axis=0)
        grid[:, i] = A.ravel()
        grid[:, j] = B.ravel()
        if batched:
            vals = np.asarray(cost(grid), dtype=float).reshape(-1)
            if vals.size != A.size:
                raise ValueError(f"batched cost must return one value per row ({A.size}); got {vals.size}")
        else:
            vals = np.array([float(cost(row)) for row in grid])
    if not np.all(np.isfinite(vals)):
        raise ValueError("cost returned NaN or inf on the slice")
    ax = fig.subplots()
    filled = ax.contourf(A, B, vals.reshape(A.shape), levels=25, cmap="viridis")
    fig.colorbar(filled, ax=ax, label="cost")
    if slice_ is not None:
        # the evaluated grid, folded into the window by the polynomial's periods
        pi, pj = slice_.points
        gx, gy = np.meshgrid(_fold(pi, theta[i], span, slice_.frequencies[0]),
                             _fold(pj, theta[j], span, slice_.frequencies[1]))
        ax.plot(gx.ravel(), gy.ravel(), linestyle="none", marker=".", color="white", alpha=0.7,
                label=f"{slice_.circuits} evaluated circuits")
        ax.legend(loc="upper right", fontsize=8)
    ax.plot([theta[i]], [theta[j]], marker="x", color="white", markersize=9)
    ax.set_xlabel(f"theta[{i}]")
    ax.set_ylabel(f"theta[{j}]")
    if title:
        ax.set_title(title)
    fig.tight_layout()
    return _save(fig, path)


def _fold(p, centre, span, freqs):
    from .rules.fourier import equidistant_base

    base = equidistant_base(freqs)
    if base is None:
        return p
    period = 2 * np.pi / base
    return centre - span + np.mod(p - (centre - span), period) if period <= 2 * span else p


def gradient_variance(result, path=None, *, title=None):
    """Gradient variance against size on a log scale, with the fitted exponential and its band.

    Parameters
    ----------
    result : qgradlib.landscape.GradientVariance or dict of {str: GradientVariance}
        One study, or several drawn together (labelled by the keys; for instance a global and
        a local cost).
    path : str or path-like, optional
    title : str, optional

    Returns
    -------
    matplotlib.figure.Figure
        Per study: the mean variance per size (dots and line), each parameter's variance
        (faint dots), the fit ``C exp(-rate size)`` (dashed) and the band of rates in the
        confidence interval; the legend gives the rate and its interval.

    Examples
    --------
    >>> import qgradlib as qg
    >>> build = lambda n: qg.Circuit(n).ry(0).ry(1)
    >>> gv = qg.landscape.gradient_variance(build, lambda n: qg.Observable({"Z" * n: 1.0}), [2, 3, 4],
    ...                                     samples=10, seed=0)
    >>> fig = qg.plot.gradient_variance(gv)           # a matplotlib Figure (written with path=)
    >>> type(fig).__name__
    'Figure'
    """
    from .landscape import GradientVariance

    studies = {"cost": result} if isinstance(result, GradientVariance) else result
    if not isinstance(studies, dict) or not studies or not all(
            isinstance(r, GradientVariance) for r in studies.values()):
        raise TypeError("result must be a GradientVariance from qgradlib.landscape.gradient_variance, "
                        "or a non-empty dict of them")
    fig = _figure(figsize=(6.5, 4.5))
    ax = fig.subplots()
    for k, (name, r) in enumerate(studies.items()):
        colour = f"C{k % 10}"
        x = np.asarray(r.sizes, dtype=float)
        lo, hi = r.rate_interval
        ax.semilogy(x, r.variance, color=colour, marker="o",
                    label=f"{name}: rate {r.rate:.3g} [{lo:.3g}, {hi:.3g}]")
        for s, v in zip(x, r.per_parameter):
            ax.plot(np.full(v.size, s), v, linestyle="none", marker=".", color=colour, alpha=0.2)
        fine = np.linspace(x.min(), x.max(), 100)
        centre = x.mean()
        anchor = r.prefactor * np.exp(-r.rate * centre)
        ax.plot(fine, r.prefactor * np.exp(-r.rate * fine), color=colour, linestyle="--")
        # rates across the interval, pivoting about the mean size where the fit is tightest
        ax.fill_between(fine, anchor * np.exp(-lo * (fine - centre)),
                        anchor * np.exp(-hi * (fine - centre)), color=colour, alpha=0.12)
    ax.set_xlabel("size")
    ax.set_ylabel("variance of a partial derivative")
    ax.grid(alpha=0.3, which="both")
    ax.legend(loc="lower left", fontsize=8)
    ax.set_title(title or f"gradient variance over {next(iter(studies.values())).samples} random points")
    fig.tight_layout()
    return _save(fig, path)
