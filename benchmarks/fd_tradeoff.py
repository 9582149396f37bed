"""Finite differences: truncation error against shot noise, as a markdown table.

The central difference ``(f(a + h) - f(a - h)) / (2 h)`` has a truncation error of about
``h**2 |f'''| / 6``; with ``N`` shots per evaluation each value carries noise of standard
deviation ``sigma / sqrt(N)``, so the estimate carries ``sigma / (h sqrt(2 N))``. Small steps
are exact without shots and hopeless with them. The table measures the root-mean-square
error of the gradient over repeated estimates (fixed seeds), next to the parameter-shift rule
with the same shots, which has no truncation error and no 1/h.

Usage::

    python benchmarks/fd_tradeoff.py            # print the table, rewrite it in docs/derivatives.md
    python benchmarks/fd_tradeoff.py --no-write # print only

All numbers are from simulation (sampled shots), not from a device.
"""
from __future__ import annotations

import argparse
import pathlib
import sys

import numpy as np
from autograd import grad

import qgradlib as qg

STEPS = (0.5, 0.1, 0.01, 1e-3, 1e-5)
SHOTS = (None, 100, 10_000)
REPEATS = 100
try:                       # run as a script (python benchmarks/...py) or as a module
    from doc_tables import rewrite_block
except ImportError:        # pragma: no cover
    from benchmarks.doc_tables import rewrite_block

DOC = pathlib.Path(__file__).resolve().parents[1] / "docs" / "derivatives.md"
START, END = "<!-- fd-table start -->", "<!-- fd-table end -->"


def scenario():
    """Two qubits: a tilt on qubit 0, an entangler, a tilt on qubit 1; measure ZZ."""
    c = qg.Circuit(2).ry(0).cnot(0, 1).rx(1)
    return c, qg.Observable({"ZZ": 1.0}), np.array([0.7, 0.4])


def rms_error(method, shots, step=None, seed=0):
    c, H, theta = scenario()
    exact = grad(lambda t: qg.expect(c, H, t, gradient="adjoint"))(theta)
    kw = {"gradient": method}
    if step is not None:
        kw["step"] = step
    if shots is None:
        g = grad(lambda t: qg.expect(c, H, t, **kw))(theta)
        return float(np.sqrt(np.mean((g - exact) ** 2)))
    rng = np.random.default_rng(seed)
    errs = []
    for _ in range(REPEATS):
        g = grad(lambda t: qg.expect(c, H, t, shots=shots, seed=rng, **kw))(theta)
        errs.append(g - exact)
    return float(np.sqrt(np.mean(np.square(errs))))


def table() -> str:
    head = "| step h | " + " | ".join("exact values" if s is None else f"{s:,} shots" for s in SHOTS) + " |"
    lines = [head, "|" + " --- |" * (len(SHOTS) + 1)]
    for h in STEPS:
        cells = [f"{rms_error('difference', s, h, seed=k):.1e}" for k, s in enumerate(SHOTS)]
        lines.append(f"| central FD, {h:g} | " + " | ".join(cells) + " |")
    cells = [f"{rms_error('shift', s, seed=10 + k):.1e}" for k, s in enumerate(SHOTS)]
    lines.append("| shift rule | " + " | ".join(cells) + " |")
    note = (f"RMS error of the gradient of <ZZ> after RY, CNOT, RX at theta = (0.7, 0.4), over "
            f"{REPEATS} estimates per cell with shots (seeded); simulated, not device data.")
    return "\n".join(lines) + "\n\n" + note + "\n"


def write(text: str, path=DOC) -> None:
    rewrite_block(path, START, END, text)


def main(argv=None):
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--no-write", action="store_true", help="print only; leave the docs alone")
    args = p.parse_args(argv)
    text = table()
    print(text)
    if not args.no_write:
        write(text)
        print(f"written to {DOC}", file=sys.stderr)


if __name__ == "__main__":
    main()
