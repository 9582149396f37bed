"""Tests of qgradlib.curvature.tensors against outside references, each named beside its check.

References: tests/reference/curv_dense.py (full matrices, scipy.linalg.expm / expm_frechet,
written for these tests), finite differences of its exact gradient, autograd's nested
derivatives of qg.expect, published formulas and counts.
"""
import warnings
from math import comb

import numpy as np
import pytest
from autograd import hessian as ag_hessian
from scipy.linalg import expm

import qgradlib as qg
from qgradlib import curvature
from qgradlib.curvature import metric
from reference import curv_dense as ref

X = np.array([[0, 1], [1, 0]], dtype=complex)


# -- circuits -----------------------------------------------------------------------------
def standard_circuit():
    """Single-frequency gates, a shared and scaled parameter, a fixed angle."""
    c = qg.Circuit(3)
    c.h(0).ry(1).cnot(0, 1).rz(2, param=0, scale=2.0, offset=0.1).rx(0)
    c.rx(1, angle=0.25).cz(1, 2).ry(2).rzz(0, 2).sx(1).rx(1, param=1, scale=-0.5)
    return c, np.array([0.3, -0.7, 1.1, 0.4])


def controlled_circuit():
    """Multi-frequency gates: CRX, CRY, CRZ (frequencies 1/2 and 1), CPHASE, PHASE."""
    c = qg.Circuit(3)
    c.h(0).h(1).ry(2).crx(0, 1).cry(1, 2).crz(2, 0).cphase(0, 2).phase(1).cnot(2, 0)
    return c, np.array([0.5, -0.4, 1.3, 0.8, -1.2, 0.6])


def custom_circuit():
    """A custom generator with incommensurate frequencies (1, 1.7, 2.7: the general rule)."""
    hop = qg.Gate.from_generator("hop", np.diag([0.0, 1.0, 2.7, 0.0]))
    c = qg.Circuit(2).h(0).h(1).add(hop, (0, 1)).ry(0).cnot(0, 1).add(hop, (1, 0))
    return c, np.array([0.4, -0.9, 0.7])


def driven_circuit():
    """A Hamiltonian gate expm(-1j (W + a P)) whose drift does not commute with the drive."""
    W = np.array([[0.3, 0.4], [0.4, -0.3]])
    drive = qg.Gate.from_hamiltonian("driven", drift=W, drive="Z")
    c = qg.Circuit(2).ry(0).add(drive, 1).cnot(0, 1).rx(1, param=0, scale=0.5)
    return c, np.array([0.6, 0.9])


OBS3 = qg.Observable({"ZZI": -1.0, "IZZ": -0.7, "XII": -0.5, "IYX": 0.3})
OBS2 = qg.Observable({"ZZ": 1.0, "XI": -0.4, "IY": 0.6})
CASES = {"standard": (standard_circuit, OBS3), "controlled": (controlled_circuit, OBS3),
         "custom": (custom_circuit, OBS2), "driven": (driven_circuit, OBS2)}


# -- Hessians and higher tensors ----------------------------------------------------------
@pytest.mark.parametrize("name", sorted(CASES))
def test_hessian_vs_fd_of_expm_frechet_gradient(name):
    # source: central differences of the exact gradient built from scipy's expm_frechet
    make, obs = CASES[name]
    c, th = make()
    r = curvature.hessian(c, obs, th)
    assert np.isclose(r.value, ref.expectation(c, obs, th), atol=1e-12)
    np.testing.assert_allclose(r.gradient, ref.gradient(c, obs, th), atol=1e-10)
    np.testing.assert_allclose(r.hessian, ref.hessian_fd(c, obs, th), atol=1e-7)
    np.testing.assert_array_equal(r.hessian, r.hessian.T)   # symmetric by construction


