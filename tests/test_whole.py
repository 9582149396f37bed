"""A few qubits as a chain of whole-register matrices (`qgradlib.engine.whole`) change only speed.

On up to four qubits a layered circuit runs as one matrix a layer with the fixed gates before
it folded in, its Pauli-rotation layers expanded in fixed terms, the derivatives gathered at
once, and one observable applied as its matrix. Values, states and derivatives are compared
with the dense simulator of tests/reference (numpy.kron of every gate's matrix, generator
gates by scipy.linalg.expm, derivatives by scipy.linalg.expm_frechet) and with
autograd's numerical check, on circuits with fixed gates before the first layer, between
layers and after the last, dense fixed runs (H), qubits without a gate in a layer, and no
parametric gate at all. A traced adjoint call of one observable is one round trip
(`whole.round_trip`: forward, backward and derivatives in one call), in real arithmetic when
the circuit, the observable and every ``-2i G`` are real; it is checked against the same
references, with leading fixed layers, idle qubits and repeated cotangents.
"""
from functools import reduce

import numpy as np
import pytest
from autograd import grad, make_vjp
from autograd.test_util import check_grads

import qgradlib as qg
from qgradlib.engine import sides, small, whole
from reference import circuit_state, dense_expectation, observable_dense, theta_gradient


def _framed(n, seed):
    """Fixed gates before, between and after layers; some qubits idle in a layer."""
    rng = np.random.default_rng(seed)
    c = qg.Circuit(n)
    c.h(0).x(n - 1)
    for layer in range(3):
        for q in range(n):
            if (q + layer) % 3 != 2 or n == 1:
                [c.ry, c.rx, c.rz][(q + 2 * layer) % 3](q)
        if n > 1:
            c.cnot(layer % n, (layer + 1) % n).cz(0, n - 1)
        c.h(n - 1).s(0)
    c.ry(0, angle=float(rng.uniform(-2, 2)))
    c.h(0)
    return c


def _obs(n):
    return qg.Observable({"Z" * n: 0.7, "X" + "I" * (n - 1): 0.5, "I" * (n - 1) + "Y": -0.3})


@pytest.mark.parametrize("n", [1, 2, 3, 4])
def test_folded_chain_equals_the_dense_reference(n):
    c = _framed(n, n)
    comp = sides.compiled(c)
    assert comp.a == 0 and comp.whole is not None and comp.whole[2] is not None
    theta = np.random.default_rng(10 + n).uniform(-3, 3, size=c.n_params)
    H = _obs(n)
    M = observable_dense(H.terms, n)
    A, b = c.angle_map()
    psi, kept = sides.run(c, A @ theta + b, keep=True)
    # reference: the dense simulator of tests/reference (numpy.kron, scipy.linalg.expm)
    assert np.max(np.abs(psi - circuit_state(c, theta))) <= 1e-13
    f = lambda t: qg.expect(c, H, t, gradient="adjoint")  # noqa: E731
    grad(f)(theta)                          # the general call keeps the lane
    lane = list(c.snapshot().__dict__["_memo_lanes"].values())[0]
    assert lane.layered and type(lane.pieces) is np.ndarray     # O as its matrix
    assert lane.trip is not None                # a traced call is one round trip
    assert abs(f(theta) - dense_expectation(circuit_state(c, theta), M)) <= 1e-12
    # reference: scipy.linalg.expm_frechet derivatives of the dense simulator
    assert np.max(np.abs(grad(f)(theta) - theta_gradient(c, theta, M))) <= 1e-11
    # the shift rule's batch is born from the kept run, whose factors are built on demand
    s = lambda t: qg.expect(c, H, t)  # noqa: E731
    grad(s)(theta)
    assert np.max(np.abs(grad(s)(theta) - theta_gradient(c, theta, M))) <= 1e-11


def test_gradient_from_a_later_layer_leaves_earlier_columns_zero():
    c = _framed(4, 7)
    comp = sides.compiled(c)
    phi = np.random.default_rng(4).uniform(-3, 3, size=comp.n_columns)
    psi, kept = sides.run(c, phi, keep=True)
    lam = observable_dense(_obs(4).terms, 4) @ psi
    full = sides.gradient(c, kept, lam)
    late = sides.gradient(c, kept, lam, first=2)
    before = comp.layer < 2
    assert np.all(late[before] == 0) and np.allclose(late[~before], full[~before], atol=1e-14)
    # reference: central differences of the values in the gate angles (common practice)
    O = observable_dense(_obs(4).terms, 4)
    E = lambda p: float(np.real(np.vdot(sides.run(c, p)[0], O @ sides.run(c, p)[0])))  # noqa: E731
    fd = np.array([(E(phi + 1e-6 * e) - E(phi - 1e-6 * e)) / 2e-6 for e in np.eye(phi.size)])
    assert np.max(np.abs(full - fd)) <= 1e-7


def test_a_circuit_without_parametric_gates_runs_its_fixed_gates():
    c = qg.Circuit(3).h(0).cnot(0, 1).s(1).h(2)
    psi, kept = sides.run(c, np.zeros(0), keep=True)
    # reference: the dense simulator of tests/reference
    assert np.allclose(psi, circuit_state(c, np.zeros(0)), atol=1e-15)
    assert sides.gradient(c, kept, psi).shape == (0,)


def test_expansion_refuses_what_would_be_large(monkeypatch):
    monkeypatch.setattr(whole, "EXPANSION_BYTES", 1024)
    c = _framed(4, 3)
    assert sides.compiled(c).whole[2] is None
    theta = np.linspace(-1.0, 1.3, c.n_params)
    H = _obs(4)
    f = lambda t: qg.expect(c, H, t, gradient="adjoint")  # noqa: E731
    # reference: autograd.test_util.check_grads (finite differences of the values)
    check_grads(f, modes=["rev"], order=1)(theta)
    M = observable_dense(H.terms, 4)
    assert np.max(np.abs(grad(f)(theta) - theta_gradient(c, theta, M))) <= 1e-11


