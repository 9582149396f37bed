"""OpenQASM exchange: each standard-header gate against a dense matrix built from its published
definition, round trips, our own programs against the dense reference, and hostile input.

The reference definitions below are the gate definitions of OpenQASM 2.0's standard header
``qelib1.inc`` (Cross, Bishop, Smolin and Gambetta, arXiv:1707.03429 (2017), Fig. 4 and
Appendix; the gates after ``cu3`` are the later additions to the header that most readers
ship), written down from memory (``# from memory``) and interpreted here by a few lines of
test code on top of the primitive ``U`` and ``CX`` matrices of the paper's eq. (1). Each
recalled definition is also checked another way: the controlled gates against block matrices
built from their targets, the rotations against scipy's expm, the Toffoli family against
permutation matrices (``# common practice``).
"""
import builtins
import io
import math
import os
import re

import numpy as np
import pytest
import scipy.linalg
from autograd import grad

import qgradlib as qg
from qgradlib.circuits import qasm, qasm_gates
from qgradlib.circuits.qasm import number_text
from reference import circuit_ops, embed, reference_angles, theta_gradient

RNG = np.random.default_rng(2017)

# -- the published definitions, as a tiny interpreter of their text -------------------------------
# from memory: OpenQASM 2.0 qelib1.inc ("lam" stands for the header's "lambda")
QELIB1 = """
u3(theta,phi,lam) q { U(theta,phi,lam) q; }
u2(phi,lam) q { U(pi/2,phi,lam) q; }
u1(lam) q { U(0,0,lam) q; }
cx c,t { CX c,t; }
id a { U(0,0,0) a; }
u0(gamma) q { U(0,0,0) q; }
u(theta,phi,lam) q { U(theta,phi,lam) q; }
p(lam) q { U(0,0,lam) q; }
x a { u3(pi,0,pi) a; }
y a { u3(pi,pi/2,pi/2) a; }
z a { u1(pi) a; }
h a { u2(0,pi) a; }
s a { u1(pi/2) a; }
sdg a { u1(-pi/2) a; }
t a { u1(pi/4) a; }
tdg a { u1(-pi/4) a; }
rx(theta) a { u3(theta,-pi/2,pi/2) a; }
ry(theta) a { u3(theta,0,0) a; }
rz(phi) a { u1(phi) a; }
sx a { sdg a; h a; sdg a; }
sxdg a { s a; h a; s a; }
cz a,b { h b; cx a,b; h b; }
cy a,b { sdg b; cx a,b; s b; }
swap a,b { cx a,b; cx b,a; cx a,b; }
ch a,b { h b; sdg b; cx a,b; h b; t b; cx a,b; t b; h b; s b; x b; s a; }
ccx a,b,c { h c; cx b,c; tdg c; cx a,c; t c; cx b,c; tdg c; cx a,c; t b; t c; h c;
            cx a,b; t a; tdg b; cx a,b; }
cswap a,b,c { cx c,b; ccx a,b,c; cx c,b; }
crx(lam) a,b { u1(pi/2) b; cx a,b; u3(-lam/2,0,0) b; cx a,b; u3(lam/2,-pi/2,0) b; }
cry(lam) a,b { ry(lam/2) b; cx a,b; ry(-lam/2) b; cx a,b; }
crz(lam) a,b { rz(lam/2) b; cx a,b; rz(-lam/2) b; cx a,b; }
cu1(lam) a,b { u1(lam/2) a; cx a,b; u1(-lam/2) b; cx a,b; u1(lam/2) b; }
cp(lam) a,b { p(lam/2) a; cx a,b; p(-lam/2) b; cx a,b; p(lam/2) b; }
cu3(theta,phi,lam) c,t { u1((lam+phi)/2) c; u1((lam-phi)/2) t; cx c,t;
                         u3(-theta/2,0,-(phi+lam)/2) t; cx c,t; u3(theta/2,phi,0) t; }
csx a,b { h b; cu1(pi/2) a,b; h b; }
cu(theta,phi,lam,gamma) c,t { p(gamma) c; p((lam+phi)/2) c; p((lam-phi)/2) t; cx c,t;
                              u(-theta/2,0,-(phi+lam)/2) t; cx c,t; u(theta/2,phi,0) t; }
rxx(theta) a,b { u3(pi/2,theta,0) a; h b; cx a,b; u1(-theta) b; cx a,b; h b;
                 u2(-pi,pi-theta) a; }
rzz(theta) a,b { cx a,b; u1(theta) b; cx a,b; }
rccx a,b,c { u2(0,pi) c; u1(pi/4) c; cx b,c; u1(-pi/4) c; cx a,c; u1(pi/4) c; cx b,c;
             u1(-pi/4) c; u2(0,pi) c; }
rc3x a,b,c,d { u2(0,pi) d; u1(pi/4) d; cx c,d; u1(-pi/4) d; u2(0,pi) d; cx a,d; u1(pi/4) d;
               cx b,d; u1(-pi/4) d; cx a,d; u1(pi/4) d; cx b,d; u1(-pi/4) d; u2(0,pi) d;
               u1(pi/4) d; cx c,d; u1(-pi/4) d; u2(0,pi) d; }
c3x a,b,c,d { h d; p(pi/8) a; p(pi/8) b; p(pi/8) c; p(pi/8) d; cx a,b; p(-pi/8) b; cx a,b;
              cx b,c; p(-pi/8) c; cx a,c; p(pi/8) c; cx b,c; p(-pi/8) c; cx a,c; cx c,d;
              p(-pi/8) d; cx b,d; p(pi/8) d; cx c,d; p(-pi/8) d; cx a,d; p(pi/8) d; cx c,d;
              p(-pi/8) d; cx b,d; p(pi/8) d; cx c,d; p(-pi/8) d; cx a,d; h d; }
c3sqrtx a,b,c,d { h d; cu1(pi/8) a,d; h d; cx a,b; h d; cu1(-pi/8) b,d; h d; cx a,b; h d;
                  cu1(pi/8) b,d; h d; cx b,c; h d; cu1(-pi/8) c,d; h d; cx a,c; h d;
                  cu1(pi/8) c,d; h d; cx b,c; h d; cu1(-pi/8) c,d; h d; cx a,c; h d;
                  cu1(pi/8) c,d; h d; }
rc3xdg a,b,c,d { u2(0,pi) d; u1(pi/4) d; cx c,d; u1(-pi/4) d; u2(0,pi) d; u1(pi/4) d; cx b,d;
                 u1(-pi/4) d; cx a,d; u1(pi/4) d; cx b,d; u1(-pi/4) d; cx a,d; u2(0,pi) d;
                 u1(pi/4) d; cx c,d; u1(-pi/4) d; u2(0,pi) d; }
c4x a,b,c,d,e { h e; cu1(pi/2) d,e; h e; rc3x a,b,c,d; h e; cu1(-pi/2) d,e; h e; rc3xdg a,b,c,d;
                c3sqrtx a,b,c,e; }
"""
# One doubt in the recollection: c4x as recalled repeats rc3x where its construction needs the
# inverse, rc3xdg above (the reverse of rc3x with its angles negated; not a header gate): rc3x
# squares to CZ(a, b), not to the identity. With the inverse the sequence is C4X, the gate's
# meaning, which the first test below checks against the block matrix.
DEFS = {}
for m in re.finditer(r"(\w+)(?:\(([\w,]*)\))?\s+([\w,]+)\s*\{(.*?)\}", QELIB1, re.S):
    name, params, args, body = m.groups()
    calls = [re.match(r"\s*(\w+)(?:\((.*)\))?\s+([\w,]+)\s*$", s, re.S).groups()
             for s in body.split(";") if s.strip()]
    DEFS[name] = ((params or "").split(",") if params else [], args.split(","), calls)