@pytest.mark.parametrize("name", sorted(CASES))
def test_hessian_vs_autograd_nested_vjp(name):
    # source: autograd.hessian of qg.expect (the shift VJP applied twice, through autograd).
    # For the Hamiltonian gate this also guards plans.column_terms' piecewise quadrature
    # between existing split points (integrating across the kinks was off by ~3e-3).
    make, obs = CASES[name]
    c, th = make()
    r = curvature.hessian(c, obs, th)
    np.testing.assert_allclose(r.hessian, ag_hessian(lambda t: qg.expect(c, obs, t))(th), atol=1e-9)


@pytest.mark.parametrize("name", ["standard", "controlled", "custom"])
def test_third_order_vs_second_differences_of_exact_gradient(name):
    # source: second central differences (h = 1e-3, error ~1e-6) of the expm_frechet gradient
    make, obs = CASES[name]
    c, th = make()
    d = curvature.derivatives(c, obs, th, order=3)
    T = d.tensor
    np.testing.assert_allclose(T, ref.third_fd(c, obs, th), atol=2e-5)
    for perm in [(1, 0, 2), (0, 2, 1), (2, 1, 0), (1, 2, 0)]:
        np.testing.assert_allclose(T, T.transpose(perm), atol=1e-13)   # symmetry
    r = curvature.hessian(c, obs, th)
    np.testing.assert_allclose(d.tensors[2], r.hessian, atol=1e-13)
    np.testing.assert_allclose(d.tensors[1], r.gradient, atol=1e-13)


def test_fourth_order_of_a_product_state_closed_form():
    # common practice: after RY(a_q) on each qubit, <Z..Z> = prod_q cos(a_q), so
    # d^{k_1}...d^{k_m} E = prod_q cos^{(k_q)}(a_q) with cos' = -sin, cos'' = -cos, ...
    th = np.array([0.3, -1.1, 0.7])
    c = qg.Circuit(3).ry(0).ry(1).ry(2)
    d = curvature.derivatives(c, qg.Observable({"ZZZ": 1.0}), th, order=4)
    cos_k = lambda a, k: [np.cos, lambda x: -np.sin(x), lambda x: -np.cos(x), np.sin][k % 4](a)  # noqa: E731
    T = d.tensor
    for idx in np.ndindex(T.shape):
        k = np.bincount(idx, minlength=3)
        assert np.isclose(T[idx], np.prod([cos_k(a, kq) for a, kq in zip(th, k)]), atol=1e-12)
    # two-term columns, order 4: displacements by 0 or +-pi/2 in at most 4 of the G = 3 columns
    assert d.executions == sum(comb(3, j) * 2 ** j for j in range(4)) == 27


def test_fourth_order_vs_autograd_four_times_nested():
    # source: autograd's jacobian nested on qg.expect (shift VJPs four levels deep)
    from autograd import jacobian
    c = qg.Circuit(2).ry(0).crx(0, 1).rx(1)
    obs = qg.Observable({"ZY": 1.0, "XZ": 0.5})
    th = np.array([0.4, 1.2, -0.3])
    f = lambda t: qg.expect(c, obs, t)  # noqa: E731
    T4 = jacobian(jacobian(jacobian(jacobian(f))))(th)
    np.testing.assert_allclose(curvature.derivatives(c, obs, th, order=4).tensor, T4, atol=1e-9)


def test_hessian_of_several_observables_stacks_them():
    # source: the dense reference, per observable
    c, th = controlled_circuit()
    obs = [OBS3, qg.Observable({"XXX": 1.0})]
    r = curvature.hessian(c, obs, th)
    assert r.hessian.shape == (2, 6, 6) and r.gradient.shape == (2, 6)
    for k, o in enumerate(obs):
        np.testing.assert_allclose(r.hessian[k], ref.hessian_fd(c, o, th), atol=1e-7)


