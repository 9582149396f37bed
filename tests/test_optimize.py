"""Optimisers: one-step hand computations, published results, scipy interop, refusals."""
import autograd
import autograd.numpy as anp
import numpy as np
import pytest
import scipy.optimize as so
import scipy.sparse.linalg as sla

import qgradlib as qg
from qgradlib import models
from qgradlib.train.optimize import minimize, minimize_expectation, spsa_estimate
from qgradlib.train.rotosolve import frequencies_by_parameter, sinusoid_minimum


@pytest.fixture
def curvature():
    return qg.curvature


Z1 = qg.Observable({"Z": 1.0})


def one_qubit():
    # |psi> = RY(b) RX(a) |0>, <Z> = cos a cos b  (common practice: direct 2x2 algebra)
    return qg.Circuit(1).rx(0).ry(0)


def energy_parts(a, b):
    E = np.cos(a) * np.cos(b)
    g = np.array([-np.sin(a) * np.cos(b), -np.cos(a) * np.sin(b)])
    H = np.array([[-np.cos(a) * np.cos(b), np.sin(a) * np.sin(b)],
                  [np.sin(a) * np.sin(b), -np.cos(a) * np.cos(b)]])
    return E, g, H


# -- one-step hand computations ------------------------------------------------------------------
def test_gd_step_matches_hand_computation():
    x0 = np.array([0.4, 0.7])
    _, g, _ = energy_parts(*x0)
    r = minimize_expectation(one_qubit(), Z1, x0, method="gd", steps=1, rate=0.3)
    assert np.allclose(r.x, x0 - 0.3 * g, atol=1e-12)
    assert np.allclose(r.history["cost"], [np.cos(x0[0]) * np.cos(x0[1]), np.cos(r.x[0]) * np.cos(r.x[1])])


def test_adam_first_step_is_rate_times_sign():
    # Kingma and Ba, ICLR 2015, Sec. 2.1: with bias correction the first step is
    # alpha * g / (|g| + eps), i.e. alpha * sign(g) per coordinate
    x0 = np.array([0.4, 0.7])
    _, g, _ = energy_parts(*x0)
    r = minimize_expectation(one_qubit(), Z1, x0, method="adam", steps=1, rate=0.05, eps=1e-12)
    assert np.allclose(r.x, x0 - 0.05 * np.sign(g), atol=1e-10)


@pytest.mark.parametrize("structure", ["full", "layerwise"])
def test_natural_gradient_step_matches_hand_computation(curvature, structure):
    # Stokes, Izaac, Killoran and Carleo, Quantum 4, 269 (2020): metric of RY(b) RX(a)|0> is
    # diag(Var_{|0>}(X/2), Var_{RX(a)|0>}(Y/2)) = diag(1/4, cos(a)^2 / 4); the off-diagonal
    # term vanishes because <X> = 0 after RX(a)|0> and <XY> is imaginary (hand computation)
    a, b = 0.4, 0.7
    _, g, _ = energy_parts(a, b)
    F = np.diag([0.25, np.cos(a) ** 2 / 4])
    lam, eta = 0.01, 0.1
    expected = np.array([a, b]) - eta * np.linalg.solve(F + lam * np.eye(2), g)
    r = minimize_expectation(one_qubit(), Z1, np.array([a, b]), method="natural", steps=1,
                             rate=eta, regulariser=lam, metric=structure)
    assert np.allclose(r.x, expected, atol=1e-8)


def test_newton_step_matches_hand_computation(curvature):
    # closed-form gradient and Hessian of cos a cos b; Levenberg-Marquardt step
    # -(H + mu I)^-1 g with mu = damping where H is positive definite (common practice)
    x0 = np.array([2.8, 0.3])
    E, g, H = energy_parts(*x0)
    assert np.all(np.linalg.eigvalsh(H) > 0)
    mu = 0.05
    expected = x0 - np.linalg.solve(H + mu * np.eye(2), g)
    r = minimize_expectation(one_qubit(), Z1, x0, method="newton", steps=1, damping=mu)
    assert np.allclose(r.x, expected, atol=1e-8)
    assert r.history["cost"][0] == pytest.approx(E, abs=1e-12)


