"""Circuits as OpenQASM text, and OpenQASM programs as circuits.

OpenQASM is the open exchange format of gate-level programs: version 2.0 (Cross, Bishop,
Smolin and Gambetta, arXiv:1707.03429, 2017) and version 3 (Cross et al., ACM Trans. Quantum
Comput. 3, 12, 2022). `to_qasm` writes a circuit; `from_qasm` reads a program.

Writing. A circuit whose angles are all numbers (or whose parameters are bound by
``theta=``) is written as OpenQASM 2.0 with ``include "qelib1.inc";`` and one register
``q``. A circuit with trainable parameters left open, or with data inputs, is written as
OpenQASM 3 with ``include "stdgates.inc";``: each parameter is an ``input float[64]
thetaK;`` declaration and each data feature an ``input float[64] xK;`` declaration, in
index order, and each angle is its map, such as ``2*theta0 + 0.25``. Numbers are written
exactly (Python's shortest round-trip form, or a multiple of ``pi`` where that is the same
float). The gate names are in `qgradlib.circuits.qasm_gates`. Gates no header can express
exactly are refused with the index of the operation: custom gates (unless their matrix or
generator equals a standard gate's), gates defined by a Hamiltonian or a function, and noise
channels. OpenQASM 2 defines gates only up to a global phase (its ``rz`` is ``u1``), so the
global phase of a state is not part of the exchange; expectation values and probabilities
are.

Reading. `from_qasm` reads OpenQASM 2.0 and a subset of OpenQASM 3: registers (several are
laid out one after another in declaration order, as qubits 0, 1, ...), the gates of the
standard header, user ``gate`` definitions (expanded), register broadcasting (``h q;``,
``cx a, b;`` with equal sizes), expressions with ``pi``, ``+ - * /``, powers, unary minus
and ``sin cos tan exp ln sqrt``. ``input float[64] name;`` declarations become trainable
parameters in declaration order (or data features, for the names given in ``data=``); an
angle must be linear in at most one of them, ``scale * name + offset``. ``barrier`` is
ignored. ``measure`` is accepted where no gate acts on the measured qubit afterwards, and
ignored: `qgradlib.probabilities`, `qgradlib.sample` and `qgradlib.counts` play its part.
``reset``, ``if``, ``opaque`` and measurement in the middle of a circuit are refused.

Bounds. ``include`` accepts the standard header of the program's version only and never
opens a file. The text is at most `MAX_TEXT` characters, an expression at most
`MAX_EXPRESSION_DEPTH` levels deep, a program at most `MAX_QUBITS` qubits (as for JSON
files) and `MAX_OPERATIONS` operations after expansion, and gate definitions nest at most
`MAX_GATE_NESTING` deep; a definition that would expand beyond `MAX_OPERATIONS` is refused
where it is defined. Every refusal is a `QasmError` naming line and column.

Examples
--------
>>> import qgradlib as qg
>>> c = qg.Circuit(2).h(0).ry(1, scale=2.0, offset=0.25).cnot(0, 1)
>>> print(qg.to_qasm(c))
OPENQASM 3.0;
include "stdgates.inc";
input float[64] theta0;
qubit[2] q;
h q[0];
ry(2*theta0 + 0.25) q[1];
cx q[0], q[1];
>>> qg.from_qasm(qg.to_qasm(c)) == c
True
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from autograd.tracer import getval

from . import gates as _g
from .channels import Channel
from .circuit import Circuit, check_theta
from .qasm_gates import BUILTIN2, BUILTIN3, QELIB1, SDG, STDGATES, SXDG, TDG, WRITE, Affine
from .qasm_parse import (MAX_EXPRESSION_DEPTH, MAX_TEXT, Barrier, Call, Function,
                         Name, Num, QasmError, Unary, parse)

__all__ = ["to_qasm", "from_qasm", "QasmError", "MAX_TEXT", "MAX_EXPRESSION_DEPTH", "MAX_QUBITS",
           "MAX_OPERATIONS", "MAX_GATE_NESTING"]

MAX_QUBITS = 64               # as for JSON files; the memory guard decides what can run
MAX_OPERATIONS = 100_000      # operations of the circuit, after gate definitions are expanded
MAX_GATE_NESTING = 32         # gate definitions calling gate definitions

_HEADERS = {2: ("qelib1.inc", QELIB1), 3: ("stdgates.inc", STDGATES)}
_CONSTANTS = {2: {"pi": math.pi}, 3: {"pi": math.pi, "tau": 2 * math.pi, "euler": math.e}}
_MATH = {"sin": math.sin, "cos": math.cos, "tan": math.tan, "exp": math.exp, "ln": math.log,
         "sqrt": math.sqrt}


# -- writing ---------------------------------------------------------------------------------
def _pi_text(x):
    for d in (1, 2, 3, 4, 6, 8, 12, 16):
        for k in range(1, 4 * d + 1):
            if math.gcd(k, d) == 1 and float(k) * math.pi / float(d) == abs(x):
                body = ("pi" if k == 1 else f"{k}*pi") + ("" if d == 1 else f"/{d}")
                return ("-" if x < 0 else "") + body
    return None


def number_text(x: float) -> str:
    """``x`` as an OpenQASM number that reads back as exactly ``x``.

    Examples
    --------
    >>> import math
    >>> number_text(2.0), number_text(-math.pi / 2), number_text(0.1), number_text(1e-20)
    ('2', '-pi/2', '0.1', '1.0e-20')
    """
    x = float(x)
    if x == int(x) and abs(x) < 2.0 ** 53:
        return str(int(x))
    text = _pi_text(x)
    if text is not None:
        return text
    r = repr(x)
    mantissa, e, exponent = r.partition("e")
    if e and "." not in mantissa:
        r = f"{mantissa}.0e{exponent}"
    return r


def _angle_text(name, scale, offset):
    if scale == 1.0:
        text = name
    elif scale == -1.0:
        text = "-" + name
    else:
        text = f"{number_text(scale)}*{name}"
    if offset > 0:
        text += f" + {number_text(offset)}"
    elif offset < 0:
        text += f" - {number_text(-offset)}"
    return text


_EQUAL = {}


def _written_as(gate):
    """The standard gate ``gate`` equals exactly (by name or by its data), or None."""
    if id(gate) in WRITE:
        return gate
    if not _EQUAL:
        for std in list(_g.STANDARD.values()) + [SDG, TDG, SXDG]:
            data = std.unitary if std.kind == "fixed" else std.generator
            _EQUAL[(std.kind, data.shape, data.tobytes())] = std
    data = gate.unitary if gate.kind == "fixed" else gate.generator if gate.kind == "generator" else None
    if data is None:
        return None
    return _EQUAL.get((gate.kind, data.shape, np.asarray(data).tobytes()))


def _refusal(i, op):
    gate = op.gate
    if isinstance(gate, Channel):
        return (f"operation {i} is the noise channel {gate.name!r}: OpenQASM has no noise "
                "channels, so a noisy circuit cannot be written (write the circuit without "
                "its channels)")
    why = {"fixed": "a custom fixed gate whose matrix is no standard gate's",
           "generator": "a custom gate whose generator is no standard gate's",
           "hamiltonian": "a gate defined by a drift Hamiltonian and a drive",
           "function": "a gate defined by a Python function"}.get(gate.kind, f"a {gate.kind} gate")
    return (f"operation {i} ({gate.name!r}) is {why}; OpenQASM's standard headers cannot express "
            "it exactly, so it is not written (decompose it into standard gates first)")


def to_qasm(circuit, theta=None) -> str:
    """The circuit as an OpenQASM program (text).

    Parameters
    ----------
    circuit : Circuit
    theta : array_like of shape (n_params,), optional
        Values for the trainable parameters: the angles are then written as numbers. Left
        out, each parameter is an OpenQASM 3 ``input float[64] thetaK;`` declaration.

    Returns
    -------
    str
        OpenQASM 2.0 when every angle is a number, OpenQASM 3 when parameters are left open
        or the circuit reads data inputs (``input float[64] xK;``). The module notes
        (`qgradlib.circuits.qasm`) give the mapping and the refusals; OpenQASM 2 carries no
        global phase.

    Raises
    ------
    ValueError
        For an operation no standard header expresses exactly (custom, Hamiltonian and
        function gates, noise channels), naming the operation's index.

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> c = qg.Circuit(2).h(0).crz(0, 1).rx(1, angle=np.pi / 4)
    >>> print(qg.to_qasm(c, theta=np.array([0.5])))
    OPENQASM 2.0;
    include "qelib1.inc";
    qreg q[2];
    h q[0];
    crz(0.5) q[0], q[1];
    rx(pi/4) q[1];
    """
    if not isinstance(circuit, Circuit):
        raise TypeError(f"circuit must be a qgradlib Circuit; got {type(circuit).__name__}")
    if theta is not None:
        theta = np.asarray(getval(check_theta(circuit, theta)), dtype=float)
        if theta.ndim != 1:
            raise ValueError(f"theta must have shape ({circuit.n_params},) to write one program; "
                             f"got {theta.shape}")
    version = 3 if (theta is None and circuit.n_params) or circuit.n_inputs else 2
    n = circuit.n_qubits
    if version == 2:
        lines = ["OPENQASM 2.0;", 'include "qelib1.inc";', f"qreg q[{n}];"]
    else:
        lines = ["OPENQASM 3.0;", 'include "stdgates.inc";']
        if theta is None:
            lines += [f"input float[64] theta{k};" for k in range(circuit.n_params)]
        lines += [f"input float[64] x{k};" for k in range(circuit.n_inputs)]
        lines.append(f"qubit[{n}] q;")
    for i, op in enumerate(circuit.operations):
        std = None if isinstance(op.gate, Channel) else _written_as(op.gate)
        if std is None:
            raise ValueError(_refusal(i, op))
        if not op.gate.parametric:
            angle = None
        elif op.param is not None:
            angle = (number_text(theta[op.param] * op.scale + op.offset) if theta is not None
                     else _angle_text(f"theta{op.param}", op.scale, op.offset))
        elif op.input is not None:
            angle = _angle_text(f"x{op.input}", op.scale, op.offset)
        else:
            angle = number_text(op.angle)
        for name, a, where in WRITE[id(std)][version](angle):
            qs = op.qubits if where is None else tuple(op.qubits[j] for j in where)
            head = name if a is None else f"{name}({a})"
            lines.append(f"{head} " + ", ".join(f"q[{q}]" for q in qs) + ";")
    return "\n".join(lines) + "\n"


# -- reading ---------------------------------------------------------------------------------
@dataclass(frozen=True)
class _Standard:
    name: str
    n_angles: int
    n_qubits: int
    expand: object
    size: int
    depth: int = 0


@dataclass(frozen=True)
class _Defined:
    name: str
    params: tuple
    qubits: tuple
    body: tuple
    n_angles: int
    n_qubits: int
    size: int
    depth: int


def _fail(msg, node):
    raise QasmError(msg, node.line, node.col)


def _standard(name, entry):
    n_angles, n_qubits, expand = entry
    size = len(expand([Affine(1.0)] * n_angles, tuple(range(n_qubits))))
    return _Standard(name, n_angles, n_qubits, expand, size)


class _Reader:
    def __init__(self, program, data):
        self.version = program.version
        self.program = program
        self.data = data
        self.table = {name: _standard(name, e)
                      for name, e in (BUILTIN2 if self.version == 2 else BUILTIN3).items()}
        self.header_name, self.header = _HEADERS[self.version]
        self.included = False
        self.constants = _CONSTANTS[self.version]
        self.qregs, self.cregs = {}, {}
        self.n = 0
        self.inputs = {}          # name -> Affine of that input alone
        self.kind = {}            # input name -> ("param", index) or ("input", feature)
        self.n_params = 0
        self.ops = []             # (gate, qubits, Affine or None, node)
        self.measured = {}        # qubit -> the Measure node

    # names
    def taken(self, name, node, what):
        if name in self.constants or name in _MATH:
            _fail(f"{name!r} is a built-in name of OpenQASM and cannot name {what}", node)
        for space, kind in ((self.qregs, "a quantum register"), (self.cregs, "a classical register"),
                            (self.inputs, "an input"), (self.table, "a gate")):
            if name in space:
                _fail(f"{name!r} is already {kind}; it cannot also name {what}", node)
        if self.included and name in self.header:
            _fail(f"{name!r} is a gate of {self.header_name}; it cannot also name {what}", node)

    def lookup(self, name, node, inside=None):
        if name in self.table:
            return self.table[name]
        if name in self.header:
            if not self.included:
                _fail(f"gate {name!r} belongs to the standard header: add include "
                      f'"{self.header_name}"; before using it', node)
            self.table[name] = _standard(name, self.header[name])
            return self.table[name]
        if inside is not None and name == inside:
            _fail(f"gate {name!r} calls itself; a gate may call only gates defined before it", node)
        _fail(f"gate {name!r} is not defined" + ("" if inside is None else
              " (a gate may call only gates defined before it)"), node)

    # statements
    def run(self):
        for s in self.program.statements:
            getattr(self, type(s).__name__.lower())(s)
        if not self.n:
            raise QasmError("the program declares no qubits (qreg q[n]; or qubit[n] q;)",
                            self.program.line, self.program.col)
        missing = [d for d in self.data if d not in self.kind]
        if missing:
            raise ValueError(f"data names {missing[0]!r}, which the program does not declare as "
                             f"an input (its inputs: {', '.join(self.kind) or 'none'})")
        return self.build()

    def include(self, s):
        if s.path != self.header_name:
            _fail(f"include accepts only the standard header {self.header_name!r} of OpenQASM "
                  f"{self.version}, which is built in; no file is ever opened (got {s.path!r})", s)
        # a program may define its own h, cx, ... without the header, but not both
        clash = sorted(n for n, g in self.table.items() if isinstance(g, _Defined) and n in self.header)
        clash += sorted(n for n in list(self.qregs) + list(self.cregs) + list(self.inputs)
                        if n in self.header)
        if clash:
            _fail(f"the header defines {clash[0]!r}, which the program has already defined", s)
        self.included = True

    def register(self, s):
        what = "a register"
        self.taken(s.name, s, what)
        if s.size < 1:
            _fail(f"register {s.name!r} has size {s.size}; a register holds at least one bit", s)
        if s.kind == "classical":
            if s.size > MAX_TEXT:
                _fail(f"classical register {s.name!r} of {s.size} bits is larger than any "
                      "program could use", s)
            self.cregs[s.name] = s.size
            return
        if self.n + s.size > MAX_QUBITS:
            _fail(f"register {s.name!r} of {s.size} qubits brings the program to {self.n + s.size} "
                  f"qubits; at most {MAX_QUBITS} are read", s)
        self.qregs[s.name] = (self.n, s.size)
        self.n += s.size

    def input(self, s):
        self.taken(s.name, s, "an input")
        self.inputs[s.name] = Affine(0.0, {s.name: 1.0})
        if s.name in self.data:
            self.kind[s.name] = ("input", self.data.index(s.name))
        else:
            self.kind[s.name] = ("param", self.n_params)
            self.n_params += 1

    def gatedef(self, s):
        self.taken(s.name, s, "a gate")
        seen = set()
        for p in s.params + s.qubits:
            if p.name in seen:
                _fail(f"gate {s.name!r} names {p.name!r} twice in its arguments", p)
            if p.name in self.constants or p.name in _MATH:
                _fail(f"{p.name!r} is a built-in name and cannot be a gate argument", p)
            seen.add(p.name)
        params = {p.name for p in s.params}
        qubits = [q.name for q in s.qubits]
        size, depth = 0, 0
        for call in s.body:
            if isinstance(call, Barrier):
                for o in call.operands:
                    if o.name not in qubits:
                        _fail(f"{o.name!r} is not a qubit argument of gate {s.name!r}", o)
                continue
            g = self.lookup(call.name, call, inside=s.name)
            self.arity(g, call)
            for e in call.args:
                self.names_in(e, params, s.name)
            for o in call.operands:
                if o.name not in qubits:
                    _fail(f"{o.name!r} is not a qubit argument of gate {s.name!r}", o)
            self.distinct([o.name for o in call.operands], call)
            size += g.size
            depth = max(depth, g.depth + 1)
        if size > MAX_OPERATIONS:
            _fail(f"gate {s.name!r} expands to {size:,} operations; at most {MAX_OPERATIONS:,} "
                  "are read", s)
        if depth > MAX_GATE_NESTING:
            _fail(f"gate {s.name!r} nests gate definitions {depth} deep; at most "
                  f"{MAX_GATE_NESTING} are read", s)
        self.table[s.name] = _Defined(s.name, tuple(p.name for p in s.params), tuple(qubits),
                                      tuple(c for c in s.body if isinstance(c, Call)),
                                      len(s.params), len(qubits), size, depth)

    def names_in(self, e, params, gate):
        if isinstance(e, Name):
            if e.name not in params and e.name not in self.constants:
                _fail(f"{e.name!r} is not an angle argument of gate {gate!r}", e)
        for child in ("arg", "left", "right"):
            if hasattr(e, child):
                self.names_in(getattr(e, child), params, gate)

    def arity(self, g, call):
        if len(call.args) != g.n_angles:
            _fail(f"gate {call.name!r} takes {g.n_angles} angle(s); got {len(call.args)}", call)
        if len(call.operands) != g.n_qubits:
            _fail(f"gate {call.name!r} acts on {g.n_qubits} qubit(s); got {len(call.operands)}", call)

    def distinct(self, names, call):
        if len(set(names)) != len(names):
            _fail(f"gate {call.name!r} is given the same qubit twice", call)

    def qubits_of(self, o):
        if o.name in self.cregs:
            _fail(f"{o.name!r} is a classical register; gates act on qubits", o)
        if o.name not in self.qregs:
            _fail(f"{o.name!r} is not a declared quantum register", o)
        start, size = self.qregs[o.name]
        if o.index is None:
            return list(range(start, start + size))
        if o.index >= size:
            _fail(f"index {o.index} is out of range for register {o.name!r} of size {size} "
                  f"(0..{size - 1})", o)
        return [start + o.index]

    def label(self, q):
        for name, (start, size) in self.qregs.items():
            if start <= q < start + size:
                return f"{name}[{q - start}]"

    def call(self, s):
        g = self.lookup(s.name, s)
        self.arity(g, s)
        angles = [self.evaluate(e, self.inputs) for e in s.args]
        lists = [self.qubits_of(o) for o in s.operands]
        sizes = {len(l) for o, l in zip(s.operands, lists) if o.index is None}
        if len(sizes) > 1:
            _fail(f"gate {s.name!r} is broadcast over registers of different sizes "
                  f"{sorted(sizes)}; they must be equal", s)
        reps = sizes.pop() if sizes else 1
        if len(self.ops) + reps * g.size > MAX_OPERATIONS:
            _fail(f"the program grows beyond {MAX_OPERATIONS:,} operations here", s)
        for r in range(reps):
            qs = tuple(l[r] if o.index is None else l[0] for o, l in zip(s.operands, lists))
            twice = [q for q in qs if qs.count(q) > 1]
            if twice:
                _fail(f"gate {s.name!r} is given qubit {self.label(twice[0])} twice", s)
            for q in qs:
                if q in self.measured:
                    m = self.measured[q]
                    _fail(f"gate {s.name!r} acts on {self.label(q)} after it was measured (line "
                          f"{m.line}); measurements are read only at the end of a circuit", s)
            self.expand(g, angles, qs, s)

    def expand(self, g, angles, qs, site):
        if isinstance(g, _Standard):
            for gate, q, a in g.expand(angles, qs):
                self.ops.append((gate, q, a, site))
            return
        env = dict(zip(g.params, angles))
        where = dict(zip(g.qubits, qs))
        for call in g.body:
            self.expand(self.table[call.name], [self.evaluate(e, env, site) for e in call.args],
                        tuple(where[o.name] for o in call.operands), site)

    def barrier(self, s):
        for o in s.operands:
            self.qubits_of(o)

    def measure(self, s):
        qs = self.qubits_of(s.qubits)
        if s.target is not None:
            t = s.target
            if t.name not in self.cregs:
                _fail(f"{t.name!r} is not a declared classical register", t)
            size = self.cregs[t.name]
            if t.index is not None and t.index >= size:
                _fail(f"index {t.index} is out of range for register {t.name!r} of size {size}", t)
            bits = size if t.index is None else 1
            if bits != len(qs):
                _fail(f"measure writes {len(qs)} qubit(s) into {bits} bit(s); the sizes must agree", s)
        for q in qs:
            self.measured.setdefault(q, s)

    # expressions
    def evaluate(self, e, env, site=None):
        where = "" if site is None else f" (in gate {site.name!r} called at line {site.line})"
        return self._value(e, env, where)

    def _value(self, e, env, where):
        def bad(msg, node=e):
            _fail(msg + where, node)

        if isinstance(e, Num):
            if not math.isfinite(e.value):
                bad("number too large for a float")
            return Affine(e.value)
        if isinstance(e, Name):
            if e.name in env:
                return env[e.name]
            if e.name in self.constants:
                return Affine(self.constants[e.name])
            if e.name in self.qregs or e.name in self.cregs:
                bad(f"{e.name!r} is a register, not an angle")
            bad(f"{e.name!r} is not defined (angles may use inputs, pi and numbers)")
        if isinstance(e, Unary):
            v = self._value(e.arg, env, where)
            return -v if e.op == "-" else v
        if isinstance(e, Function):
            v = self._value(e.arg, env, where)
            if not v.constant:
                bad(f"{e.name}() of input {next(iter(v.coef))!r} is not linear in it; an angle is "
                    "scale * input + offset")
            return Affine(self._number(lambda: _MATH[e.name](v.const), e, where))
        left, right = self._value(e.left, env, where), self._value(e.right, env, where)
        if e.op == "+":
            out = left + right
        elif e.op == "-":
            out = left - right
        elif e.op == "*":
            if not left.constant and not right.constant:
                bad("a product of two angles that both depend on inputs is not linear")
            out = left.scaled(right.const) if right.constant else right.scaled(left.const)
        elif e.op == "/":
            if not right.constant:
                bad("dividing by an input is not linear in it; an angle is scale * input + offset")
            if right.const == 0.0:
                bad("division by zero")
            out = left.divided(right.const)
        else:
            if not (left.constant and right.constant):
                bad("a power of an input is not linear in it; an angle is scale * input + offset")
            out = Affine(self._number(lambda: math.pow(left.const, right.const), e, where))
        if not (math.isfinite(out.const) and all(math.isfinite(v) for v in out.coef.values())):
            bad("the expression is not a finite number")
        return out

    def _number(self, fn, e, where):
        try:
            v = fn()
        except (ValueError, OverflowError, ZeroDivisionError):
            v = math.nan
        if not math.isfinite(v):
            _fail("the expression is not a finite real number (out of its function's domain, "
                  "or too large)" + where, e)
        return v

    # the circuit
    def build(self):
        c = Circuit(self.n)
        # declared inputs are parameters even where no gate reads them, as in the program
        c._n_params = self.n_params
        c._n_inputs = len(self.data)
        for gate, qs, a, node in self.ops:
            if a is None:
                c.add(gate, qs)
            elif a.constant:
                c.add(gate, qs, angle=a.const + 0.0)      # + 0.0 turns -0.0 into 0.0
            elif len(a.coef) > 1:
                _fail(f"an angle of gate {node.name!r} depends on {' and '.join(sorted(a.coef))}; a "
                      "qgradlib angle is scale * (one input) + offset", node)
            else:
                (name, scale), = a.coef.items()
                kind, k = self.kind[name]
                if kind == "param":
                    c.add(gate, qs, k, scale=scale + 0.0, offset=a.const + 0.0)
                else:
                    c.add(gate, qs, scale=scale + 0.0, offset=a.const + 0.0, input=k)
        return c


def from_qasm(text: str, data=None) -> Circuit:
    """A circuit from an OpenQASM 2.0 or OpenQASM 3 program.

    Parameters
    ----------
    text : str
        The program. ``include`` names only the standard header (``"qelib1.inc"`` or
        ``"stdgates.inc"``), which is built in: no file is ever opened.
    data : sequence of str, optional
        Names of ``input`` declarations that hold the features of a data point: the k-th name
        is feature ``k`` (``input=k`` gates). Every other input is a trainable parameter,
        numbered in declaration order.

    Returns
    -------
    Circuit
        Registers laid out in declaration order; ``barrier`` and final ``measure`` ignored.

    Raises
    ------
    QasmError
        (a ValueError) naming the line and column of what cannot be read; the module notes
        (`qgradlib.circuits.qasm`) list what is refused and the bounds on size.

    Examples
    --------
    >>> import qgradlib as qg
    >>> c = qg.from_qasm('''OPENQASM 2.0;
    ... include "qelib1.inc";
    ... qreg a[1];
    ... qreg b[2];
    ... gate bell x, y { h x; cx x, y; }
    ... bell a[0], b[1];
    ... rz(-pi/4) b;''')
    >>> [(op.gate.name, op.qubits) for op in c.operations]
    [('H', (0,)), ('CNOT', (0, 2)), ('RZ', (1,)), ('RZ', (2,))]
    """
    if data is None:
        data = []
    elif isinstance(data, str) or not all(isinstance(d, str) for d in data):
        raise TypeError(f"data must be a sequence of input names (str); got {data!r}")
    data = list(data)
    if len(set(data)) != len(data):
        raise ValueError(f"data must name each input once; got {data!r}")
    return _Reader(parse(text), data).run()