def test_function_gate_uses_finite_differences_and_warns():
    # source: the function gate is scipy's expm(-1j a X / 2), i.e. RX; compare with the dense
    # reference of the same circuit written with RX
    fx = qg.Gate.from_function("fx", lambda a: expm(-0.5j * a * X), 1)
    c = qg.Circuit(2).ry(0).add(fx, 1).cnot(0, 1).add(fx, 0)
    c_rx = qg.Circuit(2).ry(0).rx(1).cnot(0, 1).rx(0)
    th = np.array([0.3, 0.8, -0.5])
    with pytest.warns(UserWarning, match="finite difference"):
        r = curvature.hessian(c, OBS2, th)
    np.testing.assert_allclose(r.hessian, ref.hessian_fd(c_rx, OBS2, th), atol=1e-5)


# -- execution counts ---------------------------------------------------------------------
@pytest.mark.parametrize("m", [1, 2, 3, 4])
def test_two_term_count_is_2m2_plus_1(m):
    # Mari, Bromley and Killoran, Phys. Rev. A 103, 012405 (2021): value, gradient and Hessian
    # of m two-term parameters take 2 m**2 + 1 distinct circuits
    c = qg.Circuit(m)
    for q in range(m):
        c.ry(q)
    for q in range(m - 1):
        c.cnot(q, q + 1)
    for q in range(m):
        c.rx(q)
    c2 = qg.Circuit(m)
    for q in range(m):
        c2.ry(q)
    obs = qg.Observable({"Z" * m: 1.0})          # one measurement setting
    th = np.linspace(0.2, 1.3, m)
    with qg.Ledger() as book:
        r = curvature.hessian(c2, obs, th)
    assert r.executions == book.executions == book.circuits == 2 * m * m + 1
    # the same holds with a custom two-term shift (points 0, +-s)
    r = curvature.hessian(c2, obs, th, shift=1.0)
    assert r.executions == 2 * m * m + 1
    np.testing.assert_allclose(r.hessian, ref.hessian_fd(c2, obs, th), atol=1e-7)
    # 2m gates of one parameter each: 2 (2m)**2 + 1
    assert curvature.hessian(c, obs, np.linspace(0.2, 1.3, 2 * m)).executions == 8 * m * m + 1


def test_count_with_a_shared_parameter():
    # Derived by hand: the plan lives in gate-angle space, so theta[0] used by two gates
    # counts as two two-term columns. G = 3 columns with 2 shifts each:
    #   1 (value) + 3 * 2 (one column displaced) + C(3, 2) * 2 * 2 (two displaced) = 19.
    c = qg.Circuit(2).ry(0).rx(1).cnot(0, 1).rz(1, param=0, scale=2.0)
    obs = qg.Observable({"ZZ": 1.0})
    with qg.Ledger() as book:
        r = curvature.hessian(c, obs, np.array([0.4, -0.3]))
    assert r.executions == book.executions == 19
    np.testing.assert_allclose(r.hessian, ref.hessian_fd(c, obs, np.array([0.4, -0.3])), atol=1e-7)


def test_count_with_controlled_rotations():
    # Derived by hand: CRX and CRY have frequencies 1/2 and 1, so their rule has the four
    # shifts +-pi/2, +-3pi/2 (Wierichs et al., Quantum 6, 677 (2022)); RY has two.
    #   1 + (2 + 4 + 4) + (2*4 + 2*4 + 4*4) = 1 + 10 + 32 = 43 circuits.
    # The observable has terms ZZ and XI: two measurement settings, so 86 executions.
    c = qg.Circuit(2).ry(0).crx(0, 1).cry(1, 0)
    obs = qg.Observable({"ZZ": 1.0, "XI": 0.5})
    th = np.array([0.3, 1.1, -0.8])
    with qg.Ledger() as book:
        r = curvature.hessian(c, obs, th)
    assert book.circuits == 43
    assert r.executions == book.executions == 86
    np.testing.assert_allclose(r.hessian, ref.hessian_fd(c, obs, th), atol=1e-7)


