"""Noise channels and the density-matrix path, against outside references.

Sources named beside each check: Nielsen and Chuang, Quantum Computation and Quantum
Information (Cambridge, 2000/2010), ch. 8 (operator-sum form rho -> sum_k K rho K^dagger,
sec. 8.3: bit flip, phase flip, depolarizing, amplitude damping); scipy.linalg.expm for gate
matrices of the dense reference below; scipy.optimize.check_grad; central differences.
"""
import numpy as np
import pytest
import scipy.linalg as sla
from autograd import grad, hessian
from hypothesis import given, strategies as st
from scipy.optimize import check_grad

import qgradlib as qg
from qgradlib.engine.memory import StateTooLarge

# -- an independent dense reference: full matrices by explicit index embedding --------------
I2 = np.eye(2)
X = np.array([[0, 1], [1, 0]], dtype=complex)
Y = np.array([[0, -1j], [1j, 0]])
Z = np.diag([1.0, -1.0]).astype(complex)
PAULI = {"I": I2, "X": X, "Y": Y, "Z": Z}


def embed(mat, qubits, n):
    """The 2**n matrix of ``mat`` acting on ``qubits`` (first listed = most significant)."""
    D = 2 ** n
    out = np.zeros((D, D), dtype=complex)
    bits = [[(i >> (n - 1 - q)) & 1 for q in range(n)] for i in range(D)]
    for i in range(D):
        for j in range(D):
            if all(bits[i][q] == bits[j][q] for q in range(n) if q not in qubits):
                a = int("".join(str(bits[i][q]) for q in qubits), 2)
                b = int("".join(str(bits[j][q]) for q in qubits), 2)
                out[i, j] = mat[a, b]
    return out


def word_matrix(word):
    m = np.array([[1.0 + 0j]])
    for c in word:
        m = np.kron(m, PAULI[c])
    return m


def rotation(P, a):
    return sla.expm(-1j * a / 2 * P)   # scipy.linalg.expm: U(a) = expm(-1j a P/2)


# Kraus operators written from Nielsen and Chuang, sec. 8.3 (not taken from the package)
def nc_kraus(kind, p):
    if kind == "depolarizing":
        return [np.sqrt(1 - 3 * p / 4) * I2] + [np.sqrt(p / 4) * P for P in (X, Y, Z)]
    if kind == "dephasing":
        return [np.sqrt(1 - p) * I2, np.sqrt(p) * Z]
    if kind == "bit_flip":
        return [np.sqrt(1 - p) * I2, np.sqrt(p) * X]
    if kind == "amplitude_damping":
        return [np.array([[1, 0], [0, np.sqrt(1 - p)]]), np.array([[0, np.sqrt(p)], [0, 0]])]
    raise AssertionError(kind)


def build(n, ops, theta):
    """The same circuit twice: a qgradlib Circuit and a dense reference rho."""
    c = qg.Circuit(n)
    rho = np.zeros((2 ** n, 2 ** n), dtype=complex)
    rho[0, 0] = 1.0
    k = 0
    for op in ops:
        name, qs = op[0], op[1]
        if name in ("rx", "ry", "rz"):
            getattr(c, name)(qs[0])
            U = embed(rotation(PAULI[name[1].upper()], theta[k]), qs, n)
            k += 1
        elif name == "h":
            c.h(qs[0])
            U = embed(np.array([[1, 1], [1, -1]]) / np.sqrt(2), qs, n)
        elif name == "cnot":
            c.cnot(*qs)
            U = embed(np.array([[1, 0, 0, 0], [0, 1, 0, 0], [0, 0, 0, 1], [0, 0, 1, 0]]), qs, n)
        elif name == "kraus":
            c.noise(qs, qg.channels.from_kraus(op[2]))
            rho = sum(embed(K, qs, n) @ rho @ embed(K, qs, n).conj().T for K in op[2])
            continue
        else:
            c.noise(qs[0], getattr(qg.channels, name)(op[2]))
            rho = sum(embed(K, qs, n) @ rho @ embed(K, qs, n).conj().T for K in nc_kraus(name, op[2]))
            continue
        rho = U @ rho @ U.conj().T
    return c, rho


