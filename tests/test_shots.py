"""Finite shots: measurement settings, shot allocation, readout error, standard errors.

Statistical checks run with fixed seeds over R independent repetitions. Under a correct
implementation each check fails with the probability stated beside it (computed from the
normal, t, chi-square or F distribution with scipy.stats); the seeds are fixed, so a pass
or a failure repeats exactly. Exact values come from dense numpy kron matrices built here.
"""
import numpy as np
import pytest
from autograd import grad
from hypothesis import given, strategies as st

import qgradlib as qg
from qgradlib.engine.measurement import allocate, measurement_settings

PAULI = {"I": np.eye(2), "X": np.array([[0, 1], [1, 0]]), "Y": np.array([[0, -1j], [1j, 0]]),
         "Z": np.diag([1.0, -1.0])}
R = 200      # repetitions per statistical check
R_CAL = 1000  # repetitions where standard errors are checked: resolves a 20% miscalibration


def dense(obs):
    """sum_k c_k P_k from numpy kron products (independent of the package's index arithmetic)."""
    n = obs.n_qubits
    out = np.zeros((2 ** n, 2 ** n), dtype=complex)
    for word, c in obs.terms.items():
        m = np.array([[1.0 + 0j]])
        for ch in word:
            m = np.kron(m, PAULI[ch])
        out += c * m
    return out


def exact(circuit, obs, theta):
    if circuit.has_noise:
        return float(np.trace(qg.density_matrix(circuit, theta) @ dense(obs)).real)
    psi = qg.state(circuit, theta)
    return float(np.vdot(psi, dense(obs) @ psi).real)


def central(f, x, h=1e-5):
    # common practice: central differences, error ~ h**2
    return np.array([(f(x + h * e) - f(x - h * e)) / (2 * h) for e in np.eye(x.size)])


# a made-up two-site "rotor pair" used only as test input
def scenario(noisy=False):
    c = qg.Circuit(2).ry(0).ry(1).cnot(0, 1).rx(0)
    if noisy:
        c.noise(0, qg.channels.depolarizing(0.08)).noise(1, qg.channels.amplitude_damping(0.12))
    H = qg.Observable({"ZZ": 1.0, "XI": 0.6, "IX": -0.4, "YY": 0.3, "ZI": 0.5, "II": 0.25})
    return c, H, np.array([0.5, -0.3, 0.8])


def check_unbiased_and_calibrated(samples, ses, truth):
    """Mean within 4 standard errors of the mean (t with 999 dof: false-failure rate 7e-5);
    empirical variance / mean reported variance in [0.82, 1.2] (chi-square with 999 dof:
    false-failure rate 2e-5)."""
    samples, ses = np.asarray(samples), np.asarray(ses)
    spread = samples.std(axis=0, ddof=1)
    assert np.all(np.abs(samples.mean(axis=0) - truth) < 4 * spread / np.sqrt(len(samples)))
    ratio = spread ** 2 / np.mean(ses ** 2, axis=0)
    assert np.all((0.82 < ratio) & (ratio < 1.2)), ratio


# -- grouping ------------------------------------------------------------------------------
words = st.integers(1, 5).flatmap(lambda n: st.dictionaries(
    st.text("IXYZ", min_size=n, max_size=n), st.floats(-2, 2, allow_nan=False), min_size=1, max_size=12))


@given(words)
def test_every_group_is_qubit_wise_commuting_and_covers_the_terms(terms):
    # common practice: terms that agree letter by letter wherever both act commute, so one
    # basis rotation measures them together; checked also as matrices commuting
    obs = qg.Observable(terms)
    groups = measurement_settings(obs)
    seen = [w for g in groups for w, _ in g.terms]
    assert sorted(seen) == sorted(w for w in obs.terms if set(w) != {"I"})
    for g in groups:
        for w, c in g.terms:
            assert c == obs.terms[w]
            assert all(a == "I" or a == b for a, b in zip(w, g.basis))
        for i, (u, _) in enumerate(g.terms):
            for v, _ in g.terms[i + 1:]:
                assert all("I" in (a, b) or a == b for a, b in zip(u, v))
                mu, mv = dense(qg.Observable({u: 1.0})), dense(qg.Observable({v: 1.0}))
                assert np.allclose(mu @ mv, mv @ mu)


def test_grouping_worked_example():
    # common practice: a transverse-field chain needs two settings, all-Z and all-X
    H = qg.Observable({"ZZI": 1.0, "IZZ": 1.0, "XII": 0.5, "IXI": 0.5, "IIX": 0.5})
    assert sorted(s.basis for s in measurement_settings(H)) == ["XXX", "ZZZ"]


