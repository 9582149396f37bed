"""Gate fusion never changes a state beyond rounding, and it does merge where it should.

Fused and unfused runs are compared with each other and with an independent dense
simulation (numpy.kron of every gate's full matrix, generator gates by scipy.linalg.expm).
"""
import numpy as np
import pytest
import scipy.linalg
from hypothesis import given, strategies as st

import qgradlib as qg
from autograd import grad
from qgradlib.engine import sides
from qgradlib.engine.program import compile_program
from qgradlib.engine.statevector import run
from qgradlib.rules.plans import first_order_points

ONE = ["h", "x", "y", "z", "s", "t", "sx", "rx", "ry", "rz", "phase"]
TWO = ["cnot", "cz", "swap", "crx", "cry", "crz", "cphase", "rxx", "ryy", "rzz"]
PULSE = qg.Gate.from_hamiltonian("pulse", drift=np.array([[0.3, 0.2], [0.2, -0.1]]), drive="X")


@st.composite
def circuits(draw, max_n=6, pulses=False):
    n = draw(st.integers(1, max_n))
    c = qg.Circuit(n)
    for _ in range(draw(st.integers(1, 25))):
        pick = draw(st.integers(0, 9))
        if n >= 2 and pick < 4:
            a, b = draw(st.permutations(range(n)))[:2]
            getattr(c, draw(st.sampled_from(TWO)))(a, b)
        elif pulses and pick == 9:
            c.add(PULSE, draw(st.integers(0, n - 1)))
        else:
            name = draw(st.sampled_from(ONE))
            q = draw(st.integers(0, n - 1))
            if name in ("rx", "ry", "rz", "phase") and draw(st.booleans()):
                getattr(c, name)(q, angle=draw(st.floats(-3, 3)))
            else:
                getattr(c, name)(q)
    return c


def _phi(c, seed, B, same):
    rng = np.random.default_rng(seed)
    theta = rng.normal(size=(B, c.n_params))
    if same:
        theta[:] = theta[0]
    return np.atleast_2d(c.angles(theta))


def _full(mat, qubits, n):
    """Dense 2**n matrix of a gate on ``qubits`` (independent of the engine's kernels)."""
    k = len(qubits)
    rest = [q for q in range(n) if q not in qubits]
    big = np.kron(mat, np.eye(2 ** (n - k)))
    order = list(qubits) + rest
    t = big.reshape((2,) * (2 * n))
    inv = [order.index(q) for q in range(n)]
    return t.transpose(inv + [n + i for i in inv]).reshape(2 ** n, 2 ** n)


def dense_reference(c, phi_row):
    n = c.n_qubits
    psi = np.zeros(2 ** n, dtype=complex)
    psi[0] = 1
    col = 0
    for op in c.operations:
        g = op.gate
        if g.parametric:
            a = phi_row[col]
            col += 1
            u = scipy.linalg.expm(-1j * a * g.generator) if g.kind == "generator" else g.matrix(a)
        else:
            u = g.unitary
        psi = _full(u, op.qubits, n) @ psi
    return psi


@given(circuits(), st.integers(0, 2 ** 31), st.integers(1, 3), st.booleans())
def test_fused_equals_unfused_and_dense_reference(c, seed, B, same):
    phi = _phi(c, seed, B, same)
    fused = run(c, phi, fuse=True)
    plain = run(c, phi, fuse=False)
    assert np.max(np.abs(fused - plain)) <= 1e-12
    # reference: scipy.linalg.expm of each generator and numpy.kron full matrices
    assert np.allclose(fused[-1], dense_reference(c, phi[-1]), atol=1e-10)


@given(circuits(max_n=4, pulses=True), st.integers(0, 2 ** 31))
def test_fusion_respects_inserted_rotations_of_hamiltonian_gates(c, seed):
    phi = _phi(c, seed, 1, True)
    cols = [k for k, op in enumerate(c.parametric_operations) if op.param is not None]
    points, ins, _, _ = first_order_points(c, phi, None, cols)
    points = np.asarray(points)
    if points.shape[0] == 0:
        return
    fused = run(c, points, ins, fuse=True)
    plain = run(c, points, ins, fuse=False)
    assert np.max(np.abs(fused - plain)) <= 1e-12


