"""Data inputs: circuits that read features of a data point, evaluated over a data set, and
their derivatives (weights, traced inputs, forward mode, per sample).

Values and derivatives are checked against the dense simulator of tests/reference (its own
reading of each operation's input/param/scale/offset, and dU/da = -1j G U per gate); ledger
counts against the two-term rule's count (`# common practice`: 2 circuits per shifted gate
column per data point, plus one value per data point).
"""
from concurrent.futures import ThreadPoolExecutor

import autograd.numpy as anp
import numpy as np
import pytest
from autograd import grad, jacobian, make_jvp

import qgradlib as qg
from reference import (angle_gradient, circuit_ops, dense_expectation, dense_marginals,
                       dense_state, observable_dense, reference_data_angles)

TERMS = {"ZI": 1.0, "XZ": -0.4, "IY": 0.3}
H = qg.Observable(TERMS)
H_DENSE = observable_dense(TERMS, 2)
H2 = qg.Observable({"ZZ": 0.5, "IX": 1.0})
H2_DENSE = observable_dense({"ZZ": 0.5, "IX": 1.0}, 2)
HZ = qg.Observable({"ZI": 1.0, "ZZ": -0.5})      # one measurement setting: executions = circuits


def model(layers=2):
    """Re-uploading model: each layer reads both features, then two weights and an entangler."""
    c = qg.Circuit(2)
    for _ in range(layers):
        c.ry(0, input=0)
        c.rx(1, input=1, scale=0.7, offset=0.1)
        c.rz(0)
        c.ry(1)
        c.cnot(0, 1)
    return c


def data(N, seed=0):
    rng = np.random.default_rng(seed)
    return rng.uniform(-1.5, 1.5, size=(N, 2))


def ref_state(c, theta, x):
    return dense_state(circuit_ops(c, reference_data_angles(c, theta, x)), c.n_qubits)


def ref_value(c, theta, x, matrix=H_DENSE):
    return dense_expectation(ref_state(c, theta, x), matrix)


def ref_grads(c, theta, x, matrix=H_DENSE):
    """(dE/dtheta, dE/dx) from the reference's dE/dphi and its own reading of the map."""
    g = angle_gradient(c, reference_data_angles(c, theta, x), matrix)
    dt, dx = np.zeros(c.n_params), np.zeros(c.n_inputs)
    pops = [op for op in c.operations if op.gate.kind != "fixed"]
    for k, op in enumerate(pops):
        if op.input is not None:
            dx[op.input] += op.scale * g[k]
        elif op.param is not None:
            dt[op.param] += op.scale * g[k]
    return dt, dx


THETA = np.array([0.3, -0.8, 1.1, 0.45])


# -- the circuit ------------------------------------------------------------------------------
def test_input_gates_and_angle_map_against_the_reference():
    c = model()
    assert (c.n_params, c.n_inputs) == (4, 2)
    assert [op.input for op in c.parametric_operations] == [0, 1, None, None] * 2
    assert c.input_columns == (0, 1, 4, 5)
    A, b = c.angle_map()                     # the (A, b) of old callers: weights and offsets
    B = c.input_map()
    for x in data(3):
        phi = c.angles(THETA, inputs=x)
        np.testing.assert_allclose(phi, reference_data_angles(c, THETA, x), atol=1e-15)
        np.testing.assert_allclose(phi, A @ THETA + B @ x + b, atol=1e-15)
    # autograd's Jacobian of the map in x is B (and in theta, A)
    x = data(1)[0]
    np.testing.assert_allclose(jacobian(lambda v: c.angles(THETA, inputs=v))(x), B, atol=1e-15)
    np.testing.assert_allclose(jacobian(lambda t: c.angles(t, inputs=x))(THETA), A, atol=1e-15)


def test_concatenation_shares_the_data_point():
    a = qg.Circuit(1).ry(0, input=1)
    both = a + qg.Circuit(1).rz(0).rx(0, input=0)
    assert (both.n_params, both.n_inputs) == (1, 2)
    np.testing.assert_allclose(both.angles(np.array([0.2]), inputs=np.array([3.0, 4.0])),
                               [4.0, 0.2, 3.0])
    assert both.copy().n_inputs == 2