def random_kraus(rng, k_qubits, n_ops):
    """Kraus operators of a random channel: blocks of a random isometry (Stinespring form)."""
    d = 2 ** k_qubits
    A = rng.normal(size=(d * n_ops, d)) + 1j * rng.normal(size=(d * n_ops, d))
    V, _ = np.linalg.qr(A)          # V^dagger V = I, so sum_k K_k^dagger K_k = I
    return [V[i * d:(i + 1) * d] for i in range(n_ops)]


NOISE = ("depolarizing", "dephasing", "bit_flip", "amplitude_damping")


# -- channels against their analytic action (Nielsen and Chuang, ch. 8) ----------------------
@pytest.mark.parametrize("p", [0.0, 0.1, 0.37, 1.0])
def test_depolarizing_shrinks_x_of_plus_by_one_minus_p(p):
    # Nielsen and Chuang sec. 8.3.4: rho -> p I/2 + (1 - p) rho, so <X> of |+> becomes 1 - p
    c = qg.Circuit(1).h(0).noise(0, qg.channels.depolarizing(p))
    assert qg.expect(c, qg.Observable({"X": 1.0}), np.zeros(0)) == pytest.approx(1 - p, abs=1e-12)


@pytest.mark.parametrize("gamma", [0.0, 0.2, 0.65, 1.0])
def test_amplitude_damp_sends_z_of_one_to_two_gamma_minus_one(gamma):
    # Nielsen and Chuang sec. 8.3.5: |1> decays to |0> with probability gamma
    c = qg.Circuit(1).x(0).noise(0, qg.channels.amplitude_damping(gamma))
    assert qg.expect(c, qg.Observable({"Z": 1.0}), np.zeros(0)) == pytest.approx(2 * gamma - 1, abs=1e-12)


@pytest.mark.parametrize("p", [0.05, 0.3, 0.5])
def test_dephasing_and_bit_flip_analytic(p):
    # Nielsen and Chuang sec. 8.3.3: phase flip turns <X> of |+> into 1 - 2p; bit flip <Z> of |0> into 1 - 2p
    x = qg.expect(qg.Circuit(1).h(0).noise(0, qg.channels.dephasing(p)), qg.Observable({"X": 1.0}), np.zeros(0))
    z = qg.expect(qg.Circuit(1).noise(0, qg.channels.bit_flip(p)), qg.Observable({"Z": 1.0}), np.zeros(0))
    assert x == pytest.approx(1 - 2 * p, abs=1e-12)
    assert z == pytest.approx(1 - 2 * p, abs=1e-12)


def test_amplitude_damp_keeps_coherence_factor():
    # Nielsen and Chuang sec. 8.3.5: the off-diagonal element scales by sqrt(1 - gamma)
    rho = qg.density_matrix(qg.Circuit(1).h(0).noise(0, qg.channels.amplitude_damping(0.36)), np.zeros(0))
    assert rho[0, 1] == pytest.approx(0.5 * np.sqrt(1 - 0.36), abs=1e-12)
    assert rho[0, 0].real == pytest.approx(0.5 + 0.5 * 0.36, abs=1e-12)


# -- the density path against the dense operator-sum reference --------------------------------
OPS3 = [("ry", (0,)), ("h", (1,)), ("cnot", (0, 2)), ("depolarizing", (2,), 0.13),
        ("rx", (1,)), ("amplitude_damping", (0,), 0.21), ("cnot", (2, 1)), ("dephasing", (1,), 0.3),
        ("rz", (2,)), ("bit_flip", (0,), 0.08), ("ry", (2,))]