# -- ledger and allocation -----------------------------------------------------------------
def test_ledger_counts_circuits_times_settings():
    c, H, theta = scenario()
    S = 3  # ZZ+ZI, XI+IX, YY (identity needs none)
    assert len(measurement_settings(H)) == S
    with qg.Ledger() as book:
        qg.expect(c, H, theta, shots=300, seed=0)
    assert (book.circuits, book.executions, book.shots) == (1, S, S * 300)
    with qg.Ledger() as book:
        grad(lambda t: qg.expect(c, H, t, shots=300, seed=0))(theta)
    # common practice: the two-term rule costs two circuits per angle, plus the value
    assert (book.circuits, book.executions, book.shots) == (1 + 2 * 3, 7 * S, 7 * S * 300)
    with qg.Ledger() as book:
        r = qg.estimate(c, H, theta, shots=300, seed=0, allocation="weighted")
        g = qg.estimate_gradient(c, H, theta, shots=300, seed=0)
    assert (r.executions, r.shots, r.settings) == (S, S * 300, S)
    assert (g.circuits, g.executions, g.shots) == (6, 6 * S, 6 * S * 300)
    assert (book.executions, book.shots) == (r.executions + g.executions, r.shots + g.shots)
    with qg.Ledger() as book:
        qg.sample(c, theta, shots=50, seed=0)
    assert (book.executions, book.shots) == (1, 50)


def test_several_observables_share_settings_and_shots():
    c, H, theta = scenario()
    H2 = qg.Observable({"ZI": 1.0, "XX": 2.0})   # both fit existing settings
    with qg.Ledger() as book:
        r = qg.estimate(c, [H, H2], theta, shots=200, seed=4)
    assert r.settings == 3 and book.executions == 3 and r.value.shape == (2,)


@given(st.lists(st.floats(0, 10), min_size=1, max_size=8), st.integers(1, 500))
def test_allocation_keeps_the_budget(weights, shots):
    # weighted: total shots * S, a floor of min(2, shots) each, the rest proportional to the
    # weights up to rounding (Wecker, Hastings and Troyer, Phys. Rev. A 92, 042303 (2015))
    w = np.array(weights)
    uni = allocate(w, shots, "uniform")
    assert np.all(uni == shots)
    wt = allocate(w, shots, "weighted")
    assert wt.sum() == shots * w.size
    floor = min(2, shots)
    assert np.all(wt >= floor)
    if w.sum() > 0 and w.size > 1:
        ideal = (shots - floor) * w.size * w / w.sum()
        assert np.all(np.abs(wt - floor - ideal) < 1)


# -- unbiasedness and standard errors --------------------------------------------------------
@pytest.mark.parametrize("noisy,allocation", [(False, "uniform"), (False, "weighted"),
                                              (True, "weighted")])
def test_estimate_is_unbiased_with_calibrated_standard_errors(noisy, allocation):
    # common practice: a sample mean is unbiased and its variance is var / shots
    c, H, theta = scenario(noisy)
    runs = [qg.estimate(c, H, theta, shots=400, seed=s, allocation=allocation) for s in range(R_CAL)]
    check_unbiased_and_calibrated([r.value for r in runs], [r.standard_error for r in runs],
                                  exact(c, H, theta))


@pytest.mark.parametrize("noisy", [False, True])
def test_gradient_estimate_is_unbiased_with_calibrated_standard_errors(noisy):
    # common practice: a shift-rule estimate from finite shots is unbiased; truth from
    # central differences of the dense-matrix value
    c, H, theta = scenario(noisy)
    truth = central(lambda t: exact(c, H, t), theta)
    runs = [qg.estimate_gradient(c, H, theta, shots=300, seed=s) for s in range(R_CAL)]
    # three components, two checks each: false-failure rate below 3e-4 in all
    check_unbiased_and_calibrated([r.gradient for r in runs], [r.standard_error for r in runs], truth)


def test_shared_parameter_gradient_propagates_errors_through_the_chain_rule():
    # one parameter drives two gates: its gradient sums both shift rules (and the errors add
    # in quadrature); truth from central differences
    c = qg.Circuit(2).ry(0).ry(1, param=0, scale=-1.5).cnot(0, 1).crx(1, 0)
    H = qg.Observable({"ZZ": 1.0, "XI": 0.7})
    theta = np.array([0.4, 1.1])
    truth = central(lambda t: exact(c, H, t), theta)
    runs = [qg.estimate_gradient(c, H, theta, shots=200, seed=1000 + s) for s in range(R_CAL)]
    check_unbiased_and_calibrated([r.gradient for r in runs], [r.standard_error for r in runs], truth)