def u_matrix(theta, phi, lam):
    """OpenQASM's U(theta, phi, lambda), Cross et al. (2017), eq. (1)."""
    c, s = math.cos(theta / 2), math.sin(theta / 2)
    return np.array([[c, -np.exp(1j * lam) * s], [np.exp(1j * phi) * s, np.exp(1j * (phi + lam)) * c]])


CX = np.eye(4)[[0, 1, 3, 2]].astype(complex)


def header_matrix(name, angles):
    """The matrix of header gate ``name`` on its own qubits (first argument most significant)."""
    params, args, calls = DEFS[name]
    k = len(args)
    env = dict(zip(params, angles), pi=math.pi)
    out = np.eye(2 ** k, dtype=complex)
    for callee, cargs, cqubits in calls:
        a = [eval(x, {"__builtins__": {}}, env) for x in cargs.split(",")] if cargs else []
        qs = [args.index(q) for q in cqubits.split(",")]
        m = u_matrix(*a) if callee == "U" else CX if callee == "CX" else header_matrix(callee, a)
        out = embed(m, qs, k) @ out
    return out


def apply(m, qs, u):
    """``embed(m, qs, n) @ u`` by a tensor contraction over the qubit axes (faster for n >= 5)."""
    n, k = int(np.log2(u.shape[0])), len(qs)
    t = u.reshape((2,) * n + (-1,))
    t = np.tensordot(m.reshape((2,) * (2 * k)), t, axes=(list(range(k, 2 * k)), list(qs)))
    return np.moveaxis(t, list(range(k)), list(qs)).reshape(u.shape)


def unitary(circuit, theta=()):
    """The circuit's operator from the reference's gate matrices (tests/reference)."""
    n = circuit.n_qubits
    out = np.eye(2 ** n, dtype=complex)
    for m, qs in circuit_ops(circuit, reference_angles(circuit, np.asarray(theta, dtype=float))):
        out = apply(m, qs, out)
    return out


def test_the_fast_product_is_the_reference_embedding():
    m = scipy.linalg.expm(-1j * np.arange(16).reshape(4, 4) / 7 * (1 + 1j))
    u = scipy.linalg.expm(1j * np.diag(np.arange(8.0)))
    assert np.allclose(apply(m, (2, 0), u), embed(m, (2, 0), 3) @ u)


def equal_up_to_phase(a, b, atol=1e-10):
    k = np.unravel_index(np.argmax(np.abs(b)), b.shape)
    phase = a[k] / b[k]
    return abs(abs(phase) - 1) < atol and np.allclose(a, phase * b, atol=atol)