def test_points_that_coincide_through_the_period_are_merged():
    # A first-order rule of our own with shifts +-pi/2 and +-3pi/2 for an X/2 generator;
    # expectation values have period 2 pi in its angle, so 3pi/2 is -pi/2 and the four shifts
    # are two points: the Hessian of m such gates still takes 2 m**2 + 1 circuits
    # (Mari et al. 2021). Values against the dense reference (expm_frechet).
    rule = qg.ShiftRule([np.pi / 2, -np.pi / 2, 3 * np.pi / 2, -3 * np.pi / 2],
                        [0.25, -0.25, -0.25, 0.25])
    g = qg.Gate.from_generator("wide", X / 2, shift_rule=rule)
    c = qg.Circuit(2).add(g, 0).add(g, 1).cnot(0, 1).add(g, 1)
    th = np.array([0.2, -0.6, 1.0])
    with qg.Ledger() as book:
        r = curvature.hessian(c, OBS2, th)
    assert book.circuits == 2 * 3 ** 2 + 1
    np.testing.assert_allclose(r.hessian, ref.hessian_fd(c, OBS2, th), atol=1e-7)


def test_third_order_count_and_reuse():
    # two-term columns: sum_{j<=k} C(G, j) 2**j circuits (displacements by 0 or +-pi/2 in
    # at most k columns); the Hessian's 2 G**2 + 1 points are among them
    c = qg.Circuit(3).ry(0).ry(1).ry(2).cnot(0, 1).cnot(1, 2)
    obs = qg.Observable({"ZZZ": 1.0})
    th = np.array([0.1, 0.5, 0.9])
    assert curvature.derivatives(c, obs, th, order=3).executions == 1 + 6 + 12 + 8
    assert curvature.derivatives(c, obs, th, order=2).executions == 2 * 9 + 1
    assert curvature.derivatives(c, obs, th, order=1).executions == 1 + 6   # common practice: 2m + 1


# -- the metric tensor --------------------------------------------------------------------
METRIC_CASES = ["standard", "controlled", "custom", "driven"]


@pytest.mark.parametrize("name", METRIC_CASES)
def test_metric_vs_state_derivative_formula(name):
    # source: Re(<d_i psi|d_j psi> - <d_i psi|psi><psi|d_j psi>) from expm_frechet state derivatives
    c, th = CASES[name][0]()
    with qg.Ledger():
        g = curvature.metric_tensor(c, th)
    np.testing.assert_allclose(g, ref.metric(c, th), atol=1e-12)
    assert np.all(np.linalg.eigvalsh(g) > -1e-12)     # common practice: g is positive semidefinite


@pytest.mark.parametrize("name", ["standard", "controlled", "driven"])
def test_overlap_circuits_a_device_would_run_give_the_metric(name):
    # Mari, Bromley and Killoran 2021: g = -1/2 Hessian of |<psi(phi)|psi(phi + x)>|^2 at x = 0.
    # The ledger's "overlap" count is that plan; evaluating it must reproduce the metric.
    c, th = CASES[name][0]()
    np.testing.assert_allclose(metric._overlap_metric(c, th), ref.metric(c, th), atol=1e-9)


def test_exact_metric_ledger_counts_overlap_circuits():
    # For G two-term columns the fidelity Hessian needs 2 G (one column displaced) plus
    # 4 C(G, 2) (two displaced) overlap circuits: 2 G**2; the point x = 0 needs none.
    # Shared parameter: G = 3 columns for 2 parameters -> 18.
    c = qg.Circuit(2).ry(0).rx(1).cnot(0, 1).rz(1, param=0, scale=2.0)
    with qg.Ledger() as book:
        curvature.metric_tensor(c, np.array([0.4, -0.3]))
    assert book.executions == book.by_purpose["overlap"] == 18 and book.shots == 0


