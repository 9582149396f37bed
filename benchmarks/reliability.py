"""The reliability table of docs/reliability.md: hostile cases, run, and what happened.

    python benchmarks/reliability.py              # run every case, rewrite the table
    python benchmarks/reliability.py --no-write   # run and print only (the docs test does this)

Each case is a small program a user could type. Its outcome column is written from what the
library actually did (the exception's type and whether its message names the argument, or
the number it returned beside the closed form); nothing in the table is typed in. A case whose
outcome is not the intended one is marked "NO" and fails the docs test.

The memory-guard cases run in a child process under an address-space limit
(``resource.setrlimit(RLIMIT_AS)``, Linux only) of the child's size plus 300 MiB: a refusal must
come from the guard (`StateTooLarge`) before any large allocation, never NumPy's MemoryError.
"""
from __future__ import annotations

import argparse
import copy
import json
import pathlib
import pickle
import subprocess
import sys
import textwrap

import numpy as np
from autograd import grad

ROOT = pathlib.Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

import qgradlib as qg  # noqa: E402
from qgradlib import curvature  # noqa: E402

START, END = "<!-- reliability-table start -->", "<!-- reliability-table end -->"
CASES = []


def case(area, text):
    """Register ``fn() -> (outcome, intended)`` under an area and a description."""
    def register(fn):
        CASES.append((area, text, fn))
        return fn
    return register


def refused(call, kind, names):
    """Outcome of a call that should raise ``kind`` with a message containing ``names``."""
    try:
        call()
    except Exception as err:  # noqa: BLE001 - the point is to see whatever comes out
        msg = " ".join(str(err).split())
        ok = isinstance(err, kind) and all(n in msg for n in names)
        short = msg
        if len(msg) > 90:           # the stretch around what the case asks the message to say
            i = max(0, msg.find(names[0]) - 40) if names and names[0] in msg else 0
            short = ("..." if i else "") + msg[i:i + 87] + ("..." if i + 87 < len(msg) else "")
        return f"{type(err).__name__}: “{short}”".replace("|", "\\|"), ok
    return "accepted (no error)", False


def close(value, want, label, tol=1e-12):
    ok = bool(np.all(np.abs(np.asarray(value) - np.asarray(want)) <= tol * max(1.0, np.max(np.abs(want)))))
    return f"{np.asarray(value).round(9).tolist()} ({label} {np.asarray(want).round(9).tolist()})", ok


# -- the memory guard ------------------------------------------------------------------------------
_CHILD = textwrap.dedent("""
    import json, resource, sys
    import numpy as np
    from autograd import grad
    import qgradlib as qg
    from qgradlib.engine import StateTooLarge

    def vmsize():
        for line in open("/proc/self/status"):
            if line.startswith("VmSize:"):
                return int(line.split()[1]) * 1024

    resource.setrlimit(resource.RLIMIT_AS, (vmsize() + 300 * 2 ** 20, resource.getrlimit(resource.RLIMIT_AS)[1]))

    def ry(n, m=1):
        c = qg.Circuit(n)
        for q in range(m):
            c.ry(q)
        return c

    def Z(n):
        return qg.Observable({"Z" + "I" * (n - 1): 1.0})

    noisy = lambda n: qg.Circuit(n).ry(0).noise(0, qg.channels.depolarizing(0.1))
    cases = {
        "forward": lambda: qg.expect(ry(25), Z(25), np.array([0.3])),
        "adjoint": lambda: grad(lambda t: qg.expect(ry(23), Z(23), t, gradient="adjoint"))(np.array([0.3])),
        "shift": lambda: grad(lambda t: qg.expect(ry(25, 2), Z(25), t))(np.array([0.3, 0.2])),
        "density": lambda: qg.expect(noisy(12), Z(12), np.array([0.3])),
        "fits": lambda: grad(lambda t: qg.expect(ry(22, 2), Z(22), t))(np.array([0.3, 0.2]))[0],
    }
    out = {}
    for name, fn in cases.items():
        try:
            out[name] = ["ok", float(np.sum(fn()))]
        except StateTooLarge as err:
            out[name] = ["StateTooLarge", "needs" in str(err) and "available" in str(err)]
        except MemoryError:
            out[name] = ["MemoryError", False]
    print(json.dumps(out))
""")
_LIMITED = {}


def _limited():
    if not _LIMITED:
        done = subprocess.run([sys.executable, "-c", _CHILD], capture_output=True, text=True,
                              timeout=600, cwd=ROOT)
        if done.returncode != 0:
            raise SystemExit(done.stderr)
        _LIMITED.update(json.loads(done.stdout.strip().splitlines()[-1]))
    return _LIMITED


