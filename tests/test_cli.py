"""The qgradlib command: the demo runs end to end and reports against an exact reference."""
import re
import subprocess
import sys

import numpy as np
import pytest
from scipy.sparse.linalg import eigsh

from qgradlib.cli import main
from qgradlib.demo import bench_ring
from test_names import PATTERN as RETIRED_NAMES


def test_demo_prints_energies_beside_exact_ground_energy(capsys, tmp_path):
    plot = tmp_path / "t.png"
    assert main(["demo", "--qubits", "4", "--steps", "30", "--plot", str(plot)]) == 0
    out = capsys.readouterr().out
    assert "not device measurements" in out
    assert not RETIRED_NAMES.findall(out)          # the demo prints none of the retired names
    m = re.search(r"exact ground energy \(scipy eigsh\):\s+(-?\d+\.\d+)", out)
    sc = bench_ring(4)
    # the printed value is scipy's eigsh result on the scenario's sparse matrix
    e0 = eigsh(sc.hamiltonian.matrix(), k=1, which="SA")[0][0]
    assert m and abs(float(m.group(1)) - e0) < 1e-5
    # dense cross-check of the same number: numpy's full eigensolver
    assert abs(e0 - np.linalg.eigvalsh(sc.hamiltonian.matrix().toarray())[0]) < 1e-9
    # Newton's best energy on the 4-qubit ring matches eigsh: n/2 layers of the Hamiltonian's
    # own ansatz reach the ring's ground state (from memory: Ho and Hsieh, SciPost Phys. 6,
    # 029 (2019)); the eigsh comparison is the check
    best = re.search(r"newton\s+\d+\s+(-?\d+\.\d+)", out)
    assert best and abs(float(best.group(1)) - e0) < 1e-5
    assert "strict local minimum" in out
    # the Hessian's device cost: 2 G**2 + 1 circuits for G two-term gate columns (Mari,
    # Bromley and Killoran, Phys. Rev. A 103, 012405 (2021)), times 2 measurement settings
    G = len(sc.circuit.parametric_operations)
    assert f"{2 * (2 * G * G + 1)} executions ({2 * G * G + 1} distinct circuits" in out
    assert plot.exists() and plot.stat().st_size > 0


def test_demo_rejects_bad_sizes():
    with pytest.raises(SystemExit):
        main(["demo", "--qubits", "1"])


def test_module_entry_point_runs():
    r = subprocess.run([sys.executable, "-m", "qgradlib", "--version"], capture_output=True, text=True)
    assert r.returncode == 0 and "qgradlib" in r.stdout
