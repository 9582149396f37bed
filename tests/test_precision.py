"""Single precision (``precision="single"``) and the in-place forward run.

Outside references: the independent dense simulator of ``tests/reference`` (Kronecker-built
matrices, no engine code) for in-place runs and for both precisions; ``tracemalloc`` (the
standard library's allocation tracer) for the memory of an in-place run; the unit roundoff
of IEEE 754 single precision, ``2**-24 ~ 6e-8`` (common practice), for the error model.
"""
import tracemalloc

import numpy as np
import pytest
from autograd import grad, jacobian

import qgradlib as qg
from qgradlib.engine import kernels, measure, memory, statevector
from qgradlib.evaluation.expectation import _spec
from qgradlib.evaluation.rows import peak_states
from reference import circuit_state, dense_expectation, observable_dense, theta_gradient


def _random_circuit(n, gates, seed):
    """A family of random circuits: rotations, controlled rotations, entanglers, swaps."""
    rng = np.random.default_rng(seed)
    c = qg.Circuit(n)
    for _ in range(gates):
        q = int(rng.integers(n))
        p = int(rng.integers(n - 1))
        p = p if p < q else p + 1
        kind = int(rng.integers(9))
        if kind == 0:
            c.ry(q)
        elif kind == 1:
            c.rx(q)
        elif kind == 2:
            c.rz(q)
        elif kind == 3:
            c.h(q)
        elif kind == 4:
            c.cnot(q, p)
        elif kind == 5:
            c.crx(q, p)
        elif kind == 6:
            c.cz(q, p)
        elif kind == 7:
            c.swap(q, p)
        else:
            c.rxx(q, p)
    return c


def _observable(n, seed):
    rng = np.random.default_rng(seed)
    return qg.Observable({"".join(rng.choice(list("IXYZ"), size=n)): float(rng.normal())
                          for _ in range(5)})


# (qubits, gates, seed); the dense reference builds 2**n x 2**n matrices, so n stays small
CASES = [(2, 40, 0), (3, 60, 1), (4, 80, 2), (5, 100, 3), (6, 120, 4), (6, 200, 5)]


@pytest.mark.parametrize("n, gates, seed", CASES)
def test_single_precision_agrees_with_double_within_the_documented_error(n, gates, seed):
    c = _random_circuit(n, gates, seed)
    H = _observable(n, seed)
    theta = np.random.default_rng(seed).normal(size=c.n_params)
    norm = sum(abs(v) for v in H.terms.values())
    # rounding model: relative ~ sqrt(gates) * 6e-8 on the state (unit roundoff 2**-24,
    # common practice); a factor 4 of headroom, and never above the 1e-5 we promise
    tol = min(1e-5, 4 * np.sqrt(gates) * 6e-8 * max(norm, 1.0))
    ref_state = circuit_state(c, theta)                                   # dense reference
    ref = dense_expectation(ref_state, observable_dense(H.terms, n))
    single = qg.expect(c, H, theta, precision="single")
    assert isinstance(single, float)
    assert abs(single - ref) <= tol
    assert abs(single - qg.expect(c, H, theta)) <= tol
    p1 = qg.probabilities(c, theta, precision="single")
    assert p1.dtype == np.float64
    np.testing.assert_allclose(p1, np.abs(ref_state) ** 2, atol=1e-6)
    psi = qg.state(c, theta, precision="single")
    assert psi.dtype == np.complex64
    np.testing.assert_allclose(psi, ref_state, atol=1e-6)


@pytest.mark.parametrize("n, gates, seed", CASES[:4])
@pytest.mark.parametrize("gradient", ["shift", "adjoint"])
def test_single_precision_gradients_are_the_exact_rules_within_rounding(n, gates, seed, gradient):
    c = _random_circuit(n, gates, seed)
    H = _observable(n, seed)
    theta = np.random.default_rng(seed).normal(size=c.n_params)
    ref = theta_gradient(c, theta, observable_dense(H.terms, n))     # dense reference (exact)
    g = grad(lambda t: qg.expect(c, H, t, gradient=gradient, precision="single"))(theta)
    assert g.dtype == np.float64
    np.testing.assert_allclose(g, ref, atol=1e-5)
    J = jacobian(lambda t: qg.probabilities(c, t, qubits=[0], gradient=gradient,
                                            precision="single"))(theta)
    Jd = jacobian(lambda t: qg.probabilities(c, t, qubits=[0], gradient=gradient))(theta)
    np.testing.assert_allclose(J, Jd, atol=1e-5)


def test_single_precision_batches_samples_and_counts():
    c = _random_circuit(4, 30, 7)
    H = _observable(4, 7)
    thetas = np.random.default_rng(7).normal(size=(3, c.n_params))
    np.testing.assert_allclose(qg.expect(c, H, thetas, precision="single"),
                               qg.expect(c, H, thetas), atol=1e-5)
    # shots: the same seed draws the same outcomes from (nearly) the same distribution
    a = qg.sample(c, thetas[0], shots=50, seed=2, precision="single")
    assert a.shape == (50,) and a.dtype.kind == "i"
    assert sum(qg.counts(c, thetas[0], shots=50, seed=2, precision="single").values()) == 50
    v = qg.expect(c, H, thetas[0], shots=4000, seed=3, precision="single")
    assert abs(v - qg.expect(c, H, thetas[0], shots=4000, seed=3)) < 1e-5