def test_the_fuse_option_switches_fusion_without_changing_results():
    c = qg.Circuit(3).h(0).ry(0).rz(0).cnot(0, 1).ry(1).h(2).cz(1, 2)
    theta = np.array([0.3, 0.4, 0.5])
    H = qg.Observable({"ZZI": 1.0, "IXY": 0.5})
    assert np.max(np.abs(qg.state(c, theta, fuse=True) - qg.state(c, theta, fuse=False))) <= 1e-12
    assert abs(qg.expect(c, H, theta, fuse=True) - qg.expect(c, H, theta, fuse=False)) <= 1e-12
    g_on = grad(lambda t: qg.expect(c, H, t, gradient="adjoint"))(theta)
    g_off = grad(lambda t: qg.expect(c, H, t, gradient="adjoint", fuse=False))(theta)
    assert np.max(np.abs(g_on - g_off)) <= 1e-12
    with pytest.raises(TypeError, match="fuse"):
        qg.expect(c, H, theta, fuse="no")


def test_runs_on_one_qubit_become_one_step_and_absorb_into_two_qubit_gates():
    c = qg.Circuit(2).h(0).rz(0).ry(0).ry(1).cnot(0, 1).rx(1)
    prog = compile_program(c, fuse=True)
    assert len(prog.steps) == 1 and prog.steps[0].kind == "dense"
    assert len(compile_program(c, fuse=False).steps) == 6


def test_hamiltonian_gates_and_kept_columns_are_never_fused():
    c = qg.Circuit(2).h(0).add(PULSE, 0).ry(0).ry(1).cz(0, 1)
    prog = compile_program(c, fuse=True, solo_columns=frozenset({1}))
    solo = [s for s in prog.steps if s.kind == "solo"]
    assert [s.op.gate.name for s in solo] == ["pulse", "RY"]


def test_moved_fixed_angle_is_honoured():
    # a fixed angle's matrix is cached; a caller that passes another value must get it
    c = qg.Circuit(1).ry(0, angle=0.2).rx(0)
    phi = np.array([[0.9, 0.1]])
    expected = dense_reference(c, phi[0])
    assert np.allclose(run(c, phi)[0], expected, atol=1e-12)


class _Recorder:
    """Not a gate (no ``parametric``): the engine delegates to apply_states."""

    def __init__(self):
        self.calls = 0

    def apply_states(self, psi, n, qubits):
        self.calls += 1
        return -psi


def test_operations_that_are_not_gates_are_delegated_or_refused():
    c = qg.Circuit(2).h(0).ry(1)
    rec = _Recorder()
    c._ops.append(qg.Operation(rec, (0,)))
    c.rx(0)
    phi = np.atleast_2d(c.angles(np.array([0.3, 0.2])))
    ref = qg.Circuit(2).h(0).ry(1).rx(0)
    expected = -run(ref, phi)
    assert np.allclose(run(c, phi), expected, atol=1e-12) and rec.calls == 1

    class Opaque:
        pass

    c2 = qg.Circuit(1)
    c2._ops.append(qg.Operation(Opaque(), (0,)))
    with pytest.raises(ValueError, match="density-matrix path"):
        run(c2, np.zeros((1, 0)))


def test_run_keeps_two_buffers_whatever_the_length(no_scratch_pool, monkeypatch):
    # ping-pong buffers: peak traced memory does not grow with the number of gates (the gate
    # loop's; a few rows of a layered circuit may run as layers, within sides.ROW_BYTES)
    import tracemalloc

    monkeypatch.setattr(sides, "ROWS", 0)

    n = 12
    short = qg.Circuit(n)
    long = qg.Circuit(n)
    for q in range(n):
        short.ry(q)
    for _ in range(10):
        for q in range(n):
            long.ry(q)
            long.rx(q)
        for q in range(n - 1):
            long.cnot(q, q + 1)
    state = 16 * 2 ** n
    peaks = []
    for c in (short, long):
        phi = np.atleast_2d(c.angles(np.linspace(0, 1, c.n_params)))
        run(c, phi)
        tracemalloc.start()
        run(c, phi)
        peaks.append(tracemalloc.get_traced_memory()[1])
        tracemalloc.stop()
    assert peaks[1] <= 3.0 * state
    assert peaks[1] <= peaks[0] + 0.5 * state