@pytest.mark.parametrize("k", range(1, 8))
def test_krons_equal_numpy_kron(k):
    f = np.random.default_rng(k).normal(size=(3, k, 2, 2, 2)).view(complex)[..., 0]
    # reference: numpy.kron, factor 0 the most significant
    ref = np.array([reduce(np.kron, f[i]) for i in range(3)])
    assert np.max(np.abs(small.krons(f) - ref)) <= 1e-13 * max(1.0, np.abs(ref).max())


def _real_layers(n, fixed_first=False):
    """RY layers between CZ and CNOT chains, H and X: every matrix real. With ``fixed_first``
    the first layer's angles are fixed (no column of it is differentiated)."""
    c = qg.Circuit(n).h(0)
    for layer in range(3):
        for q in range(n):
            if layer == 0 and fixed_first:
                c.ry(q, angle=0.3 + 0.4 * q)
            elif (q + layer) % 4 != 3:
                c.ry(q)
        for q in range(n - 1):
            (c.cz if layer % 2 else c.cnot)(q, q + 1)
    return c.x(n - 1)


def _lane(c):
    return list(c.snapshot().__dict__["_memo_lanes"].values())[0]


@pytest.mark.parametrize("n", [2, 3, 4])
@pytest.mark.parametrize("fixed_first", [False, True])
def test_a_real_circuit_goes_round_in_real_arithmetic(n, fixed_first):
    c = _real_layers(n, fixed_first)
    H = qg.Observable({"Z" * n: 0.8, "X" + "I" * (n - 1): 0.5, "I" * (n - 1) + "Z": -0.3})
    theta = np.random.default_rng(30 + n).uniform(-3, 3, size=c.n_params)
    f = lambda t: qg.expect(c, H, t, gradient="adjoint")  # noqa: E731
    with qg.Ledger() as general:
        first = grad(f)(theta)              # the general path keeps the lane
    trip = _lane(c).trip
    assert trip.observable.dtype == np.float64 and trip.slopes.dtype == np.float64
    assert trip.first == (1 if fixed_first else 0)
    M = observable_dense(H.terms, n)
    with qg.Ledger() as book:
        again = grad(f)(theta)
    assert (book.circuits, book.executions) == (general.circuits, general.executions) == (
        1, 2)                               # one circuit, its two settings (Z and X)
    # reference: scipy.linalg.expm_frechet derivatives of the dense simulator
    assert np.max(np.abs(again - theta_gradient(c, theta, M))) <= 1e-12
    assert np.max(np.abs(again - first)) <= 1e-13
    assert abs(f(theta) - dense_expectation(circuit_state(c, theta), M)) <= 1e-13
    # reference: autograd.test_util.check_grads (finite differences of the values)
    check_grads(f, modes=["rev"], order=1)(theta)


def test_a_complex_observable_keeps_the_round_trip_complex():
    c = _real_layers(3)
    H = qg.Observable({"ZZZ": 0.8, "YIY": 0.5, "IXY": 0.25})       # a Y once: imaginary
    theta = np.linspace(-2.0, 2.5, c.n_params)
    f = lambda t: qg.expect(c, H, t, gradient="adjoint")  # noqa: E731
    grad(f)(theta)
    assert _lane(c).trip.observable.dtype == complex
    # reference: scipy.linalg.expm_frechet derivatives of the dense simulator
    M = observable_dense(H.terms, 3)
    assert np.max(np.abs(grad(f)(theta) - theta_gradient(c, theta, M))) <= 1e-12


def test_the_round_trip_scales_by_every_cotangent_it_is_given():
    c = _framed(3, 5)
    H = _obs(3)
    theta = np.linspace(-1.5, 1.0, c.n_params)
    f = lambda t: qg.expect(c, H, t, gradient="adjoint")  # noqa: E731
    grad(f)(theta)
    assert _lane(c).trip is not None
    vjp, value = make_vjp(f)(theta)
    M = observable_dense(H.terms, 3)
    # reference: scipy.linalg.expm_frechet derivatives of the dense simulator
    ref = theta_gradient(c, theta, M)
    for g in (2.0, -0.5, 1.0):              # the derivatives held are never scaled in place
        assert np.max(np.abs(vjp(g) - g * ref)) <= 1e-12
    assert abs(value - dense_expectation(circuit_state(c, theta), M)) <= 1e-13


def test_no_round_trip_without_a_column_to_differentiate_or_for_shifts():
    c = qg.Circuit(2).ry(0, angle=0.4).cz(0, 1).ry(1, angle=-0.2)
    Z = qg.Observable({"ZZ": 1.0})
    with pytest.warns(UserWarning, match="independent"):        # autograd's: no parameter
        grad(lambda t: qg.expect(c, Z, t, gradient="adjoint"))(np.zeros(0))
    assert _lane(c).trip is None            # first is past the last layer
    d = _real_layers(2)
    theta = np.linspace(0.1, 0.9, d.n_params)
    s = lambda t: qg.expect(d, Z, t)  # noqa: E731
    grad(s)(theta)
    assert _lane(d).trip is None            # the shift rule's lane runs its own plan
    # reference: scipy.linalg.expm_frechet derivatives of the dense simulator
    M = observable_dense(Z.terms, 2)
    assert np.max(np.abs(grad(s)(theta) - theta_gradient(d, theta, M))) <= 1e-12
