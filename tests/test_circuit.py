"""Circuit building and the angle map phi = A theta + b, checked against the reference's own
reading of the operations (tests/reference) and against autograd's Jacobian."""
import dataclasses

import numpy as np
import pytest
from autograd import jacobian

import qgradlib as qg
from qgradlib import gates
from reference import (circuit_ops, circuit_state, dense_state, reference_angle_map,
                       reference_angles)

FIXED_METHODS = {"h": 1, "x": 1, "y": 1, "z": 1, "s": 1, "t": 1, "sx": 1,
                 "cnot": 2, "cz": 2, "swap": 2}
PARAM_METHODS = {"rx": 1, "ry": 1, "rz": 1, "phase": 1, "crx": 2, "cry": 2, "crz": 2,
                 "cphase": 2, "rxx": 2, "ryy": 2, "rzz": 2}


def sample_circuit():
    c = qg.Circuit(3)
    c.h(0).ry(1)                           # theta[0]
    c.cnot(0, 1).rz(2, param=0, scale=2.0)  # 2 theta[0]
    c.crx(1, 2)                            # theta[1]
    c.rx(1, angle=0.25)                    # fixed
    c.rzz(2, 0, param=1, scale=-0.5, offset=0.1)
    return c


@pytest.mark.parametrize("method", sorted(FIXED_METHODS) + sorted(PARAM_METHODS))
def test_every_method_chains_and_records_its_gate(method):
    k = {**FIXED_METHODS, **PARAM_METHODS}[method]
    c = qg.Circuit(3)
    qubits = (2, 0)[:k]                    # a non-trivial order: control/first qubit kept first
    assert getattr(c, method)(*qubits) is c
    (op,) = c.operations
    assert op.gate is gates.STANDARD[method.upper()]
    assert op.qubits == qubits
    assert c.n_params == (1 if method in PARAM_METHODS else 0)


def test_param_scale_offset_angle_semantics():
    c = sample_circuit()
    assert c.n_params == 2 and len(c) == 7
    ops = c.parametric_operations
    assert [op.gate.name for op in ops] == ["RY", "RZ", "CRX", "RX", "RZZ"]
    assert [op.param for op in ops] == [0, 0, 1, None, 1]
    assert [op.scale for op in ops] == [1.0, 2.0, 1.0, 1.0, -0.5]
    assert ops[3].angle == 0.25 and not ops[3].trainable
    theta = np.array([0.3, -1.2])
    # common practice: angle = scale * theta[param] + offset, or the fixed value
    expected = [0.3, 0.6, -1.2, 0.25, -0.5 * -1.2 + 0.1]
    np.testing.assert_allclose(c.angles(theta), expected, atol=1e-15)


def test_angle_map_matches_reference_and_angles():
    c = sample_circuit()
    A, b = c.angle_map()
    A_ref, b_ref = reference_angle_map(c)
    np.testing.assert_array_equal(A, A_ref)
    np.testing.assert_array_equal(b, b_ref)
    rng = np.random.default_rng(4)
    for theta in rng.normal(size=(5, 2)):
        np.testing.assert_allclose(c.angles(theta), A @ theta + b, atol=1e-15)
        np.testing.assert_allclose(c.angles(theta), reference_angles(c, theta), atol=1e-15)


def test_angles_batch_broadcasts():
    c = sample_circuit()
    thetas = np.random.default_rng(5).normal(size=(4, 2))
    phi = c.angles(thetas)
    assert phi.shape == (4, 5)
    for row, theta in zip(phi, thetas):
        np.testing.assert_allclose(row, c.angles(theta), atol=1e-15)


def test_angles_jacobian_is_A():
    # autograd's Jacobian of the map is the matrix A of angle_map
    c = sample_circuit()
    J = jacobian(c.angles)(np.array([0.4, 0.9]))
    np.testing.assert_allclose(J, c.angle_map()[0], atol=1e-15)


def test_angle_map_follows_later_additions():
    c = qg.Circuit(2).ry(0)
    assert c.angle_map()[0].shape == (1, 1)
    c.ry(1).rx(0, param=0)
    A, b = c.angle_map()
    np.testing.assert_array_equal(A, [[1, 0], [0, 1], [1, 0]])


def test_circuit_without_parameters():
    c = qg.Circuit(2).h(0).rx(1, angle=0.5)
    assert c.n_params == 0
    np.testing.assert_allclose(c.angles(np.zeros(0)), [0.5])


def test_operations_are_read_only():
    c = sample_circuit()
    ops = c.operations
    assert isinstance(ops, tuple)
    with pytest.raises(dataclasses.FrozenInstanceError):
        ops[0].qubits = (1,)
    assert len(c.operations) == 7


def test_copy_is_independent():
    c = sample_circuit()
    d = c.copy()
    d.ry(0).cz(0, 1)
    assert (len(c), c.n_params) == (7, 2)
    assert (len(d), d.n_params) == (9, 3)
    assert d.operations[:7] == c.operations


def test_concatenation_renumbers_right_parameters():
    left = qg.Circuit(2).ry(0).ry(1, param=0, scale=3.0).rx(0)        # 2 parameters
    right = qg.Circuit(2).cnot(0, 1).rz(1).rz(0, param=0, offset=0.2).rx(1, angle=0.7).ry(0)
    both = left + right
    assert both.n_params == 4 and len(both) == len(left) + len(right)
    assert [op.param for op in both.parametric_operations] == [0, 0, 1, 2, 2, None, 3]
    assert both.parametric_operations[4].offset == 0.2
    assert (left.n_params, right.n_params, len(left)) == (2, 2, 3)    # operands unchanged
    # the state is the left circuit at theta[:2] followed by the right one at theta[2:]
    theta = np.array([0.3, -0.8, 1.1, 2.0])
    ops = circuit_ops(left, reference_angles(left, theta[:2])) + \
        circuit_ops(right, reference_angles(right, theta[2:]))
    np.testing.assert_allclose(qg.state(both, theta), dense_state(ops, 2), atol=1e-12)
    np.testing.assert_allclose(circuit_state(both, theta), dense_state(ops, 2), atol=1e-12)


@pytest.mark.parametrize("axes,names", [("zyz", ("RZ", "RY", "RZ")), ("zxz", ("RZ", "RX", "RZ")),
                                         ("xyx", ("RX", "RY", "RX")), ("XZY", ("RX", "RZ", "RY"))])
def test_euler_adds_three_parameters_first_letter_first(axes, names):
    c = qg.Circuit(2).ry(1).euler(0, axes=axes)
    assert c.n_params == 4
    ops = c.parametric_operations[1:]
    assert [(op.gate.name, op.qubits, op.param) for op in ops] == \
        [(names[0], (0,), 1), (names[1], (0,), 2), (names[2], (0,), 3)]


def test_euler_on_a_bad_qubit_appends_nothing():
    c = qg.Circuit(2)
    with pytest.raises(ValueError, match="qubit 5"):
        c.euler(5)
    assert len(c) == 0 and c.n_params == 0


def test_noise_takes_a_channel_and_refuses_anything_else():
    c = qg.Circuit(2).noise((0,), qg.channels.dephasing(0.1))
    assert c.has_noise and c.operations[0].gate.name == "dephasing"
    with pytest.raises(TypeError, match="channel"):
        c.noise(0, 0.1)


def test_repr_names_sizes():
    assert repr(sample_circuit()) == "Circuit(n_qubits=3, operations=7, n_params=2)"