def _guard(name):
    kind, said = _limited()[name]
    if kind == "StateTooLarge":
        return "refused before allocating: StateTooLarge naming bytes needed and available", bool(said)
    return f"{kind} (the guard let it through)", False


for _key, _text in [("forward", "forward pass of 25 qubits (one 512 MiB state, in place, does not fit)"),
                    ("adjoint", "adjoint gradient of 23 qubits (the value fits, its four states do not)"),
                    ("shift", "shift-rule gradient of 25 qubits"),
                    ("density", "density matrix of 12 qubits (noise channel)")]:
    case("memory guard under RLIMIT_AS", _text)(lambda _key=_key: _guard(_key))


@case("memory guard under RLIMIT_AS", "shift-rule gradient of 22 qubits, which fits in chunks")
def _fits():
    kind, value = _limited()["fits"]
    if kind != "ok":
        return f"{kind}", False
    return close(value, -np.sin(0.3), "closed form -sin 0.3 =", tol=1e-9)


# -- caches ----------------------------------------------------------------------------------------
@case("bounded caches", "200 programs kept apart by column, cache limit set to 1 MiB")
def _cache():
    from qgradlib.engine import program as programs
    c = qg.Circuit(6)
    for _ in range(20):
        for q in range(6):
            c.ry(q)
        for q in range(5):
            c.cnot(q, q + 1)
    old, programs.CACHE_BYTES = programs.CACHE_BYTES, 2 ** 20
    try:
        for j in range(200):
            programs.program(c, True, frozenset({j % c.n_params, (j * 7 + 3) % c.n_params}))
        info = programs.cache_info()
    finally:
        programs.CACHE_BYTES = old
    biggest = programs.nbytes(programs.program(c, True))
    ok = info["bytes"] <= 2 ** 20 + biggest and info["programs"] < 200
    return "held to the limit: the least recently used programs were dropped", ok


# -- numerics --------------------------------------------------------------------------------------
@case("numerics", "classical Fisher information of RY(θ) at θ = 1e-7, an outcome of probability 2.5e-15")
def _fisher():
    f = curvature.fisher_information(qg.Circuit(1).ry(0), np.array([1e-7]))
    # common practice: p0 = cos²(θ/2), p1 = sin²(θ/2) give (∂p)²/p summed = 1 for every θ ≠ 0
    return close(f[0, 0], 1.0, "closed form", tol=1e-9)


@case("numerics", "generator 1e-9·Z/2 (below any absolute threshold): its shift-rule derivative")
def _tiny():
    g = qg.Gate.from_generator("tiny", 1e-9 * np.diag([1.0, -1.0]) / 2)
    c, H = qg.Circuit(1).h(0).add(g, (0,)), qg.Observable({"X": 1.0})
    theta = np.array([0.7e9])
    shift = grad(lambda t: qg.expect(c, H, t))(theta)[0]
    # common practice: <X> = cos(1e-9 a), so d/da = -1e-9 sin(0.7)
    return close(shift * 1e9, -np.sin(0.7), "closed form (×1e9)", tol=1e-9)


@case("numerics", "generator 0.8·I (a global phase): its derivative")
def _phase():
    phase = qg.Gate.from_generator("phase", 0.8 * np.eye(2))
    c = qg.Circuit(1).ry(0).add(phase, (0,))
    g = grad(lambda t: qg.expect(c, qg.Observable({"Z": 1.0}), t))(np.array([0.4, 1.1]))
    return close(g, [-np.sin(0.4), 0.0], "closed form")


@case("numerics", "a two-term shift rule given to a gate with frequencies 1, 1.7, 2.7")
def _rule():
    from qgradlib.rules.shift_rules import ShiftRule
    return refused(lambda: qg.Gate.from_generator("hop", np.diag([0.0, 1.0, 2.7, 0.0]),
                                                  shift_rule=ShiftRule.two_term(1.0)),
                   ValueError, ["not exact", "frequencies"])


@case("numerics", "integer theta [2, 1] against float theta [2.0, 1.0], shift gradient")
def _ints():
    c = qg.Circuit(2).ry(0).rx(1).cnot(0, 1)
    H = qg.Observable({"ZZ": 1.0, "XI": 0.5})
    a = grad(lambda t: qg.expect(c, H, t))(np.array([2, 1]))
    b = grad(lambda t: qg.expect(c, H, t))(np.array([2.0, 1.0]))
    ok = np.array_equal(a, b)
    return ("the same gradient, bit for bit" if ok else "different gradients"), ok