def program(body, n, version=2):
    head = ('OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[%d];\n' if version == 2 else
            'OPENQASM 3.0;\ninclude "stdgates.inc";\nqubit[%d] q;\n') % n
    return head + body


# -- every header gate ----------------------------------------------------------------------------
def test_the_reference_definitions_hold_what_they_should():
    # each recalled definition checked another way (common practice): the known matrices
    X = np.array([[0, 1], [1, 0]])
    Hd = np.array([[1, 1], [1, -1]]) / np.sqrt(2)
    SX = scipy.linalg.sqrtm(X)

    def ctrl(u, k=1):
        d = u.shape[0]
        out = np.eye(d * 2 ** k, dtype=complex)
        out[-d:, -d:] = u
        return out

    a, b, c, g = 0.7, -1.3, 0.4, 0.9
    u3 = u_matrix(a, b, c)
    expect = {
        "x": X, "h": Hd, "sx": SX, "sxdg": SX.conj().T, "z": np.diag([1, -1]),
        "cz": ctrl(np.diag([1, -1])), "cy": ctrl(np.array([[0, -1j], [1j, 0]])), "ch": ctrl(Hd),
        "swap": np.eye(4)[[0, 2, 1, 3]], "ccx": ctrl(X, 2), "c3x": ctrl(X, 3), "c4x": ctrl(X, 4),
        "c3sqrtx": ctrl(SX, 3), "cswap": np.eye(8)[[0, 1, 2, 3, 4, 6, 5, 7]],
        "csx": ctrl(SX),
    }
    for name, m in expect.items():
        assert equal_up_to_phase(header_matrix(name, []), m), name
    # rotations against scipy's expm
    Xp, Zp, Yp = X.astype(complex), np.diag([1.0, -1.0]), np.array([[0, -1j], [1j, 0]])
    assert equal_up_to_phase(header_matrix("rx", [a]), scipy.linalg.expm(-0.5j * a * Xp))
    assert equal_up_to_phase(header_matrix("rxx", [a]), scipy.linalg.expm(-0.5j * a * np.kron(Xp, Xp)))
    assert equal_up_to_phase(header_matrix("rzz", [a]), scipy.linalg.expm(-0.5j * a * np.kron(Zp, Zp)))
    assert equal_up_to_phase(header_matrix("crx", [a]), ctrl(scipy.linalg.expm(-0.5j * a * Xp)))
    assert equal_up_to_phase(header_matrix("cry", [a]), ctrl(scipy.linalg.expm(-0.5j * a * Yp)))
    # controlled gates hold the exact phase of their target (cu1 is diag(1, 1, 1, e^{ia}))
    assert np.allclose(header_matrix("cu1", [a]), np.diag([1, 1, 1, np.exp(1j * a)]))
    assert np.allclose(header_matrix("cu3", [a, b, c]), ctrl(u3))
    assert np.allclose(header_matrix("cu", [a, b, c, g]), ctrl(np.exp(1j * g) * u3))
    # the relative-phase Toffolis differ from the Toffoli by phases only
    for name, k in (("rccx", 2), ("rc3x", 3)):
        m = header_matrix(name, [])
        assert np.allclose(np.abs(m), np.abs(ctrl(X, k)))


READ2 = sorted(set(qasm_gates.QELIB1) | {"U", "CX"})


@pytest.mark.parametrize("name", READ2)
def test_each_qelib1_gate_reads_as_its_definition(name):
    entry = qasm_gates.QELIB1.get(name) or qasm_gates.BUILTIN2[name]
    n_angles, k = entry[0], entry[1]
    angles = RNG.uniform(-3, 3, size=n_angles)
    # the gate on the qubits in a shuffled order, with one spare qubit, to check the layout
    n = k + 1
    order = list(RNG.permutation(n)[:k])
    args = "" if not n_angles else "(" + ", ".join(repr(float(a)) for a in angles) + ")"
    c = qg.from_qasm(program(f"{name}{args} " + ", ".join(f"q[{q}]" for q in order) + ";", n))
    ref_name = {"U": "u3", "CX": "cx"}.get(name, name)
    expected = embed(header_matrix(ref_name, list(angles)), order, n)
    assert equal_up_to_phase(unitary(c), expected), name


STD3 = ["p", "phase", "cp", "cphase", "cx", "CX", "U", "u1", "u2", "u3", "cu", "sdg", "tdg",
        "crx", "cry", "crz", "ch", "cy", "ccx", "cswap", "swap", "id", "sx"]


@pytest.mark.parametrize("name", STD3)
def test_stdgates_names_read_as_their_definitions(name):
    # OpenQASM 3's stdgates.inc keeps the qelib1 meanings (phase = p, cphase = cp, cu has four
    # angles); from memory, checked through the qelib1 definitions above
    entry = qasm_gates.STDGATES.get(name) or qasm_gates.BUILTIN3[name]
    n_angles, k = entry[0], entry[1]
    angles = RNG.uniform(-3, 3, size=n_angles)
    args = "" if not n_angles else "(" + ", ".join(repr(float(a)) for a in angles) + ")"
    c = qg.from_qasm(program(f"{name}{args} " + ", ".join(f"q[{q}]" for q in range(k)) + ";", k, 3))
    ref = {"phase": "p", "cphase": "cp", "CX": "cx", "U": "u3"}.get(name, name)
    assert equal_up_to_phase(unitary(c), header_matrix(ref, list(angles))), name