def test_newton_from_near_a_maximum_only_descends_and_converges(curvature):
    # near the maximum (0, 0) the Hessian is negative definite: the damping shift keeps every
    # kept step downhill (Levenberg-Marquardt refuses uphill steps), ending at the minimum -1
    r = minimize_expectation(one_qubit(), Z1, np.array([0.2, -0.1]), method="newton", steps=40)
    assert np.all(np.diff(r.history["cost"]) <= 1e-12)
    assert r.fun == pytest.approx(-1.0, abs=1e-9)
    assert r.success


# -- rotosolve ------------------------------------------------------------------------------------
@pytest.mark.parametrize("seed", range(5))
def test_sinusoid_minimum_matches_closed_form(seed):
    # a + b cos x + c sin x = a + sqrt(b^2 + c^2) cos(x - atan2(c, b)): least value a - sqrt(b^2+c^2)
    # at x = atan2(c, b) + pi (closed form); slope at x0 is -b sin x0 + c cos x0
    rng = np.random.default_rng(seed)
    a, b, c, x0 = rng.normal(size=4)
    w = rng.uniform(0.5, 3.0)
    f = lambda x: a + b * np.cos(w * x) + c * np.sin(w * x)  # noqa: E731
    h = np.pi / (2 * w)
    x, value, slope = sinusoid_minimum(f(x0), f(x0 + h), f(x0 - h), x0, w)
    assert value == pytest.approx(a - np.hypot(b, c), abs=1e-12)
    assert f(x) == pytest.approx(value, abs=1e-12)
    assert np.cos(w * x - np.arctan2(c, b)) == pytest.approx(-1.0, abs=1e-12)
    assert slope == pytest.approx(w * (-b * np.sin(w * x0) + c * np.cos(w * x0)), abs=1e-12)
    assert abs(x - x0) <= np.pi / w + 1e-12


def test_one_rotosolve_step_lands_on_exact_minimum_of_circuit_cost():
    # RY(t)|0> has <Z> = cos t and <X> = sin t, so <a I + b Z + c X> = a + b cos t + c sin t;
    # its minimum a - sqrt(b^2 + c^2) sits at t = atan2(c, b) + pi (closed form)
    a, b, c = 0.3, -0.8, 0.45
    H = qg.Observable({"I": a, "Z": b, "X": c})
    circ = qg.Circuit(1).ry(0)
    r = minimize_expectation(circ, H, np.array([1.1]), method="rotosolve", steps=1)
    assert r.fun == pytest.approx(a - np.hypot(b, c), abs=1e-12)
    assert np.cos(r.x[0] - np.arctan2(c, b)) == pytest.approx(-1.0, abs=1e-12)
    # one sweep of one parameter: three circuits (Ostaszewski, Grant and Benedetti,
    # Quantum 5, 391 (2021)), each measured in the Z and X settings
    assert r.history["executions"][0] == 3 * 2
    assert np.allclose(r.jac, 0.0, atol=1e-12)


def test_rotosolve_handles_a_scaled_parameter():
    # RZ(2 t) between Hadamards: <Z> = cos(2 t) (common practice), frequency 2 in t
    circ = qg.Circuit(1).h(0).rz(0, scale=2.0).h(0)
    H = qg.Observable({"Z": 1.0, "Y": 0.5})
    r = minimize_expectation(circ, H, np.array([0.1]), method="rotosolve", steps=1)
    assert r.fun == pytest.approx(-np.hypot(1.0, 0.5), abs=1e-12)
    grid = np.linspace(-np.pi, np.pi, 2001)
    assert r.fun <= qg.expect(circ, H, grid[:, None]).min() + 1e-12


def test_rotosolve_with_shots_is_reproducible_and_counts_shots():
    circ = models.layered(2, 1)
    H = models.ising_chain(2, periodic=False)
    kw = dict(method="rotosolve", steps=3, shots=500, seed=11)
    r1 = minimize_expectation(circ, H, np.full(circ.n_params, 0.2), **kw)
    r2 = minimize_expectation(circ, H, np.full(circ.n_params, 0.2), **kw)
    assert np.array_equal(r1.x, r2.x)
    assert r1.shots == 500 * r1.executions


