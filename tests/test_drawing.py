"""The text drawing of a circuit (exact expected strings) and its resource record."""
import numpy as np
import pytest
from autograd import grad

import qgradlib as qg


def test_layers_connectors_and_angle_maps():
    c = qg.Circuit(3).h(0).ry(1).cnot(0, 1).rz(1, param=0, scale=2.0).crx(1, 2)
    c.rx(1, angle=0.25).rz(2, scale=-1.0, offset=-0.5)
    assert str(c) == (
        "0 -H------CNOT:1--------------------------------\n"
        "          |\n"
        "1 -RY(θ0)-CNOT:2-RZ(2·θ0)-CRX(θ1):1-RX(0.25)----\n"
        "                          |\n"
        "2 ------------------------CRX(θ1):2-RZ(-θ2-0.5)-")


def test_span_blocks_the_rows_crossed_and_channels_are_marked():
    c = qg.Circuit(4).cnot(3, 0).swap(1, 2).noise(2, qg.channels.bit_flip(0.1))
    assert c.draw() == (
        "0 -CNOT:2-------------------\n"
        "   |\n"
        "1 -|------SWAP:1------------\n"
        "   |      |\n"
        "2 -|------SWAP:2-~bit_flip~-\n"
        "   |\n"
        "3 -CNOT:1-------------------")


def test_bound_values_and_wrapping():
    c = qg.Circuit(2).ry(0).ry(1, offset=0.5).cnot(0, 1).rz(0).rz(1, param=0, scale=3.0)
    text = c.draw(theta=np.array([0.1, -2.0, 0.123456]), width=22)
    assert text == (
        "layers 1-2\n"
        "0 -RY(0.1)--CNOT:1-\n"
        "            |\n"
        "1 -RY(-1.5)-CNOT:2-\n"
        "layer 3\n"
        "0 -RZ(0.1235)-\n"
        "\n"
        "1 -RZ(0.3)----")
    # every line of a block fits the width
    assert max(len(line) for line in text.splitlines()) <= 22


def test_draw_bad_input():
    c = qg.Circuit(1).ry(0)
    with pytest.raises(ValueError, match="width"):
        c.draw(width=3)
    with pytest.raises(ValueError, match="theta"):
        c.draw(theta=np.zeros(2))


def test_reprs_stay_short():
    M = np.kron(np.diag([1.0, -1.0]), np.diag([1.0, -1.0])) / 2
    c = qg.Circuit(2).add(qg.Gate.from_generator("zz", M), (0, 1), offset=0.1)
    assert repr(c) == "Circuit(n_qubits=2, operations=1, n_params=1)"
    assert repr(c.operations[0]) == "Operation('zz', qubits=(0, 1), angle=θ0+0.1)"
    assert repr(c.operations[0].gate) == "Gate('zz', kind='generator', n_qubits=2)"
    assert "array" not in repr(c.operations[0])
    assert repr(qg.channels.dephasing(0.2)) == "Channel('dephasing', n_qubits=1, kraus=2)"


def test_resources_counts_and_shifted_circuits_against_the_ledger():
    c = qg.Circuit(3).h(0).ry(1).cnot(0, 1).crx(1, 2).rz(2, param=0).rx(0, angle=0.3)
    c.noise(2, qg.channels.dephasing(0.05))
    r = c.resources()
    assert (r.n_qubits, r.depth, r.two_qubit, r.n_params, r.channels) == (3, 5, 2, 2, 1)
    assert r.counts == {"H": 1, "RY": 1, "CNOT": 1, "CRX": 1, "RZ": 1, "RX": 1}
    # common practice: two-term gates need 2 shifted circuits per gate (RY, RZ), the
    # controlled rotation's four-term rule 4: 8 in all; the ledger counts what was run
    assert r.gradient_circuits == 8
    H = qg.Observable({"ZZZ": 1.0})
    theta = np.array([0.3, -0.4])
    with qg.Ledger() as book:
        grad(lambda t: qg.expect(c, H, t))(theta)
    assert book.executions == 1 + r.gradient_circuits
    with qg.Ledger() as book:
        qg.curvature.hessian(c, H, theta)
    assert book.executions == r.hessian_circuits
    with pytest.raises(dataclasses_error()):
        r.depth = 1


def dataclasses_error():
    import dataclasses
    return dataclasses.FrozenInstanceError
