"""Whole training workflows: several optimisers on one problem, side by side, with their price.

Examples
--------
>>> import numpy as np
>>> import qgradlib as qg
>>> c = qg.models.layered(2, 1)
>>> H = qg.Observable({"ZZ": -1.0, "XI": -0.5, "IX": -0.5})
>>> cmp = compare_training(c, H, np.full(c.n_params, 0.1), steps=30, seed=0)
>>> sorted(cmp.results)
['adam', 'rotosolve']
>>> cmp.shots["adam"] == cmp.executions["adam"] * cmp.shots_per_execution
True
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .optimize import METHODS, minimize_expectation

__all__ = ["Comparison", "compare_training", "ground_energy"]


@dataclass(frozen=True)
class Comparison:
    """Results of training one circuit with several methods.

    Attributes
    ----------
    results : dict
        Method name -> `scipy.optimize.OptimizeResult` (see `qgradlib.train.optimize`).
    energies : dict
        Method name -> final cost.
    executions : dict
        Method name -> circuit executions (circuits times measurement settings) of the run.
    shots : dict
        Method name -> ``executions * shots_per_execution``: the shots the same run would
        take on a device at that budget per execution.
    shots_per_execution : int
    ground_energy : float or None
        The exact lowest eigenvalue of the observable (None when not computed).
    start_energy : float
        The cost at ``theta0``.
    """

    results: dict
    energies: dict
    executions: dict
    shots: dict
    shots_per_execution: int
    ground_energy: float | None
    start_energy: float

    def __repr__(self):
        runs = ", ".join(f"{m}: {self.energies[m]:.6g} in {self.executions[m]} executions"
                         for m in self.results)
        ground = "" if self.ground_energy is None else f"; ground energy {self.ground_energy:.6g}"
        return f"Comparison({runs}{ground}; .summary() for the table)"

    def summary(self) -> str:
        """A plain table, one line per method."""
        lines = [f"{'method':<10} {'steps':>5} {'energy':>12} {'error':>10} {'executions':>11} "
                 f"{'shots':>12}"]
        for name, r in self.results.items():
            err = "" if self.ground_energy is None else f"{self.energies[name] - self.ground_energy:.2e}"
            lines.append(f"{name:<10} {r.nit:>5} {self.energies[name]:>12.6f} {err:>10} "
                         f"{self.executions[name]:>11} {self.shots[name]:>12}")
        lines.append(f"start energy {self.start_energy:.6f}"
                     + ("" if self.ground_energy is None else f"; exact ground energy {self.ground_energy:.6f}"))
        lines.append(f"shots priced at {self.shots_per_execution} per execution; the training itself "
                     "ran on the exact simulator, not on a device")
        return "\n".join(lines)


def ground_energy(observable, max_qubits=16) -> float:
    """Lowest eigenvalue of ``observable`` (dense below 7 qubits, scipy's eigsh above).

    Examples
    --------
    >>> import qgradlib as qg
    >>> ground_energy(qg.Observable({"ZZ": -1.0}))
    -1.0
    """
    n = observable.n_qubits
    if n > max_qubits:
        raise ValueError(f"the observable acts on {n} qubits; exact diagonalisation here stops at "
                         f"max_qubits={max_qubits}")
    M = observable.matrix()
    if n <= 6:
        return float(np.linalg.eigvalsh(M.toarray())[0])
    from scipy.sparse.linalg import eigsh

    return float(eigsh(M, k=1, which="SA")[0][0])


def compare_training(circuit, observable, theta0, methods=("adam", "rotosolve"), steps=60,
                     seed=0, shots_per_execution=1000, options=None, exact=True, progress=False):
    """Train ``circuit`` on ``observable`` with each of ``methods`` from the same ``theta0``.

    Parameters
    ----------
    circuit : Circuit
    observable : Observable
    theta0 : array_like, shape (circuit.n_params,)
    methods : sequence of str
        Names accepted by `qgradlib.train.optimize.minimize_expectation`.
    steps : int or dict
        Steps per method (a dict maps method -> steps); for "rotosolve" a step is a sweep.
    seed : int
        Seed of every run (each method gets its own generator made from it).
    shots_per_execution : int
        The budget at which executions are priced in shots.
    options : dict, optional
        Method -> dict of options for that method.
    exact : bool
        Also compute the exact ground energy (up to 16 qubits).
    progress : bool or None
        Progress bars (off by default here).

    Returns
    -------
    Comparison
    """
    names = tuple(methods) if not isinstance(methods, str) else (methods,)
    if not names:
        raise ValueError("methods must name at least one method")
    for m in names:
        if m not in METHODS:
            raise ValueError(f"methods must be taken from {METHODS}; got {m!r}")
    if len(set(names)) != len(names):
        raise ValueError(f"methods must not repeat; got {names}")
    if isinstance(shots_per_execution, bool) or not isinstance(shots_per_execution, (int, np.integer)) \
            or shots_per_execution < 1:
        raise ValueError(f"shots_per_execution must be a positive int; got {shots_per_execution!r}")
    options = {} if options is None else dict(options)
    unknown = set(options) - set(names)
    if unknown:
        raise ValueError(f"options name methods that are not compared: {sorted(unknown)}")
    per_steps = steps if isinstance(steps, dict) else {m: steps for m in names}
    missing = set(names) - set(per_steps)
    if missing:
        raise ValueError(f"steps gives no count for {sorted(missing)}")
    results = {}
    for m in names:
        results[m] = minimize_expectation(circuit, observable, theta0, method=m, steps=per_steps[m],
                                          seed=seed, progress=progress, **options.get(m, {}))
    first = results[names[0]]
    return Comparison(
        results=results,
        energies={m: float(r.fun) for m, r in results.items()},
        executions={m: int(r.executions) for m, r in results.items()},
        shots={m: int(r.executions) * int(shots_per_execution) for m, r in results.items()},
        shots_per_execution=int(shots_per_execution),
        ground_energy=ground_energy(observable) if exact else None,
        start_energy=float(first.history["cost"][0]))