def test_the_brief_list_of_header_gates_is_read():
    wanted = ("u3 u2 u1 cx id u0 u p x y z h s sdg t tdg rx ry rz sx sxdg cz cy swap ch ccx cswap "
              "crx cry crz cu1 cp cu3 csx cu rxx rzz rccx rc3x c3x c3sqrtx c4x").split()
    assert set(wanted) <= set(qasm_gates.QELIB1) and set(wanted) <= set(DEFS)


# -- writing: every gate of ours, checked through the published definitions ----------------------
def run_written(text, theta=()):
    """Interpret a program written by to_qasm with the header definitions above (test code)."""
    lines = text.strip().splitlines()
    n = int(re.search(r"\[(\d+)\]", next(l for l in lines if "qreg" in l or "qubit[" in l)).group(1))
    env = {"pi": math.pi, **{f"theta{k}": v for k, v in enumerate(theta)}}
    out = np.eye(2 ** n, dtype=complex)
    for line in lines:
        m = re.match(r"(\w+)(?:\((.*)\))? (q\[.*);$", line)
        if not m or m.group(1) in ("qreg",):
            continue
        name, args, ops = m.groups()
        a = [eval(x, {"__builtins__": {}}, env) for x in args.split(",")] if args else []
        qs = [int(x) for x in re.findall(r"q\[(\d+)\]", ops)]
        out = embed(header_matrix(name, a), qs, n) @ out
    return out


def every_gate_circuit():
    c = qg.Circuit(3)
    for name in ("h", "x", "y", "z", "s", "t", "sx"):
        getattr(c, name)(RNG.integers(3))
    c.cnot(0, 2).cz(1, 0).swap(2, 1)
    for name in ("rx", "ry", "rz", "phase"):
        getattr(c, name)(RNG.integers(3), scale=RNG.uniform(-2, 2), offset=RNG.uniform(-1, 1))
    for name in ("crx", "cry", "crz", "cphase", "rxx", "ryy", "rzz"):
        getattr(c, name)(2, 0, angle=RNG.uniform(-3, 3))
        getattr(c, name)(0, 1, param=0, scale=-1.5)
    return c + qg.Circuit(3).s(1).t(2).sx(0).inverse()      # the daggers S†, T†, SX†


def test_written_programs_mean_the_circuit_under_the_published_definitions():
    c = every_gate_circuit()
    theta = RNG.uniform(-2, 2, size=c.n_params)
    u = unitary(c, theta)
    # OpenQASM 2 with the angles bound, and OpenQASM 3 with the parameters as inputs
    assert equal_up_to_phase(run_written(qg.to_qasm(c, theta)), u)
    three = qg.to_qasm(c)
    assert three.startswith("OPENQASM 3.0;") and "input float[64] theta3;" in three
    assert equal_up_to_phase(run_written(three, theta), u)
    # and what we read back is the same circuit up to a global phase
    assert equal_up_to_phase(unitary(qg.from_qasm(three), theta), u)
    assert equal_up_to_phase(unitary(qg.from_qasm(qg.to_qasm(c, theta))), u)


def test_round_trips_are_equal_where_the_header_has_our_gate():
    c = qg.Circuit(3).h(0).x(1).y(2).z(0).s(1).t(2).sx(0).cnot(0, 1).cz(1, 2).swap(0, 2)
    c.rx(0).ry(1, scale=2.0, offset=0.25).rz(2, param=0, scale=-0.5).phase(0, offset=-math.pi / 3)
    c.crx(0, 1, angle=0.1).cry(1, 2).crz(2, 0, scale=3.0).cphase(0, 2, angle=-2.5)
    c.rx(1, angle=math.pi / 2).ry(0, angle=1e-20).rz(1, angle=-7 * math.pi / 8)
    # QASM 2 keeps rxx and rzz as gates; QASM 3's stdgates has neither
    fixed = c.copy().rxx(0, 1, angle=0.3).rzz(1, 2, angle=-0.7)
    theta = RNG.normal(size=c.n_params)
    assert qg.from_qasm(qg.to_qasm(c)) == c
    inv = c.inverse()        # with S†, T†, SX†; stdgates.inc has no sxdg, QASM 2 has
    assert qg.from_qasm(qg.to_qasm(inv, theta)) == qg.from_qasm(qg.to_qasm(inv.copy(), theta))
    assert qg.to_qasm(qg.from_qasm(qg.to_qasm(inv, theta))) == qg.to_qasm(inv, theta)
    assert "sxdg q[0];" in qg.to_qasm(inv, theta) and "\nh q[0];\nsdg q[0];\nh q[0];" in qg.to_qasm(inv)
    inv = qg.Circuit(2).s(0).t(1).ry(0, scale=2.0).crz(0, 1, offset=0.5).inverse()
    assert qg.from_qasm(qg.to_qasm(inv)) == inv
    bound = qg.from_qasm(qg.to_qasm(fixed, theta))
    assert bound.n_params == 0 and qg.to_qasm(bound) == qg.to_qasm(fixed, theta)
    assert np.allclose(qg.state(bound, np.zeros(0)), qg.state(fixed, theta), atol=1e-12)
    # inputs declared but read by no gate stay parameters
    unused = qg.from_qasm(program("input float[64] a;\ninput float[64] b;\nh q[0];\n", 1, 3))
    assert unused.n_params == 2 and qg.from_qasm(qg.to_qasm(unused)) == unused