@pytest.mark.parametrize("call, match", [
    (lambda: qg.Circuit(1).ry(0, param=0, input=0), "not several"),
    (lambda: qg.Circuit(1).ry(0, angle=0.1, input=0), "not several"),
    (lambda: qg.Circuit(1).ry(0, input=-1), "input must be a non-negative int"),
    (lambda: qg.Circuit(1).ry(0, input=True), "input must be a non-negative int"),
    (lambda: qg.Circuit(1).h(0) and qg.Circuit(1).add(qg.gates.H, 0, input=0), "is fixed"),
    (lambda: qg.expect(model(), H, THETA), r"reads 2 data feature\(s\).*inputs="),
    (lambda: qg.expect(qg.Circuit(2).ry(0), H, [0.1], inputs=np.zeros(1)), "reads no data feature"),
    (lambda: qg.expect(model(), H, THETA, inputs=np.zeros(3)), r"inputs must have shape \(2,\)"),
    (lambda: qg.expect(model(), H, THETA, inputs=np.zeros((0, 2))), "N >= 1"),
    (lambda: qg.expect(model(), H, THETA, inputs=np.array([np.nan, 0.0])), "finite"),
    (lambda: qg.expect(model(), H, THETA, inputs="ab"), "real array"),
    (lambda: qg.expect(model(), H, np.zeros((3, 4)), inputs=np.zeros((2, 2))), "pair up row by row"),
    (lambda: qg.state(model(), THETA), "inputs="),
    (lambda: qg.curvature.hessian(model(), H, THETA), "inputs="),
])
def test_bad_inputs_are_refused_clearly(call, match):
    with pytest.raises((ValueError, TypeError), match=match):
        call()


# -- evaluation over a data set -----------------------------------------------------------------
def test_values_over_a_data_set_match_the_reference_row_by_row():
    c, X = model(), data(5)
    vals = qg.expect(c, H, THETA, inputs=X)
    assert vals.shape == (5,)
    np.testing.assert_allclose(vals, [ref_value(c, THETA, x) for x in X], atol=1e-12)
    two = qg.expect(c, [H, H2], THETA, inputs=X)
    assert two.shape == (5, 2)
    np.testing.assert_allclose(two[:, 1], [ref_value(c, THETA, x, H2_DENSE) for x in X], atol=1e-12)
    one = qg.expect(c, H, THETA, inputs=X[2])
    assert np.ndim(one) == 0 and np.isclose(one, vals[2], atol=1e-13)
    assert qg.expect(c, [H, H2], THETA, inputs=X[2]).shape == (2,)
    # a batch of theta pairs with the data set row by row
    thetas = np.random.default_rng(1).normal(size=(5, 4))
    np.testing.assert_allclose(qg.expect(c, H, thetas, inputs=X),
                               [ref_value(c, t, x) for t, x in zip(thetas, X)], atol=1e-12)
    # ... and one data point with a batch of theta gives one value per theta
    np.testing.assert_allclose(qg.expect(c, H, thetas, inputs=X[0]),
                               [ref_value(c, t, X[0]) for t in thetas], atol=1e-12)


def test_probabilities_state_and_sample_over_a_data_set():
    c, X = model(), data(4)
    P = qg.probabilities(c, THETA, qubits=[1], inputs=X)
    assert P.shape == (4, 2)
    psi = qg.state(c, THETA, inputs=X)
    assert psi.shape == (4, 4)
    for p, s, x in zip(P, psi, X):
        ref = ref_state(c, THETA, x)
        np.testing.assert_allclose(abs(np.vdot(s, ref)), 1.0, atol=1e-12)
        np.testing.assert_allclose(p, dense_marginals(ref, 2, [1]), atol=1e-12)
    rho = qg.density_matrix(c, THETA, inputs=X[:2])
    np.testing.assert_allclose(rho[1], np.outer(psi[1], psi[1].conj()), atol=1e-12)
    draws = qg.sample(c, THETA, shots=50, seed=0, inputs=X)
    assert draws.shape == (4, 50)
    assert qg.sample(c, THETA, shots=7, seed=0, inputs=X[0]).shape == (7,)


