"""JSON files of circuits and observables: exact round trips and field-naming refusals."""
import json

import numpy as np
import pytest
import scipy.linalg

import qgradlib as qg
from reference import circuit_state


def _every_kind():
    W = np.array([[0.3, 0.2 - 0.1j], [0.2 + 0.1j, -0.1]])
    M = np.diag([0.0, 1.0, 2.5, 0.0])
    rule = qg.ShiftRule(shifts=[np.pi / 2, -np.pi / 2], coefficients=[0.5, -0.5])
    c = qg.Circuit(3).h(0).ry(1, offset=0.3).s(2).cnot(0, 1).crx(1, 2, scale=2.0)
    c.rz(0, angle=0.7).add(qg.Gate.from_generator("mix", M), (2, 0))
    c.add(qg.Gate.from_generator("flip", qg.gates.RX.generator, shift_rule=rule), 1, param=0)
    c.add(qg.Gate.from_hamiltonian("pulse", drift=W, drive="X"), 1)
    c.add(qg.Gate.fixed("twist", scipy.linalg.expm(-1j * np.array([[0.1, 0.4], [0.4, 0.2]]))), 2)
    c.ry(0, input=1, scale=0.5)
    c.noise(1, qg.channels.amplitude_damping(0.1))
    return c


def test_circuit_round_trip_is_exact():
    c = _every_kind()
    text = c.to_json()
    back = qg.Circuit.from_json(text)
    assert back == c and back.n_inputs == 2
    assert json.loads(text)["format"] == "qgradlib.circuit"
    # the inverse's parameters appear out of order; the file keeps them
    inv = qg.Circuit(2).ry(0).rz(1).cnot(0, 1).inverse()
    assert qg.Circuit.from_json(inv.to_json()) == inv
    t = np.array([0.2, -0.4])
    np.testing.assert_allclose(qg.state(qg.Circuit.from_json(inv.to_json()), t),
                               circuit_state(inv, t), atol=1e-12)


def test_observable_round_trip_is_exact():
    H = qg.Observable({"ZZI": -1.0, "IXY": 0.1 + 0.2}) + qg.Observable.from_matrix(np.diag([1.0] + [0.0] * 7))
    assert qg.Observable.from_json(H.to_json()) == H
    G = qg.Observable({"XY": 1 / 3})
    assert qg.Observable.from_json(G.to_json()).terms == {"XY": 1 / 3}


def test_function_gates_are_refused_on_save():
    g = qg.Gate.from_function("fun", lambda a: scipy.linalg.expm(-0.5j * a * np.diag([1, -1])), 1)
    with pytest.raises(ValueError, match="Python function"):
        qg.Circuit(1).add(g, 0).to_json()


def _edit(text, fn):
    doc = json.loads(text)
    fn(doc)
    return json.dumps(doc)


def test_loading_names_the_field_at_fault():
    c = qg.Circuit(2).h(0).add(qg.Gate.from_generator("mix", np.diag([0.0, 1.0, 2.0, 0.5])), (0, 1))
    c.add(qg.Gate.fixed("twist", np.array([[0, 1], [1, 0]])), 1).noise(0, qg.channels.bit_flip(0.2))
    text = c.to_json()
    cases = [
        (lambda d: d.update(version=2), "version"),
        (lambda d: d.update(format="other"), "format"),
        (lambda d: d["operations"][1]["gate"]["generator"][0].pop(), r"operations\[1\]\.gate\.generator\[0\]"),
        (lambda d: d["operations"][1]["gate"]["generator"][0][1].__setitem__(1, 0.7),
         r"operations\[1\]\.gate\.generator: generator must be Hermitian"),
        (lambda d: d["operations"][2]["gate"]["unitary"][0].__setitem__(0, [1.0, 0.0]),
         r"operations\[2\]\.gate\.unitary: unitary must be unitary"),
        (lambda d: d["operations"][3]["gate"]["kraus"][0][0].__setitem__(0, [2.0, 0.0]),
         r"operations\[3\]\.gate\.kraus"),
        (lambda d: d["operations"][0]["gate"].update(name="HH"), r"operations\[0\]\.gate\.name"),
        (lambda d: d["operations"][0].update(qubits=[5]), r"operations\[0\]\.qubits"),
        (lambda d: d["operations"][1].update(param=4), r"operations\[1\]\.param"),
        (lambda d: d["operations"][1].update(scale="big"), r"operations\[1\]\.scale"),
        (lambda d: d["operations"][1].update(angle=0.3), r"operations\[1\]: a parametric gate"),
        (lambda d: d["operations"][0].update(angle=0.3), r"operations\[0\]\.angle"),
        (lambda d: d["operations"][2]["gate"].update(kind="magic"), r"operations\[2\]\.gate\.kind"),
    ]
    for edit, field in cases:
        with pytest.raises(ValueError, match=field):
            qg.Circuit.from_json(_edit(text, edit))
    with pytest.raises(ValueError, match="not valid JSON"):
        qg.Circuit.from_json(text[:-3])
    obs = qg.Observable({"ZZ": 1.0}).to_json()
    with pytest.raises(ValueError, match=r"terms\['ZZZ'\]"):
        qg.Observable.from_json(_edit(obs, lambda d: d["terms"].update(ZZZ=1.0)))
    with pytest.raises(ValueError, match="dense"):
        qg.Observable.from_json(_edit(obs, lambda d: d.update(dense=[[[0, 0], [1, 0]], [[0, 0], [0, 0]]])))
