"""Layers as one left and one right product (`qgradlib.engine.sides`) change only speed.

The layered run and its adjoint gradient are compared with the dense simulator of
tests/reference (numpy.kron of every gate's matrix, generator gates by scipy.linalg.expm,
derivatives by scipy.linalg.expm_frechet), with the gate-at-a-time engine (``fuse=False``)
and with autograd's numerical check (`autograd.test_util.check_grads`), on circuits that
exercise every kind of step: Pauli rotations, a one-qubit generator gate that is not one
(the general matrix path), shared, scaled and fixed angles, constant diagonals, permutations,
dense runs (up to six qubits) and fixed gates one at a time (above).
"""
import numpy as np
import pytest
from autograd import grad, hessian, jacobian
from autograd.test_util import check_grads

import qgradlib as qg
from qgradlib.engine import sides
from qgradlib.evaluation import lean
from derivative_cases import rotation_layers
from reference import circuit_state, dense_expectation, observable_dense, theta_gradient

# a one-qubit generator with eigenvalues 0.3 and -1.1: not a Pauli rotation (no I/4 square)
_ODD = qg.Gate.from_generator("tilted", generator=np.array([[0.1, 0.4 - 0.3j], [0.4 + 0.3j, -0.9]]))


def _circuit(n, seed=0):
    rng = np.random.default_rng(seed)
    c = qg.Circuit(n)
    for layer in range(3):
        for q in range(n):
            [c.ry, c.rx, c.rz][(q + layer) % 3](q)
        if n > 1:
            for q in range(n - 1):
                (c.cz if layer % 2 else c.cnot)(q, q + 1)
            c.h(n - 1)
    c.ry(0, param=1 % c.n_params, scale=-0.5, offset=0.2)      # a shared, scaled angle
    c.rx(n - 1, angle=float(rng.uniform(-2, 2)))                 # a fixed angle
    c.ry(0)                                                      # a second gate on qubit 0
    return c


def _obs(n):
    return qg.Observable({"Z" * n: 1.0, "X" + "I" * (n - 1): 0.5, "I" * (n - 1) + "Y": -0.3})


@pytest.mark.parametrize("n", [1, 2, 3, 5, 6, 7, 10, 12])
def test_layered_run_and_gradient_equal_the_dense_reference(n):
    c = _circuit(n, n)
    theta = np.random.default_rng(n).uniform(-3, 3, size=c.n_params)
    comp = sides.compiled(c)
    assert sides.eligible(c) and comp.n_layers >= 3
    H = _obs(n)
    M = observable_dense(H.terms, n) if n <= 7 else None
    f = lambda t: qg.expect(c, H, t, gradient="adjoint")  # noqa: E731
    grad(f)(theta)                       # the general call keeps the lane
    lane = list(c.snapshot().__dict__["_memo_lanes"].values())[0]
    assert lane.layered
    g = grad(f)(theta)
    if n <= 7:
        # reference: the dense simulator of tests/reference (scipy.linalg.expm-built gates;
        # too slow on 10 qubits, where the gate-at-a-time engine and check_grads serve)
        assert abs(f(theta) - dense_expectation(circuit_state(c, theta), M)) <= 1e-12
        assert np.max(np.abs(g - theta_gradient(c, theta, M))) <= 1e-11
    else:
        # reference: autograd.test_util.check_grads (finite differences of the values)
        check_grads(f, modes=["rev"], order=1)(theta)
    general = grad(lambda t: qg.expect(c, H, t, gradient="adjoint", fuse=False))(theta)
    assert np.max(np.abs(g - general)) <= 1e-12