@pytest.mark.parametrize("bad", ["float32", "half", 32, None, "Single"])
def test_bad_precision_is_refused_naming_the_argument_and_the_choices(bad):
    c = qg.Circuit(1).ry(0)
    Z = qg.Observable({"Z": 1.0})
    for call in (lambda: qg.expect(c, Z, np.zeros(1), precision=bad),
                 lambda: qg.probabilities(c, np.zeros(1), precision=bad),
                 lambda: qg.state(c, np.zeros(1), precision=bad),
                 lambda: qg.sample(c, np.zeros(1), shots=3, precision=bad)):
        with pytest.raises(ValueError, match=r"precision must be one of 'double', 'single'"):
            call()


def test_single_precision_refuses_noise_channels():
    c = qg.Circuit(1).ry(0).noise(0, qg.channels.depolarizing(0.1))
    with pytest.raises(ValueError, match="precision='single' is for pure states"):
        qg.expect(c, qg.Observable({"Z": 1.0}), np.zeros(1), precision="single")


def test_memory_guard_counts_eight_bytes_an_amplitude_in_single_precision(no_scratch_pool):
    n = 17     # a 1 MiB complex64 state, large next to the fixed overhead of a call
    c = qg.Circuit(n).h(0).ry(0).cnot(0, 1).ry(1)
    H = qg.Observable({"Z" + "I" * (n - 1): 1.0})
    theta = np.array([0.3, 0.4])
    spec = _spec(c, "expect", observables=(H,), precision="single")
    estimate = memory.state_bytes(n, peak_states(spec, 1), 8)
    qg.expect(c, H, theta, precision="single")       # compile once
    tracemalloc.start()
    try:
        qg.expect(c, H, theta, precision="single")
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    # the estimate bounds the measured peak, and not loosely; double would claim twice it
    assert peak <= estimate <= 1.5 * peak, (peak, estimate)
    assert memory.state_bytes(n, peak_states(spec, 1), 16) > 1.5 * peak


# -- in place ------------------------------------------------------------------------------
QUBIT_SETS = [(0,), (3,), (5,), (0, 1), (1, 0), (2, 4), (0, 5), (5, 1), (0, 2, 5)]


@pytest.mark.parametrize("qubits", QUBIT_SETS)
@pytest.mark.parametrize("piece", [2, 8, 32, 1 << 20])
@pytest.mark.parametrize("rows", [1, 3])
def test_in_place_kernels_equal_their_two_buffer_forms(qubits, piece, rows, monkeypatch):
    monkeypatch.setattr(kernels, "PIECE", piece)
    n = 6
    rng = np.random.default_rng(len(qubits) * 7 + rows)
    d = 2 ** len(qubits)
    psi = rng.normal(size=(rows, 2 ** n)) + 1j * rng.normal(size=(rows, 2 ** n))
    for mat in (rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d)),       # complex
                rng.normal(size=(d, d)),                                        # real
                rng.normal(size=(rows, d, d)) + 1j * rng.normal(size=(rows, d, d))):   # per row
        want = kernels.apply_dense(psi, n, mat, qubits, np.empty_like(psi))
        got = psi.copy()
        assert kernels.apply_dense(got, n, mat, qubits, got) is got
        np.testing.assert_allclose(got, want, atol=1e-12)
    cols = rng.permutation(d)
    phases = np.exp(1j * rng.normal(size=d))
    want = kernels.apply_monomial(psi, n, cols, phases, qubits, np.empty_like(psi))
    got = psi.copy()
    kernels.apply_monomial(got, n, cols, phases, qubits, got)
    np.testing.assert_allclose(got, want, atol=1e-12)


@pytest.mark.parametrize("n, gates, seed", CASES[1:5])
@pytest.mark.parametrize("fuse", [True, False])
def test_in_place_run_matches_the_dense_reference(n, gates, seed, fuse, monkeypatch):
    c = _random_circuit(n, gates, seed)
    theta = np.random.default_rng(seed).normal(size=(2, c.n_params))
    phi = c.angles(theta)
    before = statevector.run(c, phi, fuse=fuse)
    monkeypatch.setattr(statevector, "IN_PLACE", 0)
    monkeypatch.setattr(kernels, "PIECE", 8)
    got = statevector.run(c, phi, fuse=fuse)
    np.testing.assert_allclose(got, before, atol=1e-12)
    for b in range(2):
        np.testing.assert_allclose(got[b], circuit_state(c, theta[b]), atol=1e-12)   # dense reference


def test_in_place_forward_peak_is_one_state_and_a_little(monkeypatch):
    n = 16
    c = _random_circuit(n, 60, 9)
    H = qg.Observable({"I" * q + "ZZ" + "I" * (n - q - 2): 1.0 for q in range(n - 1)}
                      | {"I" * q + "X" + "I" * (n - q - 1): 0.5 for q in range(n)})
    theta = np.random.default_rng(9).normal(size=c.n_params)
    want = qg.expect(c, H, theta)
    # a 16-qubit state run as a large one is: in place, pieces of 2**12, readout in pieces
    monkeypatch.setattr(statevector, "IN_PLACE", 0)
    monkeypatch.setattr(kernels, "PIECE", 2 ** 12)
    monkeypatch.setattr(measure, "READ_PIECE", 2 ** 12)
    spec = _spec(c, "expect", observables=(H,))
    qg.expect(c, H, theta)
    tracemalloc.start()
    try:
        got = qg.expect(c, H, theta)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert abs(got - want) < 1e-12
    state = 16 * 2 ** n
    # two buffers would be 2.0; the rest is the call's fixed overhead (0.27 MiB measured)
    assert peak <= 1.4 * state, peak / state
    estimate = memory.state_bytes(n, peak_states(spec, 1))
    assert peak <= estimate <= 1.5 * peak, (peak, estimate)