def test_estimate_over_a_data_set():
    c, X = model(), data(4)
    with qg.Ledger() as book:
        r = qg.estimate(c, H, THETA, inputs=X, shots=4000, seed=5)
    assert r.value.shape == (4,) and book.executions == 4 * r.settings
    exact = qg.expect(c, H, THETA, inputs=X)
    # 5 standard errors per row: false-failure rate below 4 * 6e-7
    assert np.all(np.abs(r.value - exact) < 5 * r.standard_error)
    g = qg.estimate_gradient(c, H, THETA, inputs=X, shots=4000, seed=5)
    assert g.gradient.shape == (4, 4)
    assert g.circuits == 2 * 4 * 4      # common practice: 2 per weight per point, no feature shifts
    exact_g = np.array([ref_grads(c, THETA, x)[0] for x in X])
    assert np.all(np.abs(g.gradient - exact_g) < 5 * g.standard_error)


def test_memory_chunks_and_executor_rows_agree_with_one_batch():
    c, X = model(), data(9)
    base = qg.expect(c, H, THETA, inputs=X)
    np.testing.assert_allclose(qg.expect(c, H, THETA, inputs=X, memory=3 * 16 * 4 * 2), base,
                               atol=1e-13)
    with ThreadPoolExecutor(2) as pool:
        spread = qg.expect(c, H, THETA, inputs=X, executor=pool, chunk=2)
        g_pool = grad(lambda t: anp.mean(qg.expect(c, H, t, inputs=X, executor=pool, chunk=4)))(THETA)
    np.testing.assert_allclose(spread, base, atol=1e-13)
    np.testing.assert_allclose(g_pool, grad(lambda t: anp.mean(qg.expect(c, H, t, inputs=X)))(THETA),
                               atol=1e-12)


# -- derivatives ----------------------------------------------------------------------------------
def mean_square_loss(c, X, y, method="shift", obs=H):
    return lambda t: anp.mean((qg.expect(c, obs, t, inputs=X, gradient=method) - y) ** 2)


@pytest.mark.parametrize("method", ["shift", "adjoint"])
def test_weight_gradient_of_a_batch_loss_against_the_reference(method):
    c, X = model(), data(6)
    y = np.linspace(-0.5, 0.5, 6)
    g = grad(mean_square_loss(c, X, y, method))(THETA)
    vals = np.array([ref_value(c, THETA, x) for x in X])
    dE = np.array([ref_grads(c, THETA, x)[0] for x in X])
    np.testing.assert_allclose(g, 2 * np.mean((vals - y)[:, None] * dE, axis=0), atol=1e-10)


def test_weight_gradient_is_priced_2mN_plus_N_and_shifts_no_feature():
    c, N = model(), 7
    X = data(N)
    with qg.Ledger() as book:
        grad(mean_square_loss(c, X, np.zeros(N), obs=HZ))(THETA)
    m = c.n_params
    # common practice: two-term rule, 2 circuits per weight per data point, plus N values
    assert book.executions == book.circuits == 2 * m * N + N
    # each weight sits in one RZ or RY gate; no RX (the gate that only reads x[1]) is shifted,
    # and the RY columns shifted are the weight columns only (RY also reads x[0])
    assert book.by_purpose == {"value": N, "RZ": 2 * 2 * N, "RY": 2 * 2 * N}