def test_rotosolve_minimises_a_shared_parameter_exactly():
    # QAOA on a ring of 4: gamma drives 4 RZZ gates and beta 4 RX gates (4 frequencies each,
    # multiples of one base), so one coordinate step takes 2R = 8 new circuits (Wierichs, Izaac, Wang and Lin, Quantum
    # 6, 677 (2022): 2R + 1 values fix the cost, the one at the current point is known)
    g = models.ring(4)
    circ, H = models.qaoa(g, p=1), models.maxcut(g)
    freqs = frequencies_by_parameter(circ)
    assert [w.size for w in freqs] == [4, 4]
    r = minimize_expectation(circ, H, np.array([0.1, 0.2]), method="rotosolve", steps=1, tol=0.0)
    # the last coordinate visited is at its exact minimum: dense evaluation over its period
    grid = np.linspace(-2 * np.pi, 2 * np.pi, 8001)
    X = np.repeat(r.x[None], grid.size, axis=0)
    X[:, 1] = grid
    assert r.fun <= qg.expect(circ, H, X).min() + 1e-12
    assert r.history["executions"][0] == 1 + 2 * 8       # the start, then 8 per coordinate (Z only)


def test_the_frequencies_of_a_grown_circuit_are_worked_out_again():
    # common practice: a Pauli rotation's expectation value has the one frequency 1 in its
    # angle; an RZZ read by the same parameter twice gives frequencies 1 and 2
    c = qg.Circuit(2).ry(0)
    assert [w.tolist() for w in frequencies_by_parameter(c)] == [[1.0]]
    c.rzz(0, 1, param=0)
    assert [w.tolist() for w in frequencies_by_parameter(c)] == [[1.0, 2.0]]
    c.ry(1)
    freqs = frequencies_by_parameter(c)
    assert len(freqs) == 2 and freqs[1].tolist() == [1.0]


def test_rotosolve_minimises_a_controlled_rotation_exactly():
    # one CRX parameter: frequencies 1/2 and 1, period 4 pi; the minimum against dense
    # evaluation refined by scipy's bounded scalar minimiser (reference library)
    from scipy.optimize import minimize_scalar
    circ = qg.Circuit(2).h(0).ry(1, angle=0.3).crx(0, 1)
    H = qg.Observable({"ZZ": 1.0, "IY": 0.6, "XX": -0.4})
    r = minimize_expectation(circ, H, np.array([0.2]), method="rotosolve", steps=1)
    f = lambda t: float(qg.expect(circ, H, np.array([t])))   # noqa: E731
    grid = np.linspace(0, 4 * np.pi, 4001)
    t0 = grid[np.argmin(qg.expect(circ, H, grid[:, None]))]
    ref = minimize_scalar(f, bounds=(t0 - 0.01, t0 + 0.01), method="bounded", options={"xatol": 1e-12})
    assert r.fun == pytest.approx(ref.fun, abs=1e-10)
    assert np.allclose(r.jac, 0.0, atol=1e-7)
    # one step: the value, then 2R = 4 points of the reconstruction, each in 3 settings
    assert r.history["executions"][0] == (1 + 4) * 3


def test_rotosolve_refuses_hamiltonian_gates():
    gate = qg.Gate.from_hamiltonian("pulse", drift=np.diag([0.3, -0.3]), drive="X")
    circ = qg.Circuit(1).add(gate, 0)
    with pytest.raises(ValueError, match="kind 'hamiltonian'"):
        minimize_expectation(circ, Z1, np.zeros(1), method="rotosolve")


# -- published results ----------------------------------------------------------------------------
def test_qaoa_p1_on_ring_of_8_reaches_cut_fraction_three_quarters():
    # Farhi, Goldstone and Gutmann, arXiv:1411.4028 (2014): on a ring (2-regular graph) p = 1
    # QAOA reaches an expected cut of 3/4 of the edges, and no more
    E = models.ring(8)
    C = models.maxcut(E)
    r = minimize_expectation(models.qaoa(E, p=1), C, np.array([0.5, 0.3]), method="adam",
                             steps=200, rate=0.05)
    fraction = -r.fun / len(E)
    assert fraction == pytest.approx(0.75, abs=1e-6)
    assert fraction <= 0.75 + 1e-9
    # the best cut of the even ring is all 8 edges (scipy eigsh on the cost observable)
    assert sla.eigsh(C.matrix(), k=1, which="SA")[0][0] == pytest.approx(-8.0, abs=1e-9)