EXACT = ["h", "x", "y", "z", "s", "t", "sx", "cnot", "cz", "swap", "rx", "ry", "rz", "phase",
         "crx", "cry", "crz", "cphase"]
SEQUENCE = ["rxx", "ryy", "rzz"]


def random_circuit(rng, names, n=3, length=12):
    c = qg.Circuit(n)
    for _ in range(length):
        name = names[rng.integers(len(names))]
        method = getattr(c, name)
        k = 1 if name in ("h", "x", "y", "z", "s", "t", "sx", "rx", "ry", "rz", "phase") else 2
        qs = [int(q) for q in rng.permutation(n)[:k]]
        if name in ("h", "x", "y", "z", "s", "t", "sx", "cnot", "cz", "swap"):
            method(*qs)
            continue
        how = rng.integers(4)
        if how == 0:
            method(*qs, angle=float(rng.normal() * 10.0 ** rng.integers(-3, 3)))
        elif how == 1 or c.n_params == 0:
            method(*qs, scale=float(rng.normal()), offset=float(rng.normal()))
        elif how == 2:
            method(*qs, param=int(rng.integers(c.n_params)), scale=float(rng.integers(-3, 4)))
        else:
            method(*qs, input=int(rng.integers(2)), offset=float(rng.choice([0.0, math.pi / 2])))
    return c


def test_random_circuits_round_trip():
    rng = np.random.default_rng(3)
    for trial in range(30):
        c = random_circuit(rng, EXACT)
        data = [f"x{k}" for k in range(c.n_inputs)]
        assert qg.from_qasm(qg.to_qasm(c), data=data) == c, qg.to_qasm(c)
        # with the two-qubit rotations that OpenQASM 3 writes as sequences: the same operator
        d = random_circuit(rng, EXACT + SEQUENCE)
        theta = rng.normal(size=d.n_params)
        x = rng.normal(size=d.n_inputs)
        back = qg.from_qasm(qg.to_qasm(d), data=[f"x{k}" for k in range(d.n_inputs)])
        assert back.n_params == d.n_params and back.n_inputs == d.n_inputs
        ref = unitary(d.copy(), theta) if not d.n_inputs else None
        if ref is not None:
            assert equal_up_to_phase(unitary(back, theta), ref)
        kw = {"inputs": x} if d.n_inputs else {}
        assert np.allclose(qg.probabilities(back, theta, **kw), qg.probabilities(d, theta, **kw),
                           atol=1e-12)


def test_data_inputs_round_trip_through_data_names():
    c = qg.Circuit(2).ry(0, input=0).rz(1).ry(1, input=1, scale=0.5, offset=0.1).cnot(0, 1)
    text = qg.to_qasm(c)
    assert "input float[64] x1;" in text and "ry(0.5*x1 + 0.1) q[1];" in text
    back = qg.from_qasm(text, data=["x0", "x1"])
    assert back == c and back.n_inputs == 2
    # without data=, the features are read as trainable parameters after theta0
    assert qg.from_qasm(text).n_params == 3
    with pytest.raises(ValueError, match="'x7'"):
        qg.from_qasm(text, data=["x7"])
    with pytest.raises(TypeError, match="data"):
        qg.from_qasm(text, data="x0")
    with pytest.raises(ValueError, match="each input once"):
        qg.from_qasm(text, data=["x0", "x0"])


def test_numbers_are_written_exactly():
    values = list(RNG.normal(size=200) * 10.0 ** RNG.integers(-30, 30, size=200))
    values += [k * math.pi / d for k in range(-9, 10) for d in (1, 2, 3, 4, 8)]
    values += [0.1, 1e-300, 5e-324, 1.7976931348623157e308, -2.0, 3.0]
    for x in values:
        back = qg.from_qasm(program(f"rx({number_text(x)}) q[0];", 1))
        assert back.operations[0].angle == x, (x, number_text(x))


def test_writer_refuses_what_no_header_expresses_naming_the_operation():
    M = np.diag([0.0, 1.0, 2.5, 0.0])
    cases = [
        (qg.Gate.from_generator("mix", M), (0, 1), "operation 1 ('mix')"),
        (qg.Gate.from_hamiltonian("pulse", drift=np.diag([0.3, -0.3]), drive="X"), 0,
         "operation 1 ('pulse') is a gate defined by a drift Hamiltonian"),
        (qg.Gate.from_function("f", lambda a: np.diag([1, np.exp(1j * a)]), 1), 0,
         "operation 1 ('f') is a gate defined by a Python function"),
        (qg.Gate.fixed("twist", scipy.linalg.expm(-1j * np.array([[0.1, 0.4], [0.4, 0.2]]))), 0,
         "operation 1 ('twist') is a custom fixed gate"),
    ]
    for gate, qs, msg in cases:
        c = qg.Circuit(2).h(0).add(gate, qs)
        with pytest.raises(ValueError, match=re.escape(msg)):
            qg.to_qasm(c)
    noisy = qg.Circuit(1).h(0).noise(0, qg.channels.dephasing(0.1))
    with pytest.raises(ValueError, match="operation 1 is the noise channel 'dephasing'"):
        qg.to_qasm(noisy)
    # a custom gate whose data equals a standard gate's is written as that gate
    flip = qg.Circuit(1).add(qg.Gate.fixed("flip", [[0, 1], [1, 0]]), 0)
    assert qg.to_qasm(flip).endswith("x q[0];\n")
    with pytest.raises(TypeError, match="Circuit"):
        qg.to_qasm("h q[0];")
    with pytest.raises(ValueError, match="theta must have shape"):
        qg.to_qasm(qg.Circuit(1).ry(0), theta=np.zeros(3))