def test_expect_with_shots_has_an_unbiased_autograd_gradient():
    # common practice: the shift rule on finite-shot values is unbiased (|t| < 4: 9e-5 per component)
    c, H, theta = scenario(noisy=True)
    truth = central(lambda t: exact(c, H, t), theta)
    g = np.array([grad(lambda t: qg.expect(c, H, t, shots=200, seed=s))(theta) for s in range(R)])
    assert np.all(np.abs(g.mean(0) - truth) < 4 * g.std(0, ddof=1) / np.sqrt(R))


def test_variance_falls_as_one_over_shots():
    # common practice: var(mean of s shots) = sigma**2 / s. The ratio of empirical variances
    # at 100 and 1600 shots, divided by 16, is F(199, 199): outside [0.5, 2] with rate 1.3e-6
    c, H, theta = scenario()
    lo = [qg.estimate(c, H, theta, shots=100, seed=s) for s in range(R)]
    hi = [qg.estimate(c, H, theta, shots=1600, seed=R + s) for s in range(R)]
    ratio = np.var([r.value for r in lo], ddof=1) / np.var([r.value for r in hi], ddof=1) / 16
    assert 0.5 < ratio < 2.0
    # the reported errors scale the same way (their averages carry ~1% noise here)
    se_ratio = np.mean([r.standard_error ** 2 for r in lo]) / np.mean([r.standard_error ** 2 for r in hi])
    assert se_ratio / 16 == pytest.approx(1.0, rel=0.1)


def test_weighted_allocation_matches_the_variance_formula():
    # Wecker, Hastings and Troyer, Phys. Rev. A 92, 042303 (2015): with s_g shots on group g
    # the variance is sum_g sigma_g**2 / s_g, least for s_g proportional to |c_g| sigma_g
    c = qg.Circuit(1).ry(0)
    theta = np.array([0.9])
    H = qg.Observable({"Z": 4.0, "X": 0.2})
    ez, ex = np.cos(0.9), np.sin(0.9)                 # <Z>, <X> of RY(0.9)|0>
    var = {"Z": 16 * (1 - ez ** 2), "X": 0.04 * (1 - ex ** 2)}
    out = {}
    for allocation in ("uniform", "weighted"):
        s = dict(zip((st.basis for st in measurement_settings(H)),
                     allocate([4.0, 0.2], 100, allocation)))
        predicted = var["Z"] / s["Z"] + var["X"] / s["X"]
        vals = [qg.estimate(c, H, theta, shots=100, seed=s_, allocation=allocation).value
                for s_ in range(R)]
        out[allocation] = np.var(vals, ddof=1)
        # chi-square with 199 dof: outside [0.6, 1.5] with rate 8e-6
        assert 0.6 < out[allocation] / predicted < 1.5
    # predicted ratio 0.53; F(199, 199) exceeds 1/0.53 with rate ~1e-5
    assert out["weighted"] < out["uniform"]


def test_dense_observable_with_shots_is_unbiased():
    # a dense Hermitian part is measured in its eigenbasis; truth psi^dagger M psi (numpy)
    rng = np.random.default_rng(8)
    A = rng.normal(size=(4, 4)) + 1j * rng.normal(size=(4, 4))
    M = (A + A.conj().T) / 4
    c, _, theta = scenario()
    obs = qg.Observable.from_matrix(M) + qg.Observable({"ZX": 0.5})
    psi = qg.state(c, theta)
    truth = float(np.vdot(psi, (M + 0.5 * np.kron(PAULI["Z"], PAULI["X"])) @ psi).real)
    runs = [qg.estimate(c, obs, theta, shots=300, seed=s) for s in range(R_CAL)]
    assert runs[0].settings == 2
    check_unbiased_and_calibrated([r.value for r in runs], [r.standard_error for r in runs], truth)