@given(st.lists(st.floats(-3.2, 3.2), min_size=4, max_size=4))
def test_density_path_matches_dense_operator_sum(angles):
    # reference: full matrices from scipy.linalg.expm and rho -> sum_k K rho K^dagger (N&C ch. 8)
    theta = np.array(angles)
    c, ref = build(3, OPS3, theta)
    rho = qg.density_matrix(c, theta)
    assert np.allclose(rho, ref, atol=1e-12)
    for word in ("ZII", "XYZ", "IYY", "ZXZ", "YII"):
        got = qg.expect(c, qg.Observable({word: 1.0}), theta)
        assert got == pytest.approx(np.trace(ref @ word_matrix(word)).real, abs=1e-12)
    probs = qg.probabilities(c, theta, qubits=[2, 0])
    full = np.real(np.diag(ref)).reshape(2, 2, 2)
    assert np.allclose(probs, full.sum(axis=1).transpose(1, 0).reshape(-1), atol=1e-12)


def test_kraus_on_unordered_qubits_matches_dense_reference():
    # a two-qubit channel on qubits (2, 0): the first listed qubit is the most significant
    rng = np.random.default_rng(11)
    ops = [("h", (0,)), ("ry", (1,)), ("cnot", (1, 2)), ("kraus", (2, 0), random_kraus(rng, 2, 3)),
           ("rx", (2,))]
    theta = np.array([0.7, -1.1])
    c, ref = build(3, ops, theta)
    assert np.allclose(qg.density_matrix(c, theta), ref, atol=1e-12)


@given(st.integers(0, 2 ** 31 - 1), st.lists(st.sampled_from(NOISE), min_size=1, max_size=4),
       st.lists(st.floats(0.0, 1.0), min_size=4, max_size=4))
def test_trace_preservation_and_positivity(seed, kinds, ps):
    # Nielsen and Chuang ch. 8: a completely positive trace-preserving map sends density
    # matrices to density matrices (Hermitian, trace 1, eigenvalues >= 0)
    rng = np.random.default_rng(seed)
    c = qg.Circuit(3).ry(0).cnot(0, 1).rx(2).cnot(2, 1)
    for kind, p in zip(kinds, ps):
        c.noise(int(rng.integers(3)), getattr(qg.channels, kind)(p))
    c.noise(tuple(int(q) for q in rng.permutation(3)[:2]),
            qg.channels.from_kraus(random_kraus(rng, 2, int(rng.integers(1, 5)))))
    c.ry(1)
    rho = qg.density_matrix(c, rng.uniform(-np.pi, np.pi, size=c.n_params))
    assert np.trace(rho).real == pytest.approx(1.0, abs=1e-12)
    assert np.allclose(rho, rho.conj().T, atol=1e-12)
    assert np.linalg.eigvalsh(rho).min() > -1e-12


def test_pauli_expectation_by_index_arithmetic_matches_trace():
    # Tr(rho P) by dense numpy kron matrices, on a random full-rank rho (not from a circuit)
    from qgradlib.engine.density import density_expectations

    rng = np.random.default_rng(5)
    n = 3
    A = rng.normal(size=(8, 8)) + 1j * rng.normal(size=(8, 8))
    rho = A @ A.conj().T
    rho /= np.trace(rho)
    words = ["".join(w) for w in rng.choice(list("IXYZ"), size=(12, n))]
    obs = [qg.Observable({w: 1.0}) for w in words]
    got = density_expectations(rho.reshape(1, -1), n, obs)[0]
    want = [np.trace(rho @ word_matrix(w)).real for w in words]
    assert np.allclose(got, want, atol=1e-12)


# -- noiseless density path = statevector path --------------------------------------------------
def _scenario():
    # a made-up three-site "spin ladder" used only as test input
    c = qg.Circuit(3).h(0).ry(1).cnot(0, 1).rz(2, param=0, scale=2.0).crx(1, 2).rx(1, angle=0.25)
    H = qg.Observable({"ZZI": -1.0, "IZZ": -1.0, "XII": -0.5, "YXY": 0.3})
    return c, H, np.array([0.41, -0.77])