def test_traced_inputs_are_differentiated_and_priced_exactly():
    # a classical layer in front: the features are tanh(W z), traced by autograd
    c, N = model(), 5
    Z = data(N, seed=3)
    W = np.array([[0.8, -0.3], [0.2, 1.1]])

    def loss(w, t):
        X = anp.tanh(anp.dot(Z, w.T))
        return anp.sum(qg.expect(c, H, t, inputs=X))

    gw = grad(loss, 0)(W, THETA)
    X = np.tanh(Z @ W.T)
    dX = np.array([ref_grads(c, THETA, x)[1] for x in X])          # (N, 2)
    # chain rule by hand through tanh(W z): dL/dW = sum_p (dX_p * (1 - X_p^2)) outer z_p
    np.testing.assert_allclose(gw, np.einsum("pi,pj->ij", dX * (1 - X ** 2), Z), atol=1e-10)
    def loss_z(w, t):
        return anp.sum(qg.expect(c, HZ, t, inputs=anp.tanh(anp.dot(Z, w.T))))

    with qg.Ledger() as only_x:
        grad(loss_z, 0)(W, THETA)
    # common practice: 2 circuits per feature gate column (4 of them) per point, no weight shifted
    assert only_x.circuits == 2 * 4 * N + N
    assert only_x.by_purpose == {"value": N, "RY": 2 * 2 * N, "RX": 2 * 2 * N}
    with qg.Ledger() as both:
        grad(lambda args: loss_z(*args))((W, THETA))
    assert both.executions == 2 * (4 + c.n_params) * N + N
    gw2, gt = grad(lambda args: loss(*args))((W, THETA))
    np.testing.assert_allclose(gw2, gw, atol=1e-12)
    np.testing.assert_allclose(gt, np.sum([ref_grads(c, THETA, x)[0] for x in X], axis=0),
                               atol=1e-10)


def test_adjoint_input_gradient_against_the_reference():
    c, X = model(), data(4)
    gx = grad(lambda v: anp.sum(qg.expect(c, H, THETA, inputs=v, gradient="adjoint")))(X)
    np.testing.assert_allclose(gx, [ref_grads(c, THETA, x)[1] for x in X], atol=1e-10)


@pytest.mark.parametrize("method", ["shift", "adjoint"])
def test_integer_and_listed_inputs_are_differentiated_like_floats(method):
    # before: grad with respect to an integer data set returned zeros without a word, and a
    # list of traced features was refused with "got ndarray"
    c = qg.Circuit(1).ry(0, input=0).rx(0)
    Z = qg.Observable({"Z": 1.0})
    f = lambda x: qg.expect(c, Z, np.array([0.3]), inputs=x, gradient=method)  # noqa: E731
    want = -np.sin(1.0) * np.cos(0.3)      # common practice: <Z> = cos(x) cos(0.3)
    assert np.allclose(grad(f)(np.array([1])), [want], atol=1e-12)
    assert np.allclose(grad(lambda v: f([v[0]]))(np.array([1.0])), [want], atol=1e-12)
    assert np.allclose(grad(lambda v: anp.sum(f(v)))(np.array([[1], [2]])),
                       [[want], [-np.sin(2.0) * np.cos(0.3)]], atol=1e-12)
    p = jacobian(lambda v: qg.probabilities(c, np.array([0.3]), inputs=[v[0]]))(np.array([1.0]))
    assert np.allclose(p[:, 0], [want / 2, -want / 2], atol=1e-12)   # p0 = (1 + <Z>) / 2
    # an integer array made inside the derivative cannot carry one: refused, by name
    with pytest.raises(TypeError, match="inputs is an integer array made inside"):
        grad(lambda v: f((v * 2).astype(int)))(np.array([1.0]))


def test_per_sample_gradients_against_a_loop():
    c, X = model(), data(6)
    with qg.Ledger() as book:
        J = jacobian(lambda t: qg.expect(c, H, t, inputs=X))(THETA)
    assert J.shape == (6, 4)
    loop = [grad(lambda t: qg.expect(c, H, t, inputs=x))(THETA) for x in X]
    np.testing.assert_allclose(J, loop, atol=1e-12)
    np.testing.assert_allclose(J, [ref_grads(c, THETA, x)[0] for x in X], atol=1e-10)
    # autograd asks the VJP once per output; the plan is built and run once
    assert book.circuits == 2 * 4 * 6 + 6