# -- readout error ------------------------------------------------------------------------
def test_readout_scales_each_measured_letter_by_one_minus_two_e():
    # common practice (a bit flip with probability e, Nielsen and Chuang sec. 8.3.3, applied
    # to the read bit): E[(-1)**b] becomes (1 - 2e) E[(-1)**b], one factor per measured qubit
    c, _, theta = scenario(noisy=True)
    e = (0.03, 0.11)
    for word in ("ZZ", "XI", "IY", "YX"):
        P = qg.Observable({word: 1.0})
        factor = np.prod([1 - 2 * e[q] for q, ch in enumerate(word) if ch != "I"])
        got = qg.expect(c, P, theta, readout=e)
        assert got == pytest.approx(factor * exact(c, P, theta), abs=1e-12)
    # and the finite-shot estimate is unbiased for it
    _, H, _ = scenario()
    truth = sum(cf * np.prod([1 - 2 * e[q] for q, ch in enumerate(w) if ch != "I"]) *
                exact(c, qg.Observable({w: 1.0}), theta) for w, cf in H.terms.items())
    runs = [qg.estimate(c, H, theta, shots=300, seed=s, readout=e) for s in range(R_CAL)]
    check_unbiased_and_calibrated([r.value for r in runs], [r.standard_error for r in runs], truth)


def test_readout_keeps_the_shift_rule_exact():
    # readout acts on outcomes, not on angles; reference: central differences
    c, H, theta = scenario(noisy=True)
    f = lambda t: qg.expect(c, H, t, readout=0.05)  # noqa: E731
    assert np.allclose(grad(f)(theta), central(f, theta), atol=1e-8)


def test_readout_on_probabilities_and_samples():
    c = qg.Circuit(2).x(1)
    e = [0.1, 0.25]
    # exact distribution of |01> after independent flips: P(b0, b1) = P(b0) P(b1)
    want = np.kron([0.9, 0.1], [0.25, 0.75])
    assert np.allclose(qg.probabilities(c, np.zeros(0), readout=e), want, atol=1e-15)
    # binomial check of flipped bits in 20000 samples: |k - N p| < 4.5 sd, rate 7e-6 each
    idx = qg.sample(c, np.zeros(0), shots=20000, seed=9, readout=e)
    b0, b1 = idx >> 1, idx & 1
    for k, p in ((b0.sum(), 0.1), ((1 - b1).sum(), 0.25)):
        assert abs(k - 20000 * p) < 4.5 * np.sqrt(20000 * p * (1 - p))


# -- reproducibility and bad input ---------------------------------------------------------
def test_same_seed_same_numbers():
    c, H, theta = scenario(noisy=True)
    a = qg.estimate(c, H, theta, shots=100, seed=7, allocation="weighted", readout=0.02)
    b = qg.estimate(c, H, theta, shots=100, seed=7, allocation="weighted", readout=0.02)
    assert a == b
    g1 = qg.estimate_gradient(c, H, theta, shots=100, seed=np.random.default_rng(3))
    g2 = qg.estimate_gradient(c, H, theta, shots=100, seed=np.random.default_rng(3))
    assert np.array_equal(g1.gradient, g2.gradient)
    # expect draws the same shots as estimate for one point
    assert qg.expect(c, H, theta, shots=100, seed=7) == qg.estimate(c, H, theta, shots=100, seed=7).value


def test_batched_estimate_shapes():
    c, H, theta = scenario()
    thetas = np.stack([theta, theta + 0.2, theta - 0.1])
    r = qg.estimate(c, [H, H], thetas, shots=50, seed=0)
    assert r.value.shape == (3, 2) == r.standard_error.shape
    g = qg.estimate_gradient(c, H, thetas, shots=50, seed=0)
    assert g.gradient.shape == (3, 3) == g.standard_error.shape
    assert r.executions == 3 * 3


@pytest.mark.parametrize("kwargs,err,match", [
    (dict(shots=100, readout=0.6), ValueError, "readout"),
    (dict(shots=100, readout=[0.1]), ValueError, "readout"),
    (dict(shots=100, readout=True), TypeError, "readout"),
    (dict(shots=100, readout="0.1"), TypeError, "readout"),
    (dict(shots=100, allocation="optimal"), ValueError, "allocation"),
    (dict(shots=1), ValueError, "shots"),
    (dict(shots=None), ValueError, "shots"),
    (dict(shots=2.5), ValueError, "shots"),
    (dict(shots=100, seed="x"), TypeError, "seed"),
])
def test_bad_options_name_the_argument(kwargs, err, match):
    c, H, theta = scenario()
    with pytest.raises(err, match=match):
        qg.estimate(c, H, theta, **kwargs)


def test_readout_refused_for_dense_observables_and_adjoint():
    c, H, theta = scenario()
    with pytest.raises(ValueError, match="readout"):
        qg.expect(c, qg.Observable.from_matrix(np.eye(4)), theta, shots=10, readout=0.1)
    with pytest.raises(ValueError, match="adjoint"):
        qg.expect(c, H, theta, readout=0.1, gradient="adjoint")