def pfeuty_ground_energy(n, J=1.0, g=1.0):
    # Pfeuty, Annals of Physics 57, 79 (1970): the periodic chain -J sum ZZ - g sum X maps to
    # free fermions with energies 2 sqrt(J^2 + g^2 - 2 J g cos k); for even n the ground state
    # lies in the even-parity sector with antiperiodic momenta k = (2m + 1) pi / n
    k = (2 * np.arange(n) + 1) * np.pi / n
    return -np.sum(np.sqrt(J ** 2 + g ** 2 - 2 * J * g * np.cos(k)))


@pytest.mark.parametrize("n,g", [(4, 1.0), (6, 1.0), (6, 0.6)])
def test_pfeuty_closed_form_agrees_with_eigsh(n, g):
    H = models.ising_chain(n, J=1.0, g=g)
    assert sla.eigsh(H.matrix(), k=1, which="SA")[0][0] == pytest.approx(pfeuty_ground_energy(n, 1.0, g), abs=1e-10)


def test_variational_search_on_periodic_ising_chain_reaches_pfeuty_energy():
    # n = 4 at the critical point g = J with the Hamiltonian-variational circuit (the QAOA form
    # on the ring, p = n/2 layers), trained with adam; target: Pfeuty (1970), within 1e-3
    n = 4
    H = models.ising_chain(n)
    exact = pfeuty_ground_energy(n)
    r = minimize_expectation(models.qaoa(models.ring(n), p=2), H, np.full(4, 0.3), method="adam",
                             steps=300, rate=0.05)
    assert abs(r.fun - exact) < 1e-3
    assert r.fun >= exact - 1e-12  # variational: never below the ground energy


def test_scipy_minimize_with_value_and_grad_reaches_pfeuty_energy_for_six_sites():
    # scipy interop: scipy.optimize.minimize(autograd.value_and_grad(cost), x0, jac=True) on our
    # cost; target Pfeuty (1970) for n = 6, within 1e-3
    n = 6
    H = models.ising_chain(n)
    circ = models.qaoa(models.ring(n), p=3)
    cost = lambda t: qg.expect(circ, H, t)  # noqa: E731
    r = so.minimize(autograd.value_and_grad(cost), np.full(circ.n_params, 0.3), jac=True, method="BFGS")
    assert abs(r.fun - pfeuty_ground_energy(n)) < 1e-3
    # and the shift-rule gradient it used agrees with scipy's finite differences
    assert so.check_grad(cost, autograd.grad(cost), np.full(circ.n_params, 0.3)) < 1e-5


# -- spsa -----------------------------------------------------------------------------------------
def test_spsa_estimate_is_unbiased_for_a_quadratic():
    # Spall, IEEE Trans. Autom. Control 37, 332 (1992): with +-1 perturbations the two-point
    # estimate of a quadratic's gradient has mean equal to the gradient. Component i has
    # variance sum_{j != i} g_j^2; a 5-sigma band over 4000 draws fails with probability ~1e-6
    A = np.array([[2.0, 0.3, 0.0], [0.3, 1.0, -0.4], [0.0, -0.4, 3.0]])
    b = np.array([0.5, -1.0, 0.2])
    f = lambda X: 0.5 * np.einsum("bi,ij,bj->b", X, A, X) + X @ b  # noqa: E731
    x = np.array([0.3, -0.2, 0.7])
    g = A @ x + b
    rng = np.random.default_rng(2)
    draws = np.array([spsa_estimate(f, x, 0.1, rng)[1] for _ in range(4000)])
    sigma = np.sqrt((g @ g - g ** 2) / 4000)
    assert np.all(np.abs(draws.mean(axis=0) - g) < 5 * sigma)


def test_spsa_with_shots_lowers_the_cost_reproducibly():
    circ = models.layered(2, 1)
    H = models.ising_chain(2, periodic=False)
    kw = dict(method="spsa", steps=60, shots=400, seed=5)
    r1 = minimize_expectation(circ, H, np.zeros(circ.n_params), **kw)
    r2 = minimize_expectation(circ, H, np.zeros(circ.n_params), **kw)
    assert np.array_equal(r1.x, r2.x)
    exact = lambda t: qg.expect(circ, H, t)  # noqa: E731
    # from |00> (cost -1) towards the ground energy -sqrt(5) (2x2 algebra): with a fixed seed the
    # run is deterministic, and the drop asked for is far larger than the shot noise (~0.05)
    assert exact(r1.x) < exact(np.zeros(circ.n_params)) - 0.8