def test_metric_of_rz_ry_single_qubit_in_both_orders():
    # Derivation. With RY(t) applied first and RZ(f) second, psi = RZ(f) RY(t)|0>:
    #   d_t psi = RZ RY (-i Y/2)|0>; since RY commutes with Y, g_tt = Var_{|0>}(Y/2) = 1/4.
    #   d_f psi = (-i Z/2) psi, g_ff = Var_psi(Z/2) = (1 - cos(t)**2)/4 = sin(t)**2/4.
    #   <d_t psi|d_f psi> = (1/4) <0|Y RY(t)^dag Z RY(t)|0> = (1/4)<0|Y (cos t Z + sin t X)|0>
    #   = -i sin(t)/4 is imaginary and <psi|d_t psi> = -i<0|Y|0>/2 = 0, so g_tf = 0.
    # Hence RZ(f) RY(t)|0> (RY first) gives diag(1/4, sin(t)**2/4) in the order (t, f).
    # The other order, RY(t) RZ(f)|0> (RZ first), gives diag(0, 1/4) in (f, t): RZ only
    # multiplies |0> by a phase, Var_{|0>}(Z/2) = 0, and Var_{RZ|0>}(Y/2) = 1/4.
    t, f = 0.9, -0.4
    ry_first = qg.Circuit(1).ry(0).rz(0)
    expected = np.diag([0.25, np.sin(t) ** 2 / 4])
    for structure in ("full", "layerwise", "diagonal"):
        np.testing.assert_allclose(curvature.metric_tensor(ry_first, np.array([t, f]), structure),
                                   expected, atol=1e-14)
    rz_first = qg.Circuit(1).rz(0).ry(0)
    np.testing.assert_allclose(curvature.metric_tensor(rz_first, np.array([f, t])),
                               np.diag([0.0, 0.25]), atol=1e-14)


def test_layers_follow_the_documented_definition():
    # the docstring's rules: a fixed gate or a fixed angle ends a layer, a non-commuting
    # trainable gate starts one, gates on disjoint qubits share one
    c = qg.Circuit(3)
    c.ry(0).ry(1).rzz(1, 2)          # RZZ(1,2) does not commute with RY(1): new layer
    c.rz(0)                          # commutes with RZZ(1,2) (disjoint qubits): same layer
    c.rx(2, angle=0.3)               # fixed angle: ends the layer
    c.rx(0).rx(1).rx(2)
    c.cnot(0, 1).crz(0, 1).rz(1)     # CRZ and RZ on qubit 1 are both diagonal: they commute
    lays = curvature.layers(c)
    assert [l.columns for l in lays] == [(0, 1), (2, 3), (5, 6, 7), (8, 9)]
    # settings: qubit-wise commuting groups of the words of K_i and K_i K_j
    assert lays[0].settings == ("YYI",)
    assert lays[1].settings == ("ZZZ",)
    assert lays[2].settings == ("XXX",)
    assert lays[3].settings == ("ZZI",)   # CRZ = (IZ - ZZ)/4, RZ(1) = IZ/2: all diagonal


@pytest.mark.parametrize("structure", ["layerwise", "diagonal"])
def test_layerwise_metric_vs_generator_covariances(structure):
    # Stokes, Izaac, Killoran and Carleo, Quantum 4, 269 (2020): block l is
    # <K_i K_j> - <K_i><K_j> in the state before layer l (dense prefix, full matrices)
    c = qg.Circuit(3)
    c.h(0).h(1).h(2).ry(0).ry(1).rzz(1, 2).rz(0).cnot(0, 2).rx(0).rx(1).rx(2).crx(2, 0).ry(1)
    th = np.linspace(-0.8, 1.1, c.n_params)       # one parameter per gate: theta = phi
    g = curvature.metric_tensor(c, th, structure=structure)
    exact = ref.metric(c, th)
    mask = np.zeros_like(g, dtype=bool)
    for lay in curvature.layers(c):
        cols = list(lay.columns)
        block = ref.layer_covariance(c, th, cols)
        if structure == "diagonal":
            block = np.diag(np.diag(block))
        np.testing.assert_allclose(g[np.ix_(cols, cols)], block, atol=1e-13)
        # within a layer the generators commute, so the block is also the exact metric's block
        np.testing.assert_allclose(g[np.ix_(cols, cols)],
                                   exact[np.ix_(cols, cols)] if structure == "layerwise"
                                   else np.diag(np.diag(exact[np.ix_(cols, cols)])), atol=1e-12)
        mask[np.ix_(cols, cols)] = True
    assert np.all(g[~mask] == 0.0)