@pytest.mark.parametrize("method", ["shift", "adjoint", "difference"])
def test_forward_mode_directional_derivatives_per_sample(method):
    c, X = model(), data(5)
    v = np.array([0.5, -1.0, 0.0, 2.0])
    f = lambda t: qg.expect(c, H, t, inputs=X, gradient=method)   # noqa: E731
    val, d = make_jvp(f)(THETA)(v)
    ref = np.array([ref_grads(c, THETA, x)[0] for x in X]) @ v
    np.testing.assert_allclose(val, f(THETA), atol=1e-13)
    np.testing.assert_allclose(d, ref, atol=1e-7 if method == "difference" else 1e-10)


def test_forward_mode_shifts_only_the_columns_the_tangent_moves():
    c, N = model(), 4
    X = data(N)
    v = np.array([0.0, 1.0, 0.0, 0.0])          # only theta[1] (one RY gate per layer... one gate)
    with qg.Ledger() as book:
        make_jvp(lambda t: qg.expect(c, H, t, inputs=X))(THETA)(v)
    # common practice: 2 circuits per moved column per point, plus the N values
    assert book.circuits == 2 * N + N
    # a tangent in the features only (theta held fixed)
    u = np.zeros((N, 2))
    u[:, 0] = 1.0
    with qg.Ledger() as bx:
        _, dx = make_jvp(lambda x: qg.expect(c, H, THETA, inputs=x))(X)(u)
    assert bx.circuits == 2 * 2 * N + N       # feature 0 is read by two gates
    np.testing.assert_allclose(dx, [ref_grads(c, THETA, x)[1][0] for x in X], atol=1e-10)


# -- fidelity kernels -----------------------------------------------------------------------------
def feature_map():
    """An angle-and-product encoding of two features on three qubits (ZZ feature products)."""
    c = qg.Circuit(3)
    for q in range(3):
        c.h(q)
    c.rz(0, input=0).rz(1, input=1).rz(2, input=0, scale=-0.5)
    c.rzz(0, 1, input=1, scale=0.8).rzz(1, 2, input=0)
    c.ry(0, input=1).rx(2, input=0, offset=0.3)
    return c


def test_kernel_matrix_against_reference_overlaps():
    # Havlicek et al., Nature 567, 209 (2019); Schuld and Killoran, PRL 122, 040504 (2019):
    # k(x, y) = |<phi(x)|phi(y)>|^2, here from the dense reference's feature states
    c = feature_map()
    X, Y = data(6, seed=2), data(4, seed=4)
    ref_X = [ref_state(c, np.zeros(0), x) for x in X]
    ref_Y = [ref_state(c, np.zeros(0), y) for y in Y]
    K = qg.kernel_matrix(c, X)
    np.testing.assert_allclose(K, [[abs(np.vdot(a, b)) ** 2 for b in ref_X] for a in ref_X],
                               atol=1e-12)
    np.testing.assert_array_equal(K, K.T)
    assert np.all(np.diag(K) == 1.0)
    # a Gram matrix of overlaps is positive semidefinite (Schur product of Gram matrices)
    assert np.linalg.eigvalsh(K).min() >= -1e-12
    KXY = qg.kernel_matrix(c, X, Y)
    np.testing.assert_allclose(KXY, [[abs(np.vdot(a, b)) ** 2 for b in ref_Y] for a in ref_X],
                               atol=1e-12)