# -- our own programs against the dense reference --------------------------------------------------
def test_registers_broadcasting_and_gate_definitions_against_the_dense_reference():
    text = """OPENQASM 2.0;
    include "qelib1.inc";
    qreg a[2];
    creg c[3];
    qreg b[1];
    gate layer(t, s) x, y { ry(t) x; ry(-s / 2 + t) y; cx x, y; barrier x, y; }
    gate twice(t) x, y, z { layer(t, 2 * t) x, y; layer(t ^ 2, sqrt(2)) y, z; }
    h a;
    twice(pi / 5) a[1], b[0], a[0];
    rz(ln(exp(0.3)) + cos(0)) b;
    barrier a, b;
    measure a -> c[0:1];
    """.replace("measure a -> c[0:1];", "measure a[0] -> c[0];\nmeasure b[0] -> c[2];")
    c = qg.from_qasm(text)
    assert c.n_qubits == 3            # a[0], a[1], b[0] in declaration order

    def ry(t):  # scipy.linalg.expm
        return scipy.linalg.expm(-0.5j * t * np.array([[0, -1j], [1j, 0]]))

    t = math.pi / 5
    H = np.array([[1, 1], [1, -1]]) / np.sqrt(2)
    steps = [(H, [0]), (H, [1]),
             (ry(t), [1]), (ry(-2 * t / 2 + t), [2]), (CX, [1, 2]),
             (ry(t ** 2), [2]), (ry(-math.sqrt(2) / 2 + t ** 2), [0]), (CX, [2, 0]),
             (scipy.linalg.expm(-0.5j * 1.3 * np.diag([1.0, -1.0])), [2])]
    psi = np.eye(8)[0].astype(complex)
    for m, qs in steps:
        psi = embed(m, qs, 3) @ psi
    got = qg.state(c, np.zeros(0))
    assert equal_up_to_phase(got[:, None], psi[:, None])


def test_a_program_without_the_header_defines_its_own_gates():
    text = """OPENQASM 2.0;
    gate h a { U(pi/2, 0, pi) a; }
    gate cx c, t { CX c, t; }
    qreg q[2];
    h q[0];
    cx q[0], q[1];
    """
    # common practice: the Bell state (|00> + |11>)/sqrt(2), up to a global phase
    psi = qg.state(qg.from_qasm(text), np.zeros(0))
    assert equal_up_to_phase(psi[:, None], np.array([[1], [0], [0], [1]]) / np.sqrt(2))


def test_ghz_over_two_registers():
    c = qg.from_qasm(program("qreg r[2];\nh q[0];\ncx q[0], r[0];\ncx r[0], r[1];\n", 1))
    # common practice: the GHZ state (|000> + |111>)/sqrt(2)
    assert np.allclose(qg.state(c, np.zeros(0)), np.array([1, 0, 0, 0, 0, 0, 0, 1]) / np.sqrt(2))


def test_openqasm3_inputs_are_parameters_with_exact_gradients():
    text = """OPENQASM 3.0;
    include "stdgates.inc";
    input float[64] beta;
    input float[64] alpha;
    qubit[2] q;
    bit[2] m;
    ry(2 * alpha - pi / 4) q[0];
    rx(-beta / 3) q[1];
    cx q[0], q[1];
    crz(0.5 * (alpha + 1)) q[0], q[1];
    m = measure q;
    """
    c = qg.from_qasm(text)
    assert c.n_params == 2
    # declaration order: beta is theta[0], alpha theta[1]
    assert [(op.param, op.scale, op.offset) for op in c.parametric_operations] == \
        [(1, 2.0, -math.pi / 4), (0, -1 / 3, 0.0), (1, 0.5, 0.5)]
    assert str(c.parametric_operations[1].offset) == "0.0"      # no -0.0 in the angle map
    H = qg.Observable({"ZX": 0.7, "YI": -0.4, "XZ": 1.1})
    theta = np.array([0.3, -1.1])
    g = grad(lambda t: qg.expect(c, H, t))(theta)
    assert np.allclose(g, theta_gradient(c, theta, H.matrix().toarray()), atol=1e-10)