def test_layerwise_ledger_one_circuit_per_layer():
    # the device recipe of Stokes et al.: per layer one circuit (the circuit up to the layer)
    # measured in each basis of Layer.settings; RX(0) RX(1): words XI, IX, XX -> one basis XX;
    # RZZ(0,1) then RY(0): two single-gate layers with bases ZZ and YI
    c = qg.Circuit(2).rx(0).rx(1).rzz(0, 1).ry(0)
    with qg.Ledger() as book:
        curvature.metric_tensor(c, np.array([0.1, 0.2, 0.3, 0.4]), structure="layerwise")
    assert book.circuits == 3 and book.executions == 3 and book.by_purpose["metric"] == 3
    # CRX(0,1) has generator |1><1| x X/2 = (IX - ZX)/4 and commutes with RX(1) (IX/2): one
    # layer; words IX, ZX and the product IX*ZX = ZI are qubit-wise commuting: one basis ZX
    c = qg.Circuit(2).h(0).crx(0, 1).rx(1)
    lay, = curvature.layers(c)
    assert lay.columns == (0, 1) and lay.settings == ("ZX",)
    with qg.Ledger() as book:
        curvature.metric_tensor(c, np.array([0.5, 0.7]), structure="diagonal")
    assert book.executions == len(lay.variance_settings) == 1


def test_effective_generator_of_a_hamiltonian_gate_in_the_layerwise_metric():
    # a Hamiltonian gate is a layer of its own; its diagonal entry is the variance of its
    # effective generator i dU/da U^dagger after the gate, which is the exact metric's entry
    # (source: the expm_frechet reference). theta[1] drives only that gate.
    c, th = driven_circuit()
    assert [l.effective for l in curvature.layers(c)] == [False, True, False]
    for structure in ("diagonal", "layerwise"):
        g = curvature.metric_tensor(c, th, structure=structure)
        assert np.isclose(g[1, 1], ref.metric(c, th)[1, 1], atol=1e-12)


# -- Fisher information -------------------------------------------------------------------
@pytest.mark.parametrize("qubits", [None, [1], [2, 0]])
def test_classical_fisher_vs_dense_reference(qubits):
    # source: sum_x d_i p_x d_j p_x / p_x with d p from the expm_frechet state derivatives
    c, th = controlled_circuit()
    p, dp = ref.probabilities_and_derivatives(c, th, qubits)
    with qg.Ledger() as book:
        F = curvature.fisher_information(c, th, qubits=qubits)
    keep = p > 1e-12
    np.testing.assert_allclose(F, (dp[:, keep] / p[keep]) @ dp[:, keep].T, atol=1e-9)
    # shift-rule derivatives of the probabilities: 1 + sum of shifts = 1 + 2 + 5 * 4 circuits
    # (RY two shifts; CRX, CRY, CRZ four each; CPHASE and PHASE have one frequency: two each)
    assert book.executions == 1 + 2 + 3 * 4 + 2 + 2


def test_quantum_fisher_is_four_times_metric_and_bounds_classical():
    # common practice: QFI = 4 g for pure states (Meyer, Quantum 5, 539 (2021));
    # Braunstein and Caves, Phys. Rev. Lett. 72, 3439 (1994): classical FI <= QFI
    for make in (standard_circuit, controlled_circuit, driven_circuit):
        c, th = make()
        Q = curvature.fisher_information(c, th, kind="quantum")
        np.testing.assert_allclose(Q, 4 * ref.metric(c, th), atol=1e-12)
        F = curvature.fisher_information(c, th)
        assert np.all(np.linalg.eigvalsh(Q - F) > -1e-9)