# -- the generic minimize ------------------------------------------------------------------------
def test_minimize_generic_cost_with_classical_term():
    circ = models.layered(2, 1)
    H = models.ising_chain(2, periodic=False)

    def cost(t):
        return qg.expect(circ, H, t) + 0.01 * anp.sum(t ** 2)
    r = minimize(cost, np.full(circ.n_params, 0.3), method="adam", steps=400, rate=0.05)
    # scipy's BFGS started from our answer finds nothing lower: a stationary point was reached
    ref = so.minimize(autograd.value_and_grad(cost), r.x, jac=True, method="BFGS")
    assert r.fun <= ref.fun + 1e-5
    assert r.executions > 0 and r.shots == 0
    h = r.history
    assert len(h["cost"]) == len(h["grad_norm"]) == len(h["executions"]) == r.nit + 1
    assert np.all(np.diff(h["executions"]) > 0)


def test_tolerance_stops_and_reports_success():
    r = minimize(lambda t: anp.sum((t - 1.0) ** 2), np.zeros(3), method="gd", rate=0.25, tol=1e-8)
    assert r.success and r.status == 0 and r.nit < 100
    r = minimize(lambda t: anp.sum((t - 1.0) ** 2), np.zeros(3), method="gd", steps=3)
    assert not r.success and r.status == 1 and r.nit == 3 and "steps=3" in r.message


def test_callback_styles_and_stopping():
    seen = []
    minimize(lambda t: anp.sum(t ** 2), np.ones(2), method="gd", steps=4, callback=seen.append)
    assert len(seen) == 4 and all(isinstance(x, np.ndarray) and x.shape == (2,) for x in seen)

    results = []

    def cb(intermediate_result):
        results.append(intermediate_result)
        if intermediate_result.nit == 2:
            raise StopIteration
    r = minimize(lambda t: anp.sum(t ** 2), np.ones(2), method="gd", steps=10, callback=cb)
    assert r.status == 2 and r.nit == 2 and not r.success
    assert results[-1].fun == pytest.approx(r.fun) and np.allclose(results[-1].x, r.x)


# -- bad input ------------------------------------------------------------------------------------
def test_bad_input_is_refused_clearly():
    f = lambda t: anp.sum(t ** 2)  # noqa: E731
    with pytest.raises(ValueError, match="method must be one of"):
        minimize(f, np.ones(2), method="bfgs")
    with pytest.raises(ValueError, match="minimize_expectation"):
        minimize(f, np.ones(2), method="natural")
    with pytest.raises(TypeError, match="unknown"):
        minimize(f, np.ones(2), method="gd", betas=(0.9, 0.9))
    with pytest.raises(ValueError, match="rate"):
        minimize(f, np.ones(2), method="adam", rate=-1.0)
    with pytest.raises(ValueError, match="betas"):
        minimize(f, np.ones(2), method="adam", betas=(0.9, 1.0))
    with pytest.raises(ValueError, match="steps"):
        minimize(f, np.ones(2), steps=-1)
    with pytest.raises(ValueError, match="theta0"):
        minimize(f, np.array([np.nan]))
    with pytest.raises(ValueError, match="theta0"):
        minimize(f, np.ones((2, 2)))
    with pytest.raises(ValueError, match="returned nan"):
        minimize(lambda t: anp.sum(t) * np.nan, np.ones(2))
    with pytest.raises(ValueError, match="real scalar"):
        minimize(lambda t: t * 2.0, np.ones(2))
    with pytest.raises(TypeError, match="callback"):
        minimize(f, np.ones(2), callback=3)
    with pytest.raises(TypeError, match="progress"):
        minimize(f, np.ones(2), progress="yes")
    circ = one_qubit()
    with pytest.raises(ValueError, match=r"theta must have shape \(2,\)"):
        minimize_expectation(circ, Z1, np.ones(3))
    with pytest.raises(ValueError, match="observable acts on 2 qubits"):
        minimize_expectation(circ, qg.Observable({"ZZ": 1.0}), np.ones(2))
    with pytest.raises(ValueError, match="metric"):
        minimize_expectation(circ, Z1, np.ones(2), method="natural", metric="blocks")
    with pytest.raises(ValueError, match="gradient must be one of"):
        minimize_expectation(circ, Z1, np.ones(2), method="gd", gradient="magic")
    with pytest.raises(ValueError, match="no trainable parameters"):
        minimize_expectation(qg.Circuit(1).h(0), Z1, np.zeros(0))
