"""Every bad input of the foundation gets a ValueError or TypeError at the call that
introduced it, and the message names the argument (and says what was expected)."""
import numpy as np
import pytest

import qgradlib as qg
from qgradlib import gates


def two_qubit():
    return qg.Circuit(2).ry(0).cnot(0, 1)          # one parameter


ZZ = qg.Observable({"ZZ": 1.0})
V, T = ValueError, TypeError
VT = (ValueError, TypeError)

CASES = [
    # qubit out of range or repeated in one gate
    ("qubit too large", lambda: qg.Circuit(2).h(2), V, r"qubit 2 is out of range .*0\.\.1"),
    ("qubit negative", lambda: qg.Circuit(2).rx(-1), V, r"qubit -1 is out of range"),
    ("qubit of a two-qubit gate", lambda: qg.Circuit(2).cnot(0, 5), V, r"qubit 5 is out of range"),
    ("qubit a float", lambda: qg.Circuit(2).h(1.0), T, r"qubits must be an int"),
    ("qubit a string", lambda: qg.Circuit(2).h("a"), T, r"qubits must be ints"),
    ("qubit repeated", lambda: qg.Circuit(2).cnot(1, 1), V, r"qubits \(1, 1\) repeat a qubit"),
    ("qubit repeated in add", lambda: qg.Circuit(3).add(gates.RZZ, (2, 2)), V, r"repeat a qubit"),
    # qubit count not a positive int
    ("n_qubits zero", lambda: qg.Circuit(0), VT, r"n_qubits must be a positive int"),
    ("n_qubits negative", lambda: qg.Circuit(-2), VT, r"n_qubits must be a positive int"),
    ("n_qubits float", lambda: qg.Circuit(2.0), VT, r"n_qubits must be a positive int"),
    ("n_qubits string", lambda: qg.Circuit("2"), VT, r"n_qubits must be a positive int"),
    ("n_qubits bool", lambda: qg.Circuit(True), VT, r"n_qubits must be a positive int"),
    ("n_qubits of a function gate", lambda: qg.Gate.from_function("f", lambda a: np.eye(2), 0),
     VT, r"n_qubits must be a positive int"),
    # parameter index that skips ahead (or is not an index)
    ("param skips ahead", lambda: qg.Circuit(1).ry(0, param=1), V, r"param=1 skips ahead"),
    ("param skips ahead later", lambda: qg.Circuit(2).ry(0).ry(1, param=2), V,
     r"param=2 skips ahead: the next new parameter is 1"),
    ("param negative", lambda: qg.Circuit(1).ry(0, param=-1), V, r"param must be a non-negative int"),
    ("param float", lambda: qg.Circuit(1).ry(0, param=0.0), V, r"param must be a non-negative int"),
    # param and angle together; angle-only options misused
    ("param and angle", lambda: qg.Circuit(1).ry(0, param=0, angle=0.1), V,
     r"either param= .* or angle= .*not both"),
    ("scale with angle", lambda: qg.Circuit(1).ry(0, angle=0.1, scale=2.0), V, r"scale= and offset="),
    ("param on a fixed gate", lambda: qg.Circuit(1).add(gates.H, 0, 0), V,
     r"fixed: it takes no param, angle"),
    # non-finite (or non-real) angle
    ("angle nan", lambda: qg.Circuit(1).ry(0, angle=np.nan), V, r"angle must be finite"),
    ("angle inf", lambda: qg.Circuit(1).rz(0, angle=-np.inf), V, r"angle must be finite"),
    ("scale nan", lambda: qg.Circuit(1).ry(0, scale=np.nan), V, r"scale must be finite"),
    ("offset inf", lambda: qg.Circuit(1).ry(0, offset=np.inf), V, r"offset must be finite"),
    ("angle string", lambda: qg.Circuit(1).ry(0, angle="0.1"), T, r"angle must be a real number"),
    ("angle complex", lambda: qg.Circuit(1).ry(0, angle=1j), T, r"angle must be a real number"),
    ("matrix angle nan", lambda: gates.RX.matrix(np.nan), V, r"angle must be finite"),
    ("matrix angle string", lambda: gates.RX.matrix("a"), T, r"angle must be a real number"),
    ("matrix angle complex", lambda: gates.CRY.matrix(np.array([1j])), T,
     r"angle must be a real number"),
    ("matrix angle missing", lambda: gates.RX.matrix(), V, r"parametric: give an angle"),
    ("matrix angle on fixed", lambda: gates.H.matrix(0.3), V, r"fixed and takes no angle"),
    # theta of the wrong length, with NaN, or of a non-numeric type
    ("theta too long", lambda: qg.expect(two_qubit(), ZZ, np.zeros(2)), V,
     r"theta must have shape \(1,\) or \(B, 1\); got \(2,\)"),
    ("theta empty", lambda: qg.expect(two_qubit(), ZZ, np.zeros(0)), V, r"theta must have shape"),
    ("theta scalar", lambda: qg.expect(two_qubit(), ZZ, 0.3), V, r"theta must have shape"),
    ("theta 3-d", lambda: qg.expect(two_qubit(), ZZ, np.zeros((1, 1, 1))), V, r"theta must have shape"),
    ("theta ragged", lambda: qg.state(two_qubit(), [[0.1], [0.2, 0.3]]), V,
     r"theta must have shape .*ragged"),
    ("theta nan", lambda: qg.expect(two_qubit(), ZZ, np.array([np.nan])), V, r"theta must be finite"),
    ("theta inf in batch", lambda: qg.expect(two_qubit(), ZZ, np.array([[0.1], [np.inf]])), V,
     r"theta must be finite"),
    ("theta nan probabilities", lambda: qg.probabilities(two_qubit(), [np.nan]), V,
     r"theta must be finite"),
    ("theta nan state", lambda: qg.state(two_qubit(), [np.nan]), V, r"theta must be finite"),
    ("theta nan sample", lambda: qg.sample(two_qubit(), [np.nan], shots=3), V, r"theta must be finite"),
    ("theta nan angles", lambda: two_qubit().angles([np.nan]), V, r"theta must be finite"),
    ("theta strings", lambda: qg.expect(two_qubit(), ZZ, ["a"]), T, r"theta must be a real numeric"),
    ("theta None", lambda: qg.expect(two_qubit(), ZZ, None), T, r"theta must be a real array"),
    ("theta dict", lambda: qg.state(two_qubit(), {"a": 1.0}), T, r"theta must be a real array"),
    ("theta complex", lambda: qg.expect(two_qubit(), ZZ, np.array([0.5j])), T,
     r"theta must be a real numeric array; got dtype complex"),
    ("theta bool", lambda: qg.expect(two_qubit(), ZZ, np.array([True])), T, r"theta must be a real numeric"),
    ("theta objects", lambda: qg.expect(two_qubit(), ZZ, np.array([object()])), T,
     r"theta must be a real numeric"),
    # bad Pauli letter, Pauli string of the wrong length
    ("pauli letter", lambda: qg.Observable({"ZA": 1.0}), V, r"Pauli string 'ZA' .*found 'A'"),
    ("pauli empty string", lambda: qg.Observable({"": 1.0}), V, r"Pauli string '' must be a non-empty"),
    ("pauli not a string", lambda: qg.Observable({3: 1.0}), T, r"Pauli string must be a string"),
    ("pauli lengths differ", lambda: qg.Observable({"ZZ": 1.0, "Z": 1.0}), V,
     r"Pauli string 'Z' has 1 letters; expected one per qubit \(2\)"),
    ("pauli wrong length for circuit", lambda: qg.expect(two_qubit(), qg.Observable({"ZZZ": 1.0}), [0.1]),
     V, r"observable on 3 qubits does not fit a circuit of 2 qubits"),
    ("dense wrong size for circuit",
     lambda: qg.expect(two_qubit(), qg.Observable.from_matrix(np.eye(8)), [0.1]), V,
     r"observable on 3 qubits does not fit"),
    ("drive letter", lambda: qg.Gate.from_hamiltonian("p", np.eye(2), drive="Q"), V, r"drive 'Q'"),
    # complex coefficients
    ("coefficient complex", lambda: qg.Observable({"ZZ": 1j}), T, r"coefficient of 'ZZ' must be real"),
    ("coefficient complex zero imag", lambda: qg.Observable({"ZZ": 1 + 0j}), T,
     r"coefficient of 'ZZ' must be real"),
    ("coefficient numpy complex", lambda: qg.Observable({"X": np.complex128(2)}), T,
     r"coefficient of 'X' must be real"),
    ("coefficient string", lambda: qg.Observable({"ZZ": "1"}), T, r"coefficient of 'ZZ' must be a real"),
    ("coefficient nan", lambda: qg.Observable({"ZZ": np.nan}), V, r"coefficient of 'ZZ' must be finite"),
    ("scalar complex", lambda: 1j * ZZ, T, r"scalar must be real"),
    ("scalar complex right", lambda: ZZ * (2 + 1j), T, r"scalar must be real"),
    ("scalar nan", lambda: np.nan * ZZ, V, r"scalar must be finite"),
    # empty observable; observables of the wrong type
    ("observable empty", lambda: qg.Observable({}), V, r"terms must hold at least one Pauli string"),
    ("observable from a list", lambda: qg.Observable(["ZZ"]), T, r"terms must be a dict"),
    ("observables not Observable", lambda: qg.expect(two_qubit(), {"ZZ": 1.0}, [0.1]), T,
     r"observables must be an Observable"),
    ("observables empty list", lambda: qg.expect(two_qubit(), [], [0.1]), VT,
     r"observables must be an Observable or a non-empty list"),
    ("observables mixed list", lambda: qg.expect(two_qubit(), [ZZ, "ZZ"], [0.1]), T,
     r"observables must be Observable"),
    ("observables on different qubits", lambda: ZZ + qg.Observable({"Z": 1.0}), V,
     r"cannot combine observables on 2 and 1 qubits"),
    # a non-Hermitian matrix or generator
    ("matrix not Hermitian", lambda: qg.Observable.from_matrix([[0, 1], [0, 0]]), V,
     r"matrix must be Hermitian"),
    ("generator not Hermitian", lambda: qg.Gate.from_generator("g", [[0, 1j], [1j, 0]]), V,
     r"generator must be Hermitian"),
    ("drift not Hermitian", lambda: qg.Gate.from_hamiltonian("p", [[0, 1], [0, 0]], drive="X"), V,
     r"drift must be Hermitian"),
    # a matrix whose size is not a power of two (or that is not a square numeric matrix)
    ("matrix 3x3", lambda: qg.Observable.from_matrix(np.eye(3)), V,
     r"matrix must have a power-of-two size \(2, 4, 8, \.\.\.\); got 3x3"),
    ("matrix 1x1", lambda: qg.Observable.from_matrix(np.eye(1)), V, r"matrix must have a power-of-two size"),
    ("generator 6x6", lambda: qg.Gate.from_generator("g", np.eye(6)), V,
     r"generator must have a power-of-two size"),
    ("unitary 3x3", lambda: qg.Gate.fixed("u", np.eye(3)), V, r"unitary must have a power-of-two size"),
    ("matrix not square", lambda: qg.Observable.from_matrix(np.ones((2, 4))), V,
     r"matrix must be a square matrix; got shape \(2, 4\)"),
    ("matrix of strings", lambda: qg.Observable.from_matrix([["a", "b"], ["c", "d"]]), T,
     r"matrix must be a square numeric matrix"),
    ("matrix with nan", lambda: qg.Observable.from_matrix(np.full((2, 2), np.nan)), V,
     r"matrix must have finite entries"),
    ("generator with inf", lambda: qg.Gate.from_generator("g", np.diag([np.inf, 0.0])), V,
     r"generator must have finite entries"),
    # a non-unitary fixed gate
    ("unitary not unitary", lambda: qg.Gate.fixed("u", [[1, 1], [0, 1]]), V,
     r"unitary must be unitary"),
    ("unitary scaled", lambda: qg.Gate.fixed("u", 2 * np.eye(4)), V, r"unitary must be unitary"),
    # a gate applied to the wrong number of qubits; not a gate
    ("two-qubit gate on one", lambda: qg.Circuit(2).add(gates.CNOT, 0), V,
     r"gate 'CNOT' acts on 2 qubit\(s\); got qubits \(0,\)"),
    ("one-qubit gate on two", lambda: qg.Circuit(2).add(gates.RX, (0, 1)), V,
     r"gate 'RX' acts on 1 qubit\(s\); got qubits \(0, 1\)"),
    ("custom gate on too few", lambda: qg.Circuit(3).add(qg.Gate.from_generator("g", np.eye(8)), (0, 1)),
     V, r"gate 'g' acts on 3 qubit\(s\)"),
    ("gate not a Gate", lambda: qg.Circuit(2).add("RX", 0), T, r"gate must be a qgradlib Gate"),
    ("gate name empty", lambda: qg.Gate.from_generator("", np.eye(2)), T, r"name must be a non-empty string"),
    # shots that are not a positive int
    ("shots zero", lambda: qg.expect(two_qubit(), ZZ, [0.1], shots=0), V, r"shots must be a positive int"),
    ("shots negative", lambda: qg.expect(two_qubit(), ZZ, [0.1], shots=-5), V, r"shots must be a positive int"),
    ("shots float", lambda: qg.expect(two_qubit(), ZZ, [0.1], shots=100.0), V, r"shots must be a positive int"),
    ("shots fraction", lambda: qg.probabilities(two_qubit(), [0.1], shots=2.5), V,
     r"shots must be a positive int"),
    ("shots bool", lambda: qg.expect(two_qubit(), ZZ, [0.1], shots=True), V, r"shots must be a positive int"),
    ("shots string", lambda: qg.expect(two_qubit(), ZZ, [0.1], shots="100"), VT, r"shots must be a positive int"),
    ("sample shots zero", lambda: qg.sample(two_qubit(), [0.1], shots=0), V, r"shots must be a positive int"),
    ("sample shots None", lambda: qg.sample(two_qubit(), [0.1], shots=None), V, r"shots must be a positive int"),
    ("sample shots float", lambda: qg.sample(two_qubit(), [0.1], shots=10.0), V, r"shots must be a positive int"),
    ("seed a string", lambda: qg.sample(two_qubit(), [0.1], shots=3, seed="x"), T,
     r"seed must be an int, a numpy.random.Generator or None"),
    ("seed a float", lambda: qg.expect(two_qubit(), ZZ, [0.1], shots=3, seed=1.5), T, r"seed must be an int"),
    # qubits of probabilities
    ("probabilities qubits repeated", lambda: qg.probabilities(two_qubit(), [0.1], qubits=[0, 0]), V,
     r"qubits must be distinct"),
    ("probabilities qubit out of range", lambda: qg.probabilities(two_qubit(), [0.1], qubits=[2]), V,
     r"qubit 2 is out of range"),
    ("probabilities qubits empty", lambda: qg.probabilities(two_qubit(), [0.1], qubits=[]), V,
     r"qubits must be distinct and non-empty"),
    ("probabilities qubits an int", lambda: qg.probabilities(two_qubit(), [0.1], qubits=1), T,
     r"qubits must be a sequence of ints"),
    # circuits
    ("circuit not a Circuit", lambda: qg.expect("circuit", ZZ, [0.1]), T, r"circuit must be a qgradlib Circuit"),
    ("concatenate sizes differ", lambda: qg.Circuit(2) + qg.Circuit(3), V,
     r"cannot concatenate circuits on 2 and 3 qubits"),
    # a state (or a draw of shots) too large for memory
    ("state too large", lambda: qg.state(qg.Circuit(60).h(0), np.zeros(0)), V,
     r"final state \([\d.]+ states of 60 qubits at once\) needs [\d,]+ bytes .* only [\d,]+ bytes .* available"),
    ("expect state too large", lambda: qg.expect(qg.Circuit(60), qg.Observable({"Z" * 60: 1.0}), np.zeros(0)),
     V, r"evaluating 1 circuit\(s\) \([\d.]+ states of 60 qubits at once\) needs [\d,]+ bytes"),
    ("batch too large", lambda: qg.state(qg.Circuit(20).ry(0), np.zeros((10 ** 7, 1))), V,
     r"a run of 10000000 row\(s\) \([\d.e+,]+ states of 20 qubits at once\) needs [\d,]+ bytes"),
    ("shots too many for memory", lambda: qg.sample(two_qubit(), [0.1], shots=10 ** 15), V,
     r"1,000,000,000,000,000 shots of 1 circuit\(s\) needs [\d,]+ bytes"),
]


@pytest.mark.parametrize("call, exc, match", [c[1:] for c in CASES], ids=[c[0] for c in CASES])
def test_bad_input_is_refused_with_a_message_naming_the_argument(call, exc, match):
    with pytest.raises(exc, match=match):
        call()


def test_no_case_is_listed_twice():
    names = [c[0] for c in CASES]
    assert len(names) == len(set(names))