def test_kernel_ledger_counts_compute_uncompute_circuits():
    c, X, Y = feature_map(), data(5), data(3, seed=9)
    with qg.Ledger() as sym:
        qg.kernel_matrix(c, X, shots=200, seed=1)
    # common practice: one compute-uncompute circuit per entry above the diagonal
    assert (sym.circuits, sym.shots) == (5 * 4 // 2, 5 * 4 // 2 * 200)
    with qg.Ledger() as cross:
        qg.kernel_matrix(c, X, Y, shots=200, seed=1)
    assert (cross.circuits, cross.shots) == (15, 15 * 200)


def test_shot_kernel_is_an_unbiased_binomial_estimate():
    c, X = feature_map(), data(6, seed=5)
    exact = qg.kernel_matrix(c, X)
    shots, R = 400, 60
    draws = np.array([qg.kernel_matrix(c, X, shots=shots, seed=s) for s in range(R)])
    assert np.all(draws == draws.transpose(0, 2, 1)) and np.all(draws[:, range(6), range(6)] == 1)
    assert np.allclose(draws * shots, np.round(draws * shots), atol=1e-9)   # all-zero counts
    # common practice: Binomial(shots, p) / shots has mean p and variance p (1 - p) / shots;
    # the mean of R runs within 5 standard errors of p (false-failure rate below 15 * 6e-7)
    se = np.sqrt(exact * (1 - exact) / (shots * R)) + 1e-12
    assert np.all(np.abs(draws.mean(axis=0) - exact) <= 5 * se)
    np.testing.assert_array_equal(qg.kernel_matrix(c, X, shots=50, seed=3),
                                  qg.kernel_matrix(c, X, shots=50, seed=3))


def test_shot_kernel_reads_the_compute_uncompute_circuits():
    # Havlicek et al., Nature 567, 209 (2019): U(y)^dagger U(x) on |0...0> ends in 0...0 with
    # probability |<phi(y)|phi(x)>|^2; here against the dense reference's feature states
    from qgradlib.circuits.transform import overlap_circuit
    c, X, Y = feature_map(), data(4, seed=6), data(3, seed=8)
    k = overlap_circuit(c)
    assert (k.n_qubits, k.n_inputs, len(k)) == (3, 4, 2 * len(c))
    pairs = np.array([np.concatenate([x, y]) for x in X for y in Y])
    p0 = qg.probabilities(k, np.zeros(0), inputs=pairs)[:, 0]
    want = [abs(np.vdot(ref_state(c, np.zeros(0), y), ref_state(c, np.zeros(0), x))) ** 2
            for x in X for y in Y]
    np.testing.assert_allclose(p0, want, atol=1e-12)
    # the shot kernel is Binomial(shots, p0) / shots of those circuits, drawn in pair order
    # from the seed's generator (numpy's binomial, a reference library routine)
    got = qg.kernel_matrix(c, X, Y, shots=300, seed=7)
    np.testing.assert_array_equal(got.ravel(), np.random.default_rng(7).binomial(300, p0) / 300)
    i, j = np.triu_indices(4, k=1)
    p_sym = qg.probabilities(k, np.zeros(0), inputs=np.hstack([X[i], X[j]]))[:, 0]
    sym = qg.kernel_matrix(c, X, shots=300, seed=7)
    np.testing.assert_array_equal(sym[i, j], np.random.default_rng(7).binomial(300, p_sym) / 300)
    np.testing.assert_array_equal(sym, sym.T)


def test_trainable_feature_circuit_and_bad_kernel_arguments():
    c = feature_map().ry(1)                     # one trainable weight after the encoding
    X = data(3)
    t = np.array([0.7])
    K = qg.kernel_matrix(c, X, theta=t)
    S = [ref_state(c, t, x) for x in X]
    np.testing.assert_allclose(K, [[abs(np.vdot(a, b)) ** 2 for b in S] for a in S], atol=1e-12)
    with pytest.raises(ValueError, match="theta="):
        qg.kernel_matrix(c, X)
    with pytest.raises(ValueError, match="reads no data feature"):
        qg.kernel_matrix(qg.Circuit(1).h(0), X)
    with pytest.raises(ValueError, match=r"X must have shape \(N, 2\)"):
        qg.kernel_matrix(feature_map(), X[0])
    with pytest.raises(ValueError, match=r"Y must have shape \(N, 2\)"):
        qg.kernel_matrix(feature_map(), X, np.zeros((2, 3)))
    with pytest.raises(ValueError, match="shots"):
        qg.kernel_matrix(feature_map(), X, shots=0)
    with pytest.raises(ValueError, match="noise"):
        qg.kernel_matrix(feature_map().noise(0, qg.channels.dephasing(0.1)), X)