def test_global_phase_is_dropped_but_values_agree():
    # qelib1's rz is u1 = diag(1, e^{ia}); ours is exp(-i a Z/2): the states differ by a phase,
    # probabilities and expectation values do not (common practice)
    text = program("h q[0];\nrz(0.9) q[0];\ncu1(0.4) q[0], q[1];\nry(0.2) q[1];\n", 2)
    c = qg.from_qasm(text)
    by_definition = run_written(text)[:, 0]
    ours = qg.state(c, np.zeros(0))
    assert not np.allclose(ours, by_definition)
    assert np.allclose(np.abs(ours) ** 2, np.abs(by_definition) ** 2)
    assert np.allclose(qg.probabilities(c, np.zeros(0)), np.abs(by_definition) ** 2)
    H = qg.Observable({"XY": 1.0, "YZ": 0.5}).matrix().toarray()
    assert np.isclose(qg.expect(c, qg.Observable({"XY": 1.0, "YZ": 0.5}), np.zeros(0)),
                      np.real(by_definition.conj() @ H @ by_definition))


def test_measurements_are_read_at_the_end_only():
    end = program("creg c[2];\nh q[0];\nmeasure q -> c;\n", 2)
    assert len(qg.from_qasm(end)) == 1
    other = program("creg c[2];\nmeasure q[0] -> c[0];\nh q[1];\n", 2)
    assert len(qg.from_qasm(other)) == 1            # a gate on a qubit not measured is fine
    with pytest.raises(qg.QasmError, match=r"line 6, column 1: gate 'x' acts on q\[1\] after it was measured"):
        qg.from_qasm(program("creg c[2];\nmeasure q -> c;\nx q[1];\n", 2))


# -- hostile input ----------------------------------------------------------------------------------
def nested(depth):
    defs = ["gate g0 a { h a; h a; }"]
    defs += [f"gate g{k} a {{ g{k - 1} a; g{k - 1} a; }}" for k in range(1, depth)]
    return "\n".join(defs) + f"\ng{depth - 1} q[0];\n"


HOSTILE = [
    # (program, message fragment, line, column)
    (program('include "../qelib1.inc";\n', 1), "no file is ever opened", 4, 9),
    (program('include "/etc/passwd";\n', 1), "got '/etc/passwd'", 4, 9),
    (program('include "https://example.org/x.inc";\n', 1), "only the standard header", 4, 9),
    (program('include "stdgates.inc";\n', 1), "'qelib1.inc' of OpenQASM 2", 4, 9),
    (program('include "qelib1.inc\n', 1), "unterminated string", 4, 9),
    (program("h q[0]; /* never closed\n h q[0];", 1), "unterminated comment", 4, 9),
    (program("rx(" + "(" * 5000 + "1" + ")" * 5000 + ") q[0];", 1), "nested more than 100", 4, 104),
    (program("rx(" + "-" * 100000 + "1) q[0];", 1), "nested more than 100", 4, 103),
    (program("rx(" + "1+" * 100000 + "1) q[0];", 1), "nested more than 100", 4, 203),
    (program("rx(" + "2*" * 100000 + "1) q[0];", 1), "nested more than 100", 4, 203),
    (program("qreg big[1000000000000];", 1), "at most 64 are read", 4, 6),
    (program("qreg r[64];", 1), "brings the program to 65 qubits", 4, 6),
    (program("qreg r[" + "9" * 60 + "];", 1), "number literal of 60 characters", 4, 8),
    (program("gate g a { g a; }\n", 1), "calls itself", 4, 12),
    (program("gate g a { f a; }\ngate f a { g a; }\n", 1), "'f' is not defined", 4, 12),
    (program(nested(20), 1), "expands to 131,072 operations", 20, 6),
    (program("\n".join(f"gate g{k} a {{ {'h' if k == 0 else f'g{k - 1}'} a; }}" for k in range(40))
             + "\n", 1), "nests gate definitions 33 deep", 36, 6),
    (program("qreg r[64];\n".replace("64", "63") + "h r;\n" * 1600, 1), "beyond 100,000", 1592, 1),
    (program("h q[0]; @ q[0];", 1), "expected a statement, found '@'", 4, 9),
    (program("h q[0]; ` q[0];", 1), "unexpected character '`'", 4, 9),
    (program("rx(θ) q[0];", 1), "non-ASCII character U+03B8", 4, 4),
    (program("h q[0];\0", 1), "NUL character", 4, 8),
    (program("/* caf\u00e9 */ h q[0]; // \0", 1), "NUL character in a comment", 4, 23),
    (program("gate h a { x a; }", 1), "'h' is a gate of qelib1.inc", 4, 6),
    ("OPENQASM 2.0;\ngate h a { U(pi/2, 0, pi) a; }\ninclude \"qelib1.inc\";\nqreg q[1];",
     "the header defines 'h', which the program has already defined", 3, 9),
    (program("gate g a { x a; }\ngate g a { y a; }", 1), "'g' is already a gate", 5, 6),
    (program("qreg q[2];", 1), "'q' is already a quantum register", 4, 6),
    (program("cx q[0];", 2), "acts on 2 qubit(s); got 1", 4, 1),
    (program("rx q[0];", 1), "takes 1 angle(s); got 0", 4, 1),
    (program("rx(1, 2) q[0];", 1), "takes 1 angle(s); got 2", 4, 1),
    (program("cx q[0], q[0];", 2), "given qubit q[0] twice", 4, 1),
    (program("foo q[0];", 1), "gate 'foo' is not defined", 4, 1),
    (program("rx(alpha) q[0];", 1), "'alpha' is not defined", 4, 4),
    (program("h q[3];", 2), "index 3 is out of range for register 'q' of size 2", 4, 3),
    (program("h r[0];", 2), "'r' is not a declared quantum register", 4, 3),
    (program("creg c[1];\nh c;", 2), "'c' is a classical register", 5, 3),
    (program("qreg r[3];\ncx q, r;", 2), "registers of different sizes [2, 3]", 5, 1),
    (program("reset q[0];", 1), "reset is not supported", 4, 1),
    (program("creg c[1];\nif (c == 1) x q[0];", 1), "if is not supported", 5, 1),
    (program("opaque g a;", 1), "opaque is not supported", 4, 1),
    (program("rx(ln(0)) q[0];", 1), "not a finite real number", 4, 4),
    (program("rx(1/0) q[0];", 1), "division by zero", 4, 5),
    (program("rx(10^400) q[0];", 1), "not a finite real number", 4, 6),
    (program("rx(1e999) q[0];", 1), "number too large", 4, 4),
    (program("gate g(t) a { rx(t) b; }", 1), "'b' is not a qubit argument of gate 'g'", 4, 21),
    (program("gate g(t) a { rx(s) a; }", 1), "'s' is not an angle argument of gate 'g'", 4, 18),
    (program("gate g(t, t) a { rx(t) a; }", 1), "names 't' twice", 4, 11),
    (program("gate g(t) a { h a[0]; }", 1), "no index", 4, 18),
    (program("gate g a { h a; ", 1), "has no closing }", 4, 6),
    (program("h q[0]", 1), "expected ';', found the end of the program", 4, 7),
    (program("input float[64] t;", 1), "input declarations belong to OpenQASM 3", 4, 1),
    ("OPENQASM 4.0;\n", "version 4.0 is not read here", 1, 10),
    ('include "qelib1.inc";\nqreg q[1];', "starts with its version line", 1, 1),
    ("OPENQASM 2.0;\ninclude \"qelib1.inc\";\n", "declares no qubits", 3, 1),
    (program("input float[64] w;\nrx(sin(w)) q[0];", 1, 3), "sin() of input 'w' is not linear", 5, 4),
    (program("input float[64] w;\nrx(w * w) q[0];", 1, 3), "not linear", 5, 6),
    (program("input float[64] w;\nrx(1 / w) q[0];", 1, 3), "dividing by an input", 5, 6),
    (program("input float[64] w;\nrx(w ** 2) q[0];", 1, 3), "a power of an input", 5, 6),
    (program("input float[64] w;\ninput float[64] v;\nrx(w + v) q[0];", 1, 3),
     "depends on v and w", 6, 1),
    (program("input float[32] t;", 1, 3), "declare float[64]", 4, 13),
    (program("rx(2 ^ 3) q[0];", 1, 3), "bitwise xor", 4, 6),
    (program("ctrl @ x q[0], q[1];", 2, 3), "gate modifiers are not part", 4, 1),
    (program("rxx(0.1) q[0], q[1];", 2, 3), "gate 'rxx' is not defined", 4, 1),
    (program("qubit[2] r;\nh $0;", 1, 3), "expected a qubit or register, found '$'", 5, 3),
]


