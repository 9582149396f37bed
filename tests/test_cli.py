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
    assert f"{2 * (2 * G * G + 1)} executions ({2 * G * G + 1} distinct circuits x 2 measurement " \
           "settings)" in out
    assert plot.exists() and plot.stat().st_size > 0


def test_demo_rejects_bad_sizes():
    with pytest.raises(SystemExit):
        main(["demo", "--qubits", "1"])


def test_module_entry_point_runs():
    r = subprocess.run([sys.executable, "-m", "qgradlib", "--version"], capture_output=True, text=True)
    assert r.returncode == 0 and "qgradlib" in r.stdout


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    """One small demo run in an empty working directory: its output and the directory."""
    import contextlib
    import io
    import os

    where = tmp_path_factory.mktemp("cwd")
    old = os.getcwd()
    os.chdir(where)
    try:
        buf = io.StringIO()
        with contextlib.redirect_stdout(buf):
            assert main(["demo", "--qubits", "4", "--steps", "20"]) == 0
    finally:
        os.chdir(old)
    return buf.getvalue(), where


def test_demo_writes_no_file_unless_asked(demo_run):
    # regression (issue 11, case 19): the demo wrote bench-ring-training.png into the
    # working directory of whoever ran it
    out, where = demo_run
    assert list(where.iterdir()) == []
    assert "plot written" not in out


def test_demo_device_section_does_not_repeat_the_training_table(demo_run):
    # regression (issue 11, case 19): the "price on a device" section reprinted the training
    # table's executions and shots, line for line
    out, _ = demo_run
    table = out[out.index("-- training"):out.index("-- curvature")]
    rows = {line.split()[0]: line.split()[-2:] for line in table.splitlines()
            if line.split() and line.split()[0] in ("adam", "newton")}
    last = out[out.index("-- curvature"):]
    for executions, shots in rows.values():
        assert f"{int(executions):,} executions" not in last and f"{int(shots):,} shots" not in last
    # what it shows instead: the Adam run under shots, its fresh final estimate with its
    # error beside the exact value at that point (labelled simulator only)
    m = re.search(r"reported energy (-?\d+\.\d+) \+- (\d+\.\d+)", last)
    exact = re.search(r"exact energy there (-?\d+\.\d+)", last)
    assert m and exact and "simulator only" in last
    # an unbiased estimate lies within 5 standard errors of the exact value (common practice;
    # false-failure rate below 1e-6 for this fixed seed)
    assert abs(float(m.group(1)) - float(exact.group(1))) < 5 * float(m.group(2))


def test_demo_shows_the_number_of_measurement_settings_and_sensible_timings(demo_run):
    # regression (issue 11, case 19): "x measurement settings" without the number; times to
    # 0.01 ms
    out, _ = demo_run
    assert re.search(r"distinct circuits x \d+ measurement settings", out)
    table = out[out.index("time/ms"):out.index("largest deviation")].splitlines()[1:]
    times = [line.split()[4] for line in table if line.strip()]
    assert len(times) == 4
    for t in times:
        digits = t.replace(".", "").lstrip("0")
        assert len(digits) <= 3, t