def test_a_generator_gate_that_is_no_pauli_rotation_takes_the_general_matrices():
    c = qg.Circuit(3)
    for q in range(3):
        c.add(_ODD, (q,))
    c.cnot(0, 1).cz(1, 2)
    for q in range(3):
        c.ry(q)
    assert sides.compiled(c).pauli is None
    H = _obs(3)
    theta = np.linspace(-1.2, 1.4, c.n_params)
    f = lambda t: qg.expect(c, H, t, gradient="adjoint")  # noqa: E731
    f(theta)
    # reference: autograd.test_util.check_grads (finite differences of the values)
    check_grads(f, modes=["rev"], order=1)(theta)
    M = observable_dense(H.terms, 3)
    assert np.max(np.abs(grad(f)(theta) - theta_gradient(c, theta, M))) <= 1e-11


@pytest.mark.parametrize("one_side", [0, 4])
def test_run_keeps_each_layer_output_and_the_gradient_stops_at_first(one_side, monkeypatch):
    monkeypatch.setattr(sides, "ONE_SIDE_QUBITS", one_side)
    c = _circuit(4, 2)
    comp = sides.compiled(c)
    phi = np.random.default_rng(3).uniform(-3, 3, size=comp.n_columns)
    psi, kept = sides.run(c, phi, keep=True)
    plain, none = sides.run(c, phi)
    assert none is None and np.array_equal(psi, plain)
    DA = 2 ** comp.a
    assert kept.states.shape == (comp.n_layers, DA, 16 // DA)
    lam = observable_dense(_obs(4).terms, 4) @ psi
    full = sides.gradient(c, kept, lam)
    late = sides.gradient(c, kept, lam, first=2)
    before = comp.layer < 2
    assert np.all(late[before] == 0) and np.allclose(late[~before], full[~before], atol=1e-14)
    # the caller's bra is not touched
    assert np.array_equal(lam, observable_dense(_obs(4).terms, 4) @ psi)


def test_only_one_qubit_parametric_gates_make_a_layered_circuit():
    assert not sides.eligible(qg.Circuit(3).ry(0).rzz(0, 1))
    assert not sides.eligible(qg.Circuit(sides.SIDE_QUBITS + 1).ry(0))
    assert sides.eligible(qg.Circuit(3).ry(0).cnot(0, 1).rz(2))


def test_lane_keeps_to_the_general_pass_when_the_kept_states_would_be_large(monkeypatch):
    monkeypatch.setattr(sides, "KEEP_BYTES", 64)
    c = _circuit(4, 5)
    H = _obs(4)
    theta = np.linspace(0.1, 1.0, c.n_params)
    f = lambda t: qg.expect(c, H, t, gradient="adjoint")  # noqa: E731
    grad(f)(theta)
    lane = list(c.snapshot().__dict__["_memo_lanes"].values())[0]
    assert not lane.layered
    assert np.max(np.abs(grad(f)(theta) - theta_gradient(c, theta, observable_dense(H.terms, 4)))) <= 1e-11


def test_layered_lane_counts_jacobians_and_nested_derivatives():
    c = qg.Circuit(3).ry(0).rx(1).ry(2).cz(0, 1).cnot(1, 2).ry(0).rz(1)
    H, K = _obs(3), qg.Observable({"ZZI": 1.0})
    theta = np.array([0.3, -0.7, 1.1, 0.4, -0.2])
    f = lambda t: qg.expect(c, H, t, gradient="adjoint")  # noqa: E731
    with qg.Ledger() as general:
        grad(f)(theta)
    with qg.Ledger() as laned:
        g = grad(f)(theta)
    # common practice: the adjoint method runs the circuit once
    assert general.circuits == laned.circuits == 1
    both = lambda t: qg.expect(c, [H, K], t, gradient="adjoint")  # noqa: E731
    jacobian(both)(theta)
    J = jacobian(both)(theta)
    assert np.allclose(J[0], g, atol=1e-12)
    assert np.max(np.abs(J[1] - theta_gradient(c, theta, observable_dense(K.terms, 3)))) <= 1e-11
    # a derivative of the gradient (the VJP's own derivative in its cotangent) still works:
    # reference: autograd.test_util.check_grads, second order
    check_grads(f, modes=["rev"], order=2)(theta)
    h = hessian(f)(theta)
    assert np.allclose(h, h.T, atol=1e-10)


def test_layered_lane_guards_the_states_it_keeps(monkeypatch):
    c = qg.Circuit(4).ry(0).ry(1).cz(0, 1).ry(0)
    H = _obs(4)
    theta = np.array([0.1, 0.2, 0.3])
    f = lambda t: qg.expect(c, H, t, gradient="adjoint")  # noqa: E731
    grad(f)(theta)
    lane = list(c.snapshot().__dict__["_memo_lanes"].values())[0]
    assert lane.layered and lane.forward_bytes < lane.kept_bytes
    # with memory for a value but not for the kept states, the value passes and the
    # gradient is refused with a message that names what it keeps
    monkeypatch.setattr(lean.memory, "recent_available", lambda nbytes=0: lane.kept_bytes - 1)
    monkeypatch.setattr(lean.memory, "limits", lambda: {})
    assert abs(f(theta) - qg.expect(c, H, theta, fuse=False)) <= 1e-12
    with pytest.raises(lean.memory.StateTooLarge, match="kept"):
        grad(f)(theta)


def test_born_batches_in_two_threads_equal_the_serial_ones():
    # each call takes its own workspace from the circuit's pool (common practice: NumPy
    # releases the GIL, so two threads really do overlap here)
    from concurrent.futures import ThreadPoolExecutor
    c = qg.Circuit(6)
    for layer in range(3):
        for q in range(6):
            (c.ry if (q + layer) % 2 else c.rx)(q)
        for q in range(5):
            c.cz(q, q + 1)
    comp = sides.compiled(c)
    rng = np.random.default_rng(4)
    refs = rng.uniform(-3, 3, size=(8, comp.n_columns))
    cols = np.arange(comp.n_columns)
    serial = [sides.born_finals(c, r, cols, r + 0.7) for r in refs]
    with ThreadPoolExecutor(2) as ex:
        threaded = list(ex.map(lambda r: sides.born_finals(c, r, cols, r + 0.7), refs))
    for a, b in zip(serial, threaded):
        assert np.array_equal(a, b)
    # reference: the gate-at-a-time engine, row by row
    moved = refs[0][None] + 0.7 * np.eye(comp.n_columns)
    want = [qg.state(c, row, fuse=False) for row in np.vstack([refs[:1], moved])]
    assert np.max(np.abs(serial[0] - np.array(want))) <= 1e-12


@pytest.mark.parametrize("n", [6, 8])
def test_layer_factors_equal_the_kronecker_products_of_the_gates(n):
    # reference: numpy.kron of every gate's matrix expm(-i phi G) (scipy.linalg.expm);
    # on 3-qubit sides the factors come from fixed Kronecker terms, on 4-qubit sides from
    # the Kronecker build (`sides.TERM_QUBITS`)
    from scipy.linalg import expm

    c = _circuit(n, n)
    comp = sides.compiled(c)
    assert (comp.terms is not None) == (n // 2 <= sides.TERM_QUBITS)
    phi = np.random.default_rng(n).uniform(-3, 3, size=comp.n_columns)
    KA, KB = sides._factors(comp, phi)
    G = comp.n_columns

    def kron(slots):
        out = np.ones((1, 1))
        for s in slots:
            out = np.kron(out, np.eye(2) if s == G else expm(-1j * phi[s] * comp.generators[s]))
        return out

    for b in range(comp.n_layers):
        assert np.max(np.abs(KA[b] - kron(comp.slots_a[b]))) <= 1e-14
        assert np.max(np.abs(KB[b] - kron(comp.slots_b[b]))) <= 1e-14


@pytest.mark.parametrize("n", [3, 6])
def test_a_kept_run_resumed_from_an_earlier_one_equals_the_dense_reference(n, monkeypatch):
    # reference: the dense simulator of tests/reference (scipy.linalg.expm-built gates); on
    # 3 qubits the whole-register chain runs, on 6 the two sides
    c = rotation_layers(n)
    comp = sides.compiled(c)
    assert comp.n_layers == 3 and (comp.whole is not None) == (n <= sides.ONE_SIDE_QUBITS)
    theta = np.random.default_rng(n).uniform(-3, 3, size=c.n_params)    # phi = theta here
    sides.run(c, theta, keep=True)
    record = comp.picks["kept"]
    moved = theta.copy()
    moved[n + 1] += 0.7                     # a gate of the second layer
    calls = []
    if comp.whole is not None:
        forward = sides.whole.forward
        monkeypatch.setattr(sides.whole, "forward", lambda W, e, s, start=0: (
            calls.append(start), forward(W, e, s, start))[1])
    else:
        layer = sides._layer
        monkeypatch.setattr(sides, "_layer", lambda *a: (calls.append(1), layer(*a))[1])
    psi, kept = sides.run(c, moved, keep=True, resume=record)
    assert np.max(np.abs(psi - circuit_state(c, moved))) <= 1e-13
    # the first layer's output is the earlier run's, the later ones are the new angles'
    assert np.array_equal(kept.states[0], record[2].states[0])
    assert np.max(np.abs(kept.states[1] - record[2].states[1])) > 1e-3
    assert calls == ([1] if comp.whole is not None else [1, 1])     # layer 0 not run again
    g = sides.gradient(c, kept, observable_dense(_obs(n).terms, n) @ psi)
    assert np.max(np.abs(g - theta_gradient(c, moved, observable_dense(_obs(n).terms, n)))) <= 1e-11


@pytest.mark.parametrize("n", [3, 6, 10])
def test_a_few_rows_run_as_layers_and_more_take_the_gate_loop(n, monkeypatch):
    # reference: the dense simulator of tests/reference (scipy.linalg.expm-built gates)
    from qgradlib.engine import small, statevector

    c = _circuit(n, n)
    comp = sides.compiled(c)
    theta = np.random.default_rng(n).uniform(-3, 3, size=(sides.ROWS + 1, c.n_params))
    phi = np.array([c.angles(t) for t in theta])
    loops = []
    run = small.run
    monkeypatch.setattr(small, "run", lambda *a: (loops.append(a[1].shape[0]), run(*a))[1])
    # on 10 qubits the dense simulator is too slow for every row: there the gate-at-a-time
    # engine (fuse=False) serves, checked against it on the smaller registers
    want = (lambda b: circuit_state(c, theta[b])) if n <= 6 else (
        lambda b: qg.state(c, theta[b], fuse=False))
    for B in (1, sides.ROWS, sides.ROWS + 1):
        states = statevector.run(c, phi[:B])
        for b in range(B):
            assert np.max(np.abs(states[b] - want(b))) <= 1e-12
    assert loops == [sides.ROWS + 1]            # only the batch above ROWS took the gate loop
    # a circuit whose layered run would take more than ROW_BYTES runs in the gate loop
    monkeypatch.setattr(sides, "ROW_BYTES", 16 * 2 ** n)
    assert np.max(np.abs(statevector.run(c, phi[:1])[0] - want(0))) <= 1e-12
    assert loops == [sides.ROWS + 1, 1]
    monkeypatch.undo()
    # the memory guard's estimate covers what the layered rows allocate (tracemalloc sees
    # NumPy's arrays), room left for Python's own objects and for the iteration buffers of
    # a broadcast product (two of numpy.getbufsize() elements, whatever the state's size)
    import tracemalloc
    tracemalloc.start()
    statevector.run(c, phi[:2])
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert peak <= statevector.run_states(c, 2) * 16 * 2 ** n + 2 * np.getbufsize() * 16 + 4096
