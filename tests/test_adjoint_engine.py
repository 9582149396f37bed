"""The adjoint method of the engine against independent derivatives.

References: scipy.optimize.check_grad (finite differences of the value), autograd's
check_grads on the public function, and the shift rule (a different algorithm).
"""
import numpy as np
import pytest
import scipy.optimize
from autograd import grad, jacobian
from autograd.test_util import check_grads
from hypothesis import given, strategies as st

import qgradlib as qg
from qgradlib.engine import statevector
from qgradlib.engine.adjoint import adjoint_gradient
from qgradlib.engine.measure import apply_observable

try:
    from .test_fusion import circuits
except ImportError:  # tests/ is not a package
    from test_fusion import circuits


def _random_observable(n, rng, k=3):
    return qg.Observable({"".join(rng.choice(list("IXYZ"), n)): float(rng.normal()) for _ in range(k)})


@given(circuits(max_n=5, pulses=True), st.integers(0, 2 ** 31))
def test_adjoint_matches_shift_rule_with_fusion_on_and_off(c, seed):
    if c.n_params == 0:
        return
    rng = np.random.default_rng(seed)
    H = _random_observable(c.n_qubits, rng)
    theta = rng.normal(size=(2, c.n_params))
    shift = jacobian(lambda t: qg.expect(c, H, t))(theta)
    for fuse in (True, False):
        adj = jacobian(lambda t: qg.expect(c, H, t, gradient="adjoint", fuse=fuse))(theta)
        assert np.allclose(adj, shift, atol=1e-9)


def test_adjoint_against_scipy_check_grad():
    rng = np.random.default_rng(4)
    c = qg.Circuit(4)
    for _ in range(3):
        for q in range(4):
            c.ry(q).rz(q)
        for q in range(3):
            c.cnot(q, q + 1)
        c.rxx(0, 3).crx(1, 2)
    H = _random_observable(4, rng, 5)
    theta = rng.normal(size=c.n_params)
    f = lambda t: float(qg.expect(c, H, t))  # noqa: E731
    g = lambda t: grad(lambda s: qg.expect(c, H, s, gradient="adjoint"))(t)  # noqa: E731
    # reference: scipy.optimize.check_grad (forward differences, step ~1.5e-8)
    assert scipy.optimize.check_grad(f, g, theta) < 1e-5


def test_adjoint_probabilities_pass_autograd_check_grads():
    c = qg.Circuit(3).h(0).ry(1).cnot(0, 1).rx(2).cz(1, 2).ry(0)
    theta = np.array([0.3, -0.7, 1.1])
    # reference: autograd.test_util.check_grads (numerical VJP checks)
    check_grads(lambda t: qg.probabilities(c, t, qubits=[2, 0], gradient="adjoint"),
                modes=["rev"], order=1)(theta)


def test_reused_forward_states_give_the_same_gradient():
    rng = np.random.default_rng(5)
    c = qg.Circuit(3).ry(0).ry(1).ry(2).cz(0, 1).cz(1, 2).rx(0)
    H = _random_observable(3, rng)
    phi = np.atleast_2d(c.angles(rng.normal(size=c.n_params)))
    fresh = adjoint_gradient(c, phi, lambda psi: apply_observable(psi, 3, H))
    psi = statevector.run(c, phi)
    reused = adjoint_gradient(c, phi, lambda p: apply_observable(p, 3, H), psi=psi)
    assert np.max(np.abs(fresh - reused)) <= 1e-13


def test_adjoint_refuses_operations_that_are_not_gates():
    class Opaque:
        def apply_states(self, psi, n, qubits):
            return psi

    c = qg.Circuit(1).ry(0)
    c._ops.append(qg.Operation(Opaque(), (0,)))
    H = qg.Observable({"Z": 1.0})
    with pytest.raises(ValueError, match="cannot undo"):
        adjoint_gradient(c, np.array([[0.2]]), lambda p: apply_observable(p, 1, H))


def test_adjoint_memory_stays_near_four_states(no_scratch_pool):
    import tracemalloc

    n = 17
    c = qg.Circuit(n)
    for _ in range(1):
        for q in range(n):
            c.ry(q)
        for q in range(n - 1):
            c.cz(q, q + 1)
    H = qg.Observable({"Z" + "I" * (n - 1): 1.0, "I" + "X" * (n - 1): 0.5})
    theta = np.linspace(0, 1, c.n_params)
    f = lambda t: qg.expect(c, H, t, gradient="adjoint")  # noqa: E731
    grad(f)(theta)
    tracemalloc.start()
    grad(f)(theta)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert peak <= 4.6 * 16 * 2 ** n


@pytest.mark.parametrize("rows", [1, 2])
def test_layered_circuit_blocks_pairs_and_tail(rows):
    # layers of RY/RX on every qubit: commuting blocks, undone in pairs and a last-four block
    c = _chain_layers(7, 3, lambda layer: ["ry" if layer % 2 == 0 else "rx"], "cz")
    _adjoint_equals_shift(c, rows, seed=8)


def _chain_layers(n, layers, rotations, entangler, extra=lambda c: None):
    """Layers of ``rotations(layer)`` on every qubit, ``extra(c)``, then ``entangler`` on
    (0, 1), (1, 2), ..."""
    c = qg.Circuit(n)
    for layer in range(layers):
        for name in rotations(layer):
            for q in range(n):
                getattr(c, name)(q)
        extra(c)
        for q in range(n - 1):
            getattr(c, entangler)(q, q + 1)
    return c