def test_classical_fisher_with_outcomes_of_probability_zero():
    # common practice: for RY(t)|0>, p = (cos^2(t/2), sin^2(t/2)), d p = (-sin t / 2, sin t / 2),
    # so F = (sin^2 t / 4)(1/p_0 + 1/p_1) = 1. Qubit 1 is never flipped: outcomes x1 = 1 have
    # p = 0 and are left out (no NaN), so reading both qubits gives 1 as well.
    c = qg.Circuit(2).ry(0)
    for qubits in (None, [0], [1, 0]):
        F = curvature.fisher_information(c, np.array([0.8]), qubits=qubits)
        assert np.isfinite(F).all() and np.isclose(F[0, 0], 1.0, atol=1e-12)
    # at t = 0 outcome 1 has p = 0 and d p = 0: the 0/0 term is 0 by convention, F = 0
    assert abs(curvature.fisher_information(c, np.array([0.0]))[0, 0]) < 1e-15
    # a qubit that carries no parameter: F = 0, still no NaN
    assert abs(curvature.fisher_information(c, np.array([0.8]), qubits=[1])[0, 0]) < 1e-15


# -- shots --------------------------------------------------------------------------------
def _mean_and_error(samples):
    s = np.asarray(samples)
    return s.mean(axis=0), s.std(axis=0, ddof=1) / np.sqrt(s.shape[0])


@pytest.mark.parametrize("name", ["two-term", "driven"])
def test_hessian_from_shots_is_unbiased(name):
    # common practice: a shift-rule estimate from finite shots is unbiased (and so is the
    # stochastic rule with sampled split points, Banchi and Crooks, Quantum 5, 386 (2021)).
    # N = 300 independent estimates (fixed seeds); each distinct entry of value, gradient and
    # Hessian (at most 6) must lie within 4.5 standard errors of the exact value. For a
    # normal mean that fails with probability 6.8e-6 per entry: false-failure rate < 5e-5.
    if name == "two-term":
        c = qg.Circuit(2).ry(0).rx(1).cnot(0, 1)
        obs = qg.Observable({"ZZ": 1.0, "XI": 0.5})
        th = np.array([0.7, -0.4])
    else:
        W = np.array([[0.3, 0.4], [0.4, -0.3]])
        c = qg.Circuit(1).ry(0).add(qg.Gate.from_hamiltonian("driven", drift=W, drive="Z"), 0)
        obs = qg.Observable({"X": 1.0})
        th = np.array([0.6, 0.5])
    exact = curvature.hessian(c, obs, th)
    rng = np.random.default_rng(20240605)
    runs = [curvature.hessian(c, obs, th, shots=200, seed=rng) for _ in range(300)]
    for field in ("value", "gradient", "hessian"):
        mean, err = _mean_and_error([np.atleast_1d(getattr(r, field)) for r in runs])
        truth = np.atleast_1d(getattr(exact, field))
        assert np.all(np.abs(mean - truth) <= 4.5 * err + 1e-12), (field, mean, truth, err)
    assert runs[0].shots == runs[0].executions * 200


def test_shots_are_reproducible_from_the_seed():
    # common practice: the same seed gives the same numbers
    c, th = standard_circuit()
    a = curvature.hessian(c, OBS3, th, shots=50, seed=3)
    b = curvature.hessian(c, OBS3, th, shots=50, seed=3)
    np.testing.assert_array_equal(a.hessian, b.hessian)