def test_noiseless_density_path_equals_statevector_path():
    # common practice: the density matrix of a pure state is |psi><psi|; a channel with
    # p = 0 is the identity map, so it only switches the engine path
    c, H, theta = _scenario()
    psi = qg.state(c, theta)
    assert np.allclose(qg.density_matrix(c, theta), np.outer(psi, psi.conj()), atol=1e-12)
    cd = c.copy().noise(1, qg.channels.depolarizing(0.0))
    assert cd.has_noise and not c.has_noise
    assert qg.expect(cd, H, theta) == pytest.approx(qg.expect(c, H, theta), abs=1e-12)
    assert np.allclose(qg.probabilities(cd, theta, qubits=[1, 2]),
                       qg.probabilities(c, theta, qubits=[1, 2]), atol=1e-12)
    assert np.allclose(grad(lambda t: qg.expect(cd, H, t))(theta),
                       grad(lambda t: qg.expect(c, H, t, gradient="adjoint"))(theta), atol=1e-10)
    thetas = np.array([theta, theta + 0.3, -theta])
    assert np.allclose(qg.expect(cd, H, thetas), qg.expect(c, H, thetas), atol=1e-12)


def test_channels_are_not_parametric_operations():
    # common practice: a channel has no angle, so the angle map is that of the gates alone
    c, _, _ = _scenario()
    cd = qg.Circuit(3).noise(0, qg.channels.depolarizing(0.1)) + c
    cd.noise(2, qg.channels.amplitude_damping(0.2))
    A0, b0 = c.angle_map()
    A1, b1 = cd.angle_map()
    assert cd.n_params == c.n_params
    assert np.array_equal(A0, A1) and np.array_equal(b0, b1)
    assert len(cd.parametric_operations) == len(c.parametric_operations)
    assert len(cd.operations) == len(c.operations) + 2


# -- derivatives of noisy circuits -------------------------------------------------------------
def _noisy():
    c, H, theta = _scenario()
    c.noise(0, qg.channels.depolarizing(0.07)).noise(2, qg.channels.amplitude_damping(0.15)).noise(1, qg.channels.dephasing(0.1))
    c.ry(2, param=1).noise(1, qg.channels.bit_flip(0.05)).rxx(0, 2)
    return c, H, np.array([0.41, -0.77, 1.3])


def _central(f, x, h=1e-5):
    return np.array([(f(x + h * e) - f(x - h * e)) / (2 * h) for e in np.eye(x.size)])


def test_noisy_shift_rule_gradient_equals_central_differences():
    # the shift rules need only the angle dependence of the gates; noise that does not
    # depend on the angles keeps them exact (checked against central differences, common
    # practice, and scipy.optimize.check_grad)
    c, H, theta = _noisy()
    f = lambda t: qg.expect(c, H, t)  # noqa: E731
    g = grad(f)(theta)
    assert np.allclose(g, _central(f, theta), atol=1e-8)
    assert check_grad(f, grad(f), theta, epsilon=1e-7) < 1e-5
    fd = grad(lambda t: qg.expect(c, H, t, gradient="difference"))(theta)
    assert np.allclose(fd, g, atol=1e-7)


def test_noisy_hamiltonian_gate_gradient_equals_central_differences():
    # the stochastic rule of Banchi and Crooks, Quantum 5, 386 (2021), by quadrature, under noise
    W = np.array([[0.3, 0.2], [0.2, -0.3]])
    pulse = qg.Gate.from_hamiltonian("pulse", drift=W, drive="X")
    c = qg.Circuit(2).h(0).add(pulse, 1).noise(1, qg.channels.depolarizing(0.1)).cnot(0, 1).ry(0)
    Z = qg.Observable({"ZZ": 1.0, "XI": 0.5})
    f = lambda t: qg.expect(c, Z, t)  # noqa: E731
    theta = np.array([0.6, -0.4])
    assert np.allclose(grad(f)(theta), _central(f, theta), atol=1e-8)


def test_noisy_hessian_equals_differences_of_gradient():
    # nested shift rules run through the density path too; reference: central differences
    c, H, theta = _noisy()
    f = lambda t: qg.expect(c, H, t)  # noqa: E731
    Hs = hessian(f)(theta)
    assert np.allclose(Hs, _central(grad(f), theta, h=1e-4), atol=1e-6)