def _adjoint_equals_shift(c, rows, seed):
    """Adjoint Jacobian of ``rows`` parameter rows of a random observable against the shift
    rule's (a different algorithm on the same engine); returns the observable and rows."""
    rng = np.random.default_rng(seed)
    H = _random_observable(c.n_qubits, rng, 4)
    theta = rng.normal(size=(rows, c.n_params))
    adj = jacobian(lambda t: qg.expect(c, H, t, gradient="adjoint"))(theta)
    shift = jacobian(lambda t: qg.expect(c, H, t))(theta)
    assert np.allclose(adj, shift, atol=1e-10)
    return H, theta


@pytest.mark.parametrize("rows", [1, 3])
def test_blocks_of_diagonal_gates_one_product_and_one_phase_multiply(rows):
    # RZ on every qubit and RZZ on disjoint pairs commute: their derivatives come from one
    # product Im(conj(lam) psi) and they are undone as one phase multiply
    n = 5
    c = _chain_layers(n, 2, lambda layer: ["ry", "rz"], "cnot",
                      extra=lambda c: c.rzz(0, 1).rzz(2, 3).crz(4, 0))
    # reference: the shift rule, a different algorithm on the same engine
    H, theta = _adjoint_equals_shift(c, rows, seed=9)
    # reference: scipy.optimize.check_grad on the first row's value
    f = lambda t: float(qg.expect(c, H, t))  # noqa: E731
    g = lambda t: grad(lambda u: qg.expect(c, H, u, gradient="adjoint"))(t)  # noqa: E731
    assert scipy.optimize.check_grad(f, g, theta[0], epsilon=1e-6) < 1e-5


@pytest.mark.parametrize("n, rows", [(3, 1), (6, 1), (6, 3)])
def test_runs_of_rotations_on_one_qubit_fuse_with_derivatives_at_the_end(n, rows):
    # RY, RZ, RX on each qubit in turn (a qubit carries three trainable gates in one run):
    # derivatives taken at the run's end with conjugated generators, the run undone fused
    c = qg.Circuit(n)
    for _ in range(2):
        for q in range(n):
            c.ry(q, input=q % 2)
        for q in range(n):
            c.ry(q).rz(q).rx(q)
        for q in range(n):
            c.cz(q, (q + 1) % n)
    rng = np.random.default_rng(10 + n)
    H = _random_observable(n, rng, 4)
    theta = rng.normal(size=(rows, c.n_params))
    X = rng.normal(size=(rows, 2))
    adj = np.stack([grad(lambda t: qg.expect(c, H, t, inputs=x, gradient="adjoint"))(th)
                    for th, x in zip(theta, X)])
    # reference: the shift rule, a different algorithm on the same engine
    shift = np.stack([grad(lambda t: qg.expect(c, H, t, inputs=x))(th) for th, x in zip(theta, X)])
    assert np.allclose(adj, shift, atol=1e-10)
    # the data points in one batch give the same per-sample derivatives as one at a time
    batch = jacobian(lambda t: qg.expect(c, H, t, inputs=X, gradient="adjoint"))(theta[0])
    single = np.stack([grad(lambda t: qg.expect(c, H, t, inputs=x, gradient="adjoint"))(theta[0])
                       for x in X])
    assert np.allclose(batch.reshape(single.shape), single, atol=1e-12)


def _window_case(kind):
    """Circuits of 13 qubits (the general engine) whose layers take the window paths: RY
    layers with CZ ladders (real window products with the ladder's phases inside), partial
    layers (identity inside a window), S/T phases in the ladder (complex phases, kept out of
    real products), RX layers (complex: pairs), a two-qubit gate in the block, and runs of RY
    and RZ on each qubit at the start (the backward pass ends without undoing them)."""
    n = 13
    if kind == "ladder":
        return _chain_layers(n, 3, lambda layer: ["ry"], "cz")
    c = qg.Circuit(n)
    for layer in range(3):
        for q in range(n):
            if kind == "partial" and (q + layer) % 3 == 0:
                continue
            (c.rx if kind == "rx" and layer == 1 else c.ry)(q)
            if kind == "runs" and layer == 0:
                c.rz(q)        # a run of two trainable gates a qubit, the first in the circuit
        if kind == "crx":
            c.crx(4, 5)
        for q in range(n - 1):
            c.cz(q, q + 1)
            if kind == "phases" and q % 4 == 1:
                c.s(q).t(q + 1)
    return c


@pytest.mark.parametrize("kind", ["ladder", "partial", "phases", "rx", "crx", "runs"])
@pytest.mark.parametrize("rows", [1, 2])
def test_window_products_and_overlaps_on_thirteen_qubits(kind, rows):
    c = _window_case(kind)
    # reference: the shift rule, a different algorithm on the same engine
    _adjoint_equals_shift_exactly(c, rows, seed=12)


def _adjoint_equals_shift_exactly(c, rows, seed):
    rng = np.random.default_rng(seed)
    H = _random_observable(c.n_qubits, rng, 4)
    theta = rng.normal(size=(rows, c.n_params))
    adj = jacobian(lambda t: qg.expect(c, H, t, gradient="adjoint"))(theta)
    shift = jacobian(lambda t: qg.expect(c, H, t))(theta)
    assert np.max(np.abs(adj - shift)) <= 1e-12 * max(1.0, np.max(np.abs(shift)))


def test_window_paths_pass_autograd_check_grads():
    c = _window_case("phases")
    H = qg.Observable({"Z" * 2 + "I" * 11: 1.0, "I" * 6 + "X" + "I" * 6: -0.5, "I" * 11 + "YY": 0.3})
    theta = np.random.default_rng(13).normal(size=c.n_params)
    # reference: autograd.test_util.check_grads (numerical VJP checks)
    check_grads(lambda t: qg.expect(c, H, t, gradient="adjoint"), modes=["rev"], order=1)(theta)