# -- bad input ----------------------------------------------------------------------------
def test_bad_input_is_refused_with_a_named_argument():
    c, th = standard_circuit()
    with pytest.raises(ValueError, match="order"):
        curvature.derivatives(c, OBS3, th, order=0)
    with pytest.raises(ValueError, match="structure"):
        curvature.metric_tensor(c, th, structure="blockwise")
    with pytest.raises(ValueError, match="structure"):
        curvature.metric_tensor(c, th, None)
    with pytest.raises(ValueError, match="kind"):
        curvature.fisher_information(c, th, kind="quantum-ish")
    with pytest.raises(ValueError, match="qubits"):
        curvature.fisher_information(c, th, kind="quantum", qubits=[0])
    with pytest.raises(ValueError, match="theta"):
        curvature.hessian(c, OBS3, np.stack([th, th]))
    with pytest.raises(ValueError, match="theta"):
        curvature.hessian(c, OBS3, th[:2])
    with pytest.raises(TypeError, match="circuit"):
        curvature.metric_tensor("circuit", th)
    with pytest.raises(ValueError, match="shots"):
        curvature.hessian(c, OBS3, th, shots=0)
    with pytest.raises(ValueError, match="observable"):
        curvature.hessian(c, OBS2, th)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert curvature.hessian(qg.Circuit(1).h(0), qg.Observable({"X": 1.0}),
                                 np.zeros(0)).hessian.shape == (0, 0)


# -- random circuits ----------------------------------------------------------------------
from hypothesis import given, strategies as st  # noqa: E402

_MENU = [("ry", 1), ("rx", 1), ("rz", 1), ("crx", 2), ("cry", 2), ("rzz", 2), ("cphase", 2),
         ("h", 1), ("cnot", 2), ("sx", 1)]


@given(ops=st.lists(st.tuples(st.sampled_from(_MENU), st.permutations([0, 1])), min_size=2, max_size=6),
       share=st.booleans(), seed=st.integers(0, 2 ** 16))
def test_random_circuits_hessian_and_metric_vs_dense_reference(ops, share, seed):
    # source: the expm / expm_frechet dense reference (FD of its exact gradient, its metric)
    c = qg.Circuit(2)
    for (name, k), qs in ops:
        method = getattr(c, name)
        args = tuple(qs[:k])
        if name in ("h", "cnot", "sx"):
            method(*args)
        elif share and c.n_params:
            method(*args, param=0, scale=1.5)     # reuse theta[0], scaled
        else:
            method(*args)
    c.ry(0)
    th = np.random.default_rng(seed).uniform(-np.pi, np.pi, c.n_params)
    r = curvature.hessian(c, OBS2, th)
    np.testing.assert_allclose(r.hessian, ref.hessian_fd(c, OBS2, th), atol=2e-7)
    np.testing.assert_allclose(curvature.metric_tensor(c, th), ref.metric(c, th), atol=1e-12)


def test_classical_fisher_near_a_vanishing_outcome():
    # common practice: for RY(t)|0>, p = (cos^2(t/2), sin^2(t/2)) and F = 1 for every t != 0;
    # before, at t = 1e-7 the outcome of p = 2.5e-15 fell under the cut and F came out 2.5e-15
    c = qg.Circuit(1).ry(0)
    for t in (1e-7, 1e-4, -3e-9, np.pi - 1e-7):
        assert np.isclose(curvature.fisher_information(c, [t])[0, 0], 1.0, rtol=1e-9), t
    # two qubits, one of them measured: the marginal keeps the same closed form
    c2 = qg.Circuit(2).ry(0).cnot(0, 1)
    for qubits in (None, [1], [1, 0]):
        assert np.isclose(curvature.fisher_information(c2, [1e-7], qubits=qubits)[0, 0], 1.0, rtol=1e-9)


def test_classical_fisher_agrees_with_the_shift_plan_away_from_zero():
    # away from vanishing outcomes, F from shift-rule derivatives of the probabilities
    # (autograd's jacobian of qg.probabilities through the shift plan) is the same quantity
    from autograd import jacobian

    c, th = controlled_circuit()
    for qubits in (None, [2, 0]):
        p = qg.probabilities(c, th, qubits=qubits)
        J = jacobian(lambda t: qg.probabilities(c, t, qubits=qubits))(th)
        keep = p > 1e-9
        want = (J[keep].T / p[keep]) @ J[keep]
        np.testing.assert_allclose(curvature.fisher_information(c, th, qubits=qubits), want, atol=1e-9)