def test_noisy_probabilities_gradient_equals_central_differences():
    # common practice: central differences
    c, _, theta = _noisy()
    f = lambda t: qg.probabilities(c, t, qubits=[0, 2])  # noqa: E731
    from autograd import jacobian

    assert np.allclose(jacobian(f)(theta), _central(f, theta).T, atol=1e-8)


# -- refusals and bad input ------------------------------------------------------------------
def test_adjoint_is_refused_for_noisy_circuits_at_the_call():
    c, H, theta = _noisy()
    with pytest.raises(ValueError, match="adjoint"):
        qg.expect(c, H, theta, gradient="adjoint")
    with pytest.raises(ValueError, match="density_matrix"):
        qg.state(c, theta)


def test_pure_state_kernels_refuse_channels_with_a_clear_message():
    # code written for pure states (the statevector run, the adjoint pass) meets a channel's
    # missing unitary as a ValueError that points to the density-matrix path
    from qgradlib.engine import run
    from qgradlib.engine.adjoint import adjoint_gradient

    c, H, theta = _noisy()
    phi = np.atleast_2d(c.angles(theta))
    with pytest.raises(ValueError, match="density-matrix path"):
        run(c, phi)
    with pytest.raises(ValueError, match="density-matrix path"):
        adjoint_gradient(c, phi, lambda psi: psi)


@pytest.mark.parametrize("method,arg,bad", [("depolarizing", "p", 1.2), ("dephasing", "p", -0.1),
                                            ("bit_flip", "p", float("nan")),
                                            ("amplitude_damping", "gamma", 1.5)])
def test_bad_probabilities_name_the_argument(method, arg, bad):
    with pytest.raises(ValueError, match=rf"\b{arg}\b"):
        getattr(qg.channels, method)(bad)
    with pytest.raises(TypeError, match=rf"\b{arg}\b"):
        getattr(qg.channels, method)("0.1")


def test_kraus_completeness_and_shapes_are_checked():
    c = qg.Circuit(2)
    with pytest.raises(ValueError, match="completeness"):
        c.noise(0, qg.channels.from_kraus([0.9 * np.eye(2)]))
    with pytest.raises(ValueError, match="same shape"):
        c.noise(0, qg.channels.from_kraus([np.eye(2) / np.sqrt(2), np.eye(4) / np.sqrt(2)]))
    with pytest.raises(TypeError, match="operators"):
        c.noise(0, qg.channels.from_kraus("not matrices"))
    with pytest.raises(ValueError, match="acts on 2 qubit"):
        c.noise(0, qg.channels.from_kraus(random_kraus(np.random.default_rng(0), 2, 2)))
    assert len(c) == 0


def test_memory_guard_refuses_a_density_matrix_too_large():
    # 4**24 * 16 bytes = 4 PiB: refused before anything is allocated
    c = qg.Circuit(24).h(0).noise(0, qg.channels.depolarizing(0.1))
    with pytest.raises(StateTooLarge, match="density matri"):
        qg.expect(c, qg.Observable({"Z" + "I" * 23: 1.0}), np.zeros(0))
    with pytest.raises(StateTooLarge):
        qg.density_matrix(c, np.zeros(0))


def test_sampling_a_noisy_circuit_follows_the_diagonal_of_rho():
    # chi-square goodness of fit (scipy.stats.chisquare) of qg.sample against diag(rho);
    # fixed seed; a correct sampler fails at this threshold with probability 1e-4
    from scipy.stats import chisquare

    c, _, theta = _noisy()
    p = np.real(np.diag(qg.density_matrix(c, theta)))
    idx = qg.sample(c, theta, shots=20000, seed=2024)
    counts = np.bincount(idx, minlength=8)
    keep = p > 1e-9
    assert counts[~keep].sum() == 0
    assert chisquare(counts[keep], 20000 * p[keep] / p[keep].sum()).pvalue > 1e-4