# -- executors -------------------------------------------------------------------------------------
def _tampering(how):
    from concurrent.futures import Executor, Future

    class Tampering(Executor):
        _max_workers = 2

        def submit(self, fn, *args, **kwargs):
            fut = Future()
            if how == "hang":
                return fut
            start, sums, values = fn(*args, **kwargs)
            fut.set_result((start, sums, values[:-1]) if how == "shape"
                           else (start, sums[::-1], values[::-1]))
            return fut
    return Tampering()


def _executor_case(how, **kw):
    c = qg.Circuit(2).ry(0).cnot(0, 1).rx(1)
    H = qg.Observable({"ZZ": 1.0, "XI": 0.5})
    thetas = np.array([[0.1, 0.2], [0.3, 0.4], [0.5, 0.6], [0.7, 0.8]])
    return lambda: qg.expect(c, H, thetas, executor=_tampering(how), chunk=2, **kw)


case("executors", "a chunk comes back one row short")(
    lambda: refused(_executor_case("shape"), qg.ChunkError, ["came back"]))
case("executors", "a chunk comes back with its rows reordered")(
    lambda: refused(_executor_case("reorder"), qg.ChunkError, ["not the chunk's rows"]))
case("executors", "a worker never answers, timeout=0.5")(
    lambda: refused(_executor_case("hang", timeout=0.5), qg.ChunkError, ["did not finish", "timeout"]))


# -- small refusals --------------------------------------------------------------------------------
_C = qg.Circuit(1).ry(0)
_Z = qg.Observable({"Z": 1.0})

case("refusals", "shots with seed=-1")(
    lambda: refused(lambda: qg.estimate(_C, _Z, np.array([0.3]), shots=10, seed=-1), ValueError, ["seed"]))
@case("refusals", "a gradient audit of a circuit without parameters")
def _no_params():
    r = qg.check.gradients(qg.Circuit(1).h(0), _Z, np.zeros(0))
    ok = r.n_params == 0 and r.reference.shape == (0,) and r.ok()
    return f"an empty report ({r.n_params} parameters), no error from inside NumPy", ok


case("refusals", "gradient=np.array(['shift'])")(
    lambda: refused(lambda: qg.expect(_C, _Z, np.array([0.3]), gradient=np.array(["shift"])),
                    TypeError, ["gradient"]))
case("refusals", "theta of the wrong length")(
    lambda: refused(lambda: qg.expect(_C, _Z, np.array([0.3, 0.4])), ValueError, ["theta", "(1,)"]))


@case("refusals", "a function gate whose matrix changes size with the angle")
def _shape_changing():
    g = qg.Gate.from_function("grow", lambda a: np.eye(2 if a < 1 else 4), 1)
    return refused(lambda: qg.expect(qg.Circuit(1).add(g, 0), _Z, np.array([[0.5], [1.5]])),
                   ValueError, ["grow", "2x2"])


# -- the ledger ------------------------------------------------------------------------------------
@case("ledger", "`with book:` nested inside `with book:`")
def _nested():
    with qg.Ledger() as book:
        with book:
            qg.expect(_C, _Z, np.array([0.3]))
    ok = book.executions == 1
    return f"counted {book.executions} execution(s) for one", ok


@case("ledger", "a Ledger pickled and deep-copied after use")
def _pickled():
    with qg.Ledger() as book:
        qg.expect(_C, _Z, np.array([0.3]))
    a, b = pickle.loads(pickle.dumps(book)), copy.deepcopy(book)
    ok = a.executions == b.executions == book.executions == 1
    with b:
        qg.expect(_C, _Z, np.array([0.3]))
    ok = ok and b.executions == 2 and book.executions == 1
    return ("copies keep the counts and count on their own" if ok else "copies are not independent"), ok


def run_cases():
    rows = []
    for area, text, fn in CASES:
        outcome, ok = fn()
        rows.append((area, text, outcome, ok))
    return rows


def table(rows) -> str:
    lines = ["| area | case | what happened | as intended |", "|---|---|---|---|"]
    lines += [f"| {a} | {t} | {o} | {'yes' if ok else 'NO'} |" for a, t, o, ok in rows]
    return "\n".join(lines) + "\n"


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--no-write", action="store_true", help="print the table only")
    args = ap.parse_args(argv)
    rows = run_cases()
    text = table(rows)
    print(text, end="")
    if not args.no_write:
        try:
            from doc_tables import rewrite_block
        except ImportError:
            from benchmarks.doc_tables import rewrite_block
        rewrite_block(ROOT / "docs" / "reliability.md", START, END, text)
    return 0 if all(r[3] for r in rows) else 1


if __name__ == "__main__":
    raise SystemExit(main())