@pytest.mark.parametrize("text,fragment,line,col", HOSTILE,
                         ids=[f"{i}:{h[1][:30]}" for i, h in enumerate(HOSTILE)])
def test_hostile_and_bad_input_is_refused_naming_line_and_column(text, fragment, line, col):
    with pytest.raises(qg.QasmError) as info:
        qg.from_qasm(text)
    err = info.value
    assert fragment in str(err), str(err)
    assert (err.line, err.col) == (line, col), str(err)
    assert str(err).startswith(f"line {line}, column {col}: ")
    assert isinstance(err, ValueError)


def test_no_file_is_ever_opened(tmp_path, monkeypatch):
    real = tmp_path / "gates.inc"
    real.write_text("gate g a { h a; }\n")
    opened = []

    def refuse(*args, **kwargs):
        opened.append(args)
        raise AssertionError("a file was opened")

    monkeypatch.setattr(builtins, "open", refuse)
    monkeypatch.setattr(io, "open", refuse)
    monkeypatch.setattr(os, "open", refuse)
    for path in (str(real), "gates.inc", "qelib1.inc/../" + str(real)):
        with pytest.raises(qg.QasmError, match="no file is ever opened"):
            qg.from_qasm(program(f'include "{path}";\n', 1))
    assert len(qg.from_qasm(program("h q[0];\n", 1))) == 1       # the standard header is built in
    assert not opened


def test_input_size_and_type_are_bounded():
    big = "OPENQASM 2.0;\n" + " " * qasm.MAX_TEXT
    with pytest.raises(qg.QasmError, match="at most 1,000,000 are read"):
        qg.from_qasm(big)
    with pytest.raises(TypeError, match="str"):
        qg.from_qasm(b"OPENQASM 2.0;")


def test_errors_inside_gate_definitions_name_the_call():
    text = program("input float[64] w;\ngate g(a) x { rx(cos(a)) x; }\ng(w) q[0];\n", 1, 3)
    with pytest.raises(qg.QasmError, match=r"line 5, column 18: cos\(\) of input 'w'.*called at line 6"):
        qg.from_qasm(text)
