"""The ``qgradlib`` command: ``qgradlib demo`` runs the bench ring R6 scenario end to end."""
from __future__ import annotations

import argparse
import sys

import numpy as np

from . import __version__

CAUTION = ("All figures below are simulated: exact statevector values, or simulated shot noise. "
           "They are not device measurements.")


def _rule(title):
    return f"\n-- {title} " + "-" * max(0, 66 - len(title))


def demo(args) -> int:
    from . import expect
    from .demo import bench_ring

    sc = bench_ring(args.qubits, args.layers, args.seed)
    print(f"qgradlib {__version__} demo: the {sc.name}")
    print(sc.story)
    print(CAUTION)
    e0 = sc.ground_energy()
    print(_rule("expectation values"))
    print(f"circuit: {sc.circuit.n_qubits} qubits, {len(sc.circuit)} operations, "
          f"{sc.circuit.n_params} parameters")
    print(f"exact ground energy (scipy eigsh): {e0: .6f}")
    points = {"all zero": np.zeros(sc.circuit.n_params),
              "starting point": sc.theta0,
              "all pi/2": np.full(sc.circuit.n_params, np.pi / 2)}
    print(f"{'parameter point':<18}{'energy':>12}{'above ground':>15}")
    for label, theta in points.items():
        e = float(expect(sc.circuit, sc.hamiltonian, theta))
        print(f"{label:<18}{e:>12.6f}{e - e0:>15.6f}")
    for section in _SECTIONS:
        section(sc, args)
    return 0


def audit(sc, args):
    from .check import audit as check

    print(_rule("gradient audit at the starting point"))
    print(check.gradients(sc.circuit, sc.hamiltonian, sc.theta0))


def ledger(sc, args):
    from autograd import grad

    from . import Ledger, expect

    print(_rule("ledger: one shift-rule gradient"))
    with Ledger() as book:
        grad(lambda t: expect(sc.circuit, sc.hamiltonian, t))(sc.theta0)
    print(book.summary())


def shots_and_noise(sc, args):
    from autograd import grad

    from . import estimate_gradient, expect

    print(_rule(f"gradient at {sc.shots} shots per setting, and under noise"))
    est = estimate_gradient(sc.circuit, sc.hamiltonian, sc.theta0, shots=sc.shots, seed=args.seed)
    exact = grad(lambda t: expect(sc.circuit, sc.hamiltonian, t))(sc.theta0)
    noisy = grad(lambda t: expect(sc.noisy_circuit, sc.hamiltonian, t))(sc.theta0)
    print(f"{'d/dtheta':<10}{'exact':>11}{'shot estimate':>16}{'std error':>11}"
          f"{f'exact, {sc.noise:.0%} depol.':>22}")
    for k in range(min(6, sc.circuit.n_params)):
        print(f"[{k}]{'':<7}{exact[k]:>11.5f}{est.gradient[k]:>16.5f}{est.standard_error[k]:>11.5f}"
              f"{noisy[k]:>22.5f}")
    if sc.circuit.n_params > 6:
        print(f"... ({sc.circuit.n_params - 6} more parameters)")
    z = np.abs(est.gradient - exact) / est.standard_error
    print(f"shot estimate: {est.executions} executions, {est.shots} shots; "
          f"{np.mean(z < 2):.0%} of components within 2 standard errors of exact")
    print(f"noise shrinks the gradient: |noisy| / |exact| = "
          f"{np.linalg.norm(noisy) / np.linalg.norm(exact):.3f}")


def training(sc, args):
    from .train.workflows import compare_training

    print(_rule("training: Adam and damped Newton side by side"))
    cmp = compare_training(sc.circuit, sc.hamiltonian, sc.theta0, methods=("adam", "newton"),
                           steps=args.steps, seed=args.seed, shots_per_execution=sc.shots,
                           options={"adam": {"rate": 0.1}})
    print(cmp.summary())
    sc_best = min(cmp.results, key=lambda m: cmp.energies[m])
    args.best = (sc_best, cmp.results[sc_best].x)
    if args.plot is None:
        return
    try:
        from .plot import training as plot_training
    except ImportError:
        print("(matplotlib is not installed: no training plot; pip install \".[plot]\")")
        return
    plot_training(cmp.results, args.plot, title=f"{sc.name}: training")
    print(f"training plot written to {args.plot}")


def curvature_at_best(sc, args):
    from . import Ledger
    from . import curvature

    name, x = args.best
    print(_rule(f"curvature at the best point (from {name})"))
    with Ledger() as book:
        r = curvature.hessian(sc.circuit, sc.hamiltonian, x)
    ev = np.linalg.eigvalsh(r.hessian)
    print(f"energy {r.value:.8f}, gradient norm {np.linalg.norm(r.gradient):.2e}")
    print("Hessian eigenvalues: " + " ".join(f"{v:.4f}" for v in ev))
    tol = 1e-6 * max(1.0, np.abs(ev).max())
    if ev.min() > tol:
        verdict = "all positive: a strict local minimum"
    elif ev.min() > -tol:
        verdict = "none negative, some flat: a minimum along a valley"
    else:
        verdict = "a negative eigenvalue: a saddle, not a minimum"
    print(verdict)
    settings = r.executions // book.circuits
    print(f"cost of this Hessian on a device: {r.executions} executions "
          f"({book.circuits} distinct circuits x {settings} measurement settings), "
          f"{r.executions * sc.shots:,} shots at {sc.shots} per execution")


def shot_training(sc, args):
    from .train.optimize import minimize_expectation

    print(_rule(f"the same Adam run under shots: {sc.shots} per setting, as on a device"))
    r = minimize_expectation(sc.circuit, sc.hamiltonian, sc.theta0, method="adam",
                             steps=args.steps, shots=sc.shots, seed=args.seed, rate=0.1)
    print(f"reported energy {r.fun:.4f} +- {r.fun_error:.4f} (a fresh estimate at the returned "
          "point, as a device would report it)")
    print(f"exact energy there {r.fun_exact:.6f}, {r.fun_exact - sc.ground_energy():.2e} above "
          "ground (simulator only: a device never sees it)")
    print(f"shots drawn: {r.shots:,} in {r.executions:,} executions")


_SECTIONS = [audit, ledger, shots_and_noise, training, curvature_at_best, shot_training]


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(prog="qgradlib", description=(
        "Parameter-shift gradients, curvature and device-cost accounting for variational circuits."))
    parser.add_argument("--version", action="version", version=f"qgradlib {__version__}")
    sub = parser.add_subparsers(dest="command", required=True)
    d = sub.add_parser("demo", help="run the bench ring R6 scenario (well under a minute)")
    d.add_argument("--qubits", type=int, default=6, help="ring size (default 6)")
    d.add_argument("--layers", type=int, default=None, help="circuit layers (default qubits // 2)")
    d.add_argument("--steps", type=int, default=100, help="training steps per method (default 100)")
    d.add_argument("--seed", type=int, default=7, help="seed for the starting point and shots")
    d.add_argument("--plot", default=None, metavar="PATH",
                   help="write the training plot to PATH (needs matplotlib); no file is "
                        "written unless asked")
    args = parser.parse_args(argv)
    if args.command == "demo":
        if args.qubits < 2 or (args.layers is not None and args.layers < 1) or args.steps < 1:
            parser.error("--qubits must be at least 2, --layers and --steps at least 1")
        return demo(args)
    return 2  # pragma: no cover


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
