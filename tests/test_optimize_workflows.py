"""compare_training: several methods side by side, exact reference energy, device pricing."""
import numpy as np
import pytest
import scipy.sparse.linalg as sla

import qgradlib as qg
from qgradlib import models
from qgradlib.train.workflows import compare_training, ground_energy


def test_compare_training_six_qubits():
    c = models.layered(6, 2, entangler="cnot")
    H = models.ising_chain(6, g=0.5)
    x0 = np.random.default_rng(1).uniform(0, 2 * np.pi, c.n_params)
    with qg.Ledger() as outer:
        cmp = compare_training(c, H, x0, steps=20, shots_per_execution=2000)
    exact = sla.eigsh(H.matrix(), k=1, which="SA")[0][0]  # scipy eigsh
    assert cmp.ground_energy == pytest.approx(exact, abs=1e-10)
    assert set(cmp.results) == {"adam", "rotosolve"}
    assert cmp.start_energy == pytest.approx(qg.expect(c, H, x0))
    for m, r in cmp.results.items():
        # variational principle (common practice): never below the ground energy
        assert exact - 1e-10 <= cmp.energies[m] < cmp.start_energy
        assert cmp.energies[m] == pytest.approx(qg.expect(c, H, r.x), abs=1e-10)
        assert cmp.shots[m] == 2000 * cmp.executions[m]
    # the runs' own ledgers add up to what an enclosing ledger saw
    assert sum(cmp.executions.values()) == outer.executions
    text = cmp.summary()
    assert "rotosolve" in text and "not on a device" in text


def test_rotosolve_sweep_costs_two_circuits_per_parameter():
    # exact runs reuse the closed-form minimum as the next value at the current point, so a sweep
    # of m single-gate parameters costs 2 m circuits after the first evaluation (common practice:
    # two shifted evaluations fix a + b cos + c sin once the value at the point is known)
    c = models.layered(3, 1)
    H = models.ising_chain(3)
    cmp = compare_training(c, H, np.full(c.n_params, 0.1), methods=("rotosolve",), steps=4,
                           options={"rotosolve": {"tol": 0.0}}, exact=False)
    r = cmp.results["rotosolve"]
    settings = 2  # the ZZ terms and the X terms
    m = c.n_params
    assert np.array_equal(np.diff(r.history["executions"][:4]), [2 * m * settings] * 3)
    assert r.history["executions"][0] == (1 + 2 * m) * settings
    assert cmp.ground_energy is None


def test_ground_energy_dense_and_sparse_agree():
    H = models.heisenberg_chain(7, periodic=False)
    assert ground_energy(H) == pytest.approx(np.linalg.eigvalsh(H.matrix().toarray())[0], abs=1e-9)


def test_compare_training_input_checks():
    c = models.layered(2, 1)
    H = models.ising_chain(2, periodic=False)
    x0 = np.zeros(c.n_params)
    with pytest.raises(ValueError, match="methods must be taken from"):
        compare_training(c, H, x0, methods=("adam", "lbfgs"))
    with pytest.raises(ValueError, match="repeat"):
        compare_training(c, H, x0, methods=("adam", "adam"))
    with pytest.raises(ValueError, match="shots_per_execution"):
        compare_training(c, H, x0, shots_per_execution=0)
    with pytest.raises(ValueError, match="not compared"):
        compare_training(c, H, x0, options={"gd": {}})
    with pytest.raises(ValueError, match="no count"):
        compare_training(c, H, x0, steps={"adam": 3})
