"""The gates of OpenQASM's standard headers in qgradlib's gates, and qgradlib's gates in them.

Reading: every gate of ``qelib1.inc`` (OpenQASM 2.0; Cross, Bishop, Smolin and Gambetta,
arXiv:1707.03429, 2017, with the later additions most readers ship: ``p``, ``sx``, ``swap``,
``crx``, ``rxx``, ``rzz``, ``c3x``, ...) and of ``stdgates.inc`` (OpenQASM 3) becomes a short
sequence of our gates, equal to the header's definition up to a global phase (OpenQASM 2
defines gates only up to one). Where we have an equal gate it is that gate (``rz`` is
`RZ`, ``u1`` and ``p`` are `PHASE`, ``cu1`` and ``cp`` are `CPHASE`); otherwise an exact
decomposition:

- ``u3(t, f, l)``, ``u``, ``U``: RZ(l), RY(t), RZ(f) (rotations by a constant zero left out);
  ``u2(f, l)``: RZ(l), RY(pi/2), RZ(f); ``id``, ``u0`` and OpenQASM 3's ``gphase``: nothing;
- ``cy``: S-dagger, CNOT, S on the target; ``ch``: RY(-pi/4), CZ, RY(pi/4) on the target;
  ``csx``: H, CPHASE(pi/2), H on the target;
- ``cu3(t, f, l)``: CRZ(l), CRY(t), CRZ(f) and PHASE((f + l)/2) on the control (``cu`` adds
  PHASE(g) on the control for its fourth angle);
- ``ccx``, ``c3x``, ``c4x``, ``c3sqrtx``: a multi-controlled phase between Hadamards on the
  target; the phase on ``k`` qubits is a product of PHASE gates on parities (``x1 x2 ... xk =
  2**(1-k) sum over subsets S of (-1)**(|S|+1) XOR(S)``), each parity gathered by CNOTs;
  ``ccx`` uses the shorter CPHASE(pi/2), CNOT, CPHASE(-pi/2), CNOT, CPHASE(pi/2) form
  (Barenco et al., Phys. Rev. A 52, 3457 (1995), Lemma 6.1);
- ``rccx``, ``rc3x`` (Toffolis up to relative phases): their Hadamard, T and CNOT sequences;
  ``cswap``: CNOT, ``ccx``, CNOT.

Writing: `WRITE` names the header gate for each of our standard gates (and the daggers
``S†``, ``T†``, ``SX†`` made by `Circuit.inverse`); `RYY`, which no header has, is written as
RX(pi/2) on both qubits, ``rzz``, RX(-pi/2) on both. OpenQASM 3's ``stdgates.inc`` has no
``sxdg``, ``rxx`` or ``rzz``: there they are written as H, ``sdg``, H; Hadamards around ``rzz``;
and CNOT, ``rz``, CNOT.

An angle is an affine form of the program's inputs (`Affine`); the maps above only scale,
add and negate angles, so an angle linear in one input stays a qgradlib angle map.

Examples
--------
>>> half = Affine(0.0, {"theta0": 1.0}).scaled(0.5)
>>> [(g.name, q, a.const if a else None) for g, q, a in QELIB1["cu1"][2]([half], (0, 1))]
[('CPHASE', (0, 1), 0.0)]
>>> [g.name for g, _, _ in QELIB1["ccx"][2]([], (0, 1, 2))]
['H', 'CPHASE', 'CNOT', 'CPHASE', 'CNOT', 'CPHASE', 'H']
"""
from __future__ import annotations

import math
from itertools import combinations

from . import gates as g
from .transform import inverse_gate

__all__ = ["Affine", "QELIB1", "STDGATES", "BUILTIN2", "BUILTIN3", "WRITE", "SDG", "TDG", "SXDG"]

SDG = inverse_gate(g.S)[0]
TDG = inverse_gate(g.T)[0]
SXDG = inverse_gate(g.SX)[0]


class Affine:
    """An angle ``const + sum_k coef[k] * input_k`` (``coef`` maps input names to numbers).

    Examples
    --------
    >>> a = Affine(0.25, {"theta0": 2.0})
    >>> (-a).const, (-a).coef
    (-0.25, {'theta0': -2.0})
    """

    __slots__ = ("const", "coef")

    def __init__(self, const, coef=None):
        self.const = float(const)
        self.coef = dict(coef or {})

    @property
    def constant(self) -> bool:
        return not self.coef

    def __add__(self, other):
        coef = dict(self.coef)
        for k, v in other.coef.items():
            coef[k] = coef[k] + v if k in coef else v
        return Affine(self.const + other.const, coef)

    def __sub__(self, other):
        return self + (-other)

    def __neg__(self):
        return Affine(-self.const, {k: -v for k, v in self.coef.items()})

    def scaled(self, k):
        return Affine(self.const * k, {n: v * k for n, v in self.coef.items()})

    def divided(self, k):
        return Affine(self.const / k, {n: v / k for n, v in self.coef.items()})

    def __repr__(self):
        return f"Affine({self.const!r}, {self.coef!r})"


def _c(x):
    return Affine(x)


_PI = math.pi


def _fixed(gate):
    return lambda a, q: [(gate, q, None)]


def _rot(gate):
    return lambda a, q: [(gate, q, a[0])]


def _nothing(a, q):
    return []


def _zyz(t, f, l, q):
    # U(t, f, l) = RZ(f) RY(t) RZ(l) up to a global phase; the rightmost acts first
    out = [(g.RZ, q, l), (g.RY, q, t), (g.RZ, q, f)]
    return [op for op in out if not (op[2].constant and op[2].const == 0.0)]


def _u3(a, q):
    return _zyz(a[0], a[1], a[2], q)


def _u2(a, q):
    return _zyz(_c(_PI / 2), a[0], a[1], q)


def _cu3(a, q):
    t, f, l = a[:3]
    c, _ = q
    out = [(g.CRZ, q, l), (g.CRY, q, t), (g.CRZ, q, f), (g.PHASE, (c,), (f + l).scaled(0.5))]
    if len(a) == 4:
        out.append((g.PHASE, (c,), a[3]))
    return [op for op in out if not (op[2].constant and op[2].const == 0.0)]


def _cy(a, q):
    return [(SDG, q[1:], None), (g.CNOT, q, None), (g.S, q[1:], None)]


def _ch(a, q):
    return [(g.RY, q[1:], _c(-_PI / 4)), (g.CZ, q, None), (g.RY, q[1:], _c(_PI / 4))]


def _csx(a, q):
    return [(g.H, q[1:], None), (g.CPHASE, q, _c(_PI / 2)), (g.H, q[1:], None)]


def _ccz(a, b, c):
    # e^{i pi a b} on the target c: CP(pi/2)(b, c) CX(a, b) CP(-pi/2)(b, c) CX(a, b) CP(pi/2)(a, c)
    return [(g.CPHASE, (b, c), _c(_PI / 2)), (g.CNOT, (a, b), None),
            (g.CPHASE, (b, c), _c(-_PI / 2)), (g.CNOT, (a, b), None),
            (g.CPHASE, (a, c), _c(_PI / 2))]


def _ccx(a, q):
    h = (g.H, q[2:], None)
    return [h] + _ccz(*q) + [h]


def multi_phase(qubits, angle):
    """Operations applying ``exp(i * angle)`` to the all-ones state of ``qubits`` only.

    Examples
    --------
    >>> [g.name for g, _, _ in multi_phase((0, 1), math.pi)]     # e^{i pi x0 x1}: CZ
    ['PHASE', 'PHASE', 'CNOT', 'PHASE', 'CNOT']
    """
    k = len(qubits)
    out = []
    for size in range(1, k + 1):
        w = angle * (-1.0) ** (size + 1) / 2.0 ** (k - 1)
        for subset in combinations(qubits, size):
            gather = [(g.CNOT, (s, subset[-1]), None) for s in subset[:-1]]
            out += gather + [(g.PHASE, (subset[-1],), _c(w))] + gather[::-1]
    return out


def _mcx(angle):
    def expand(a, q):
        h = (g.H, q[-1:], None)
        return [h] + multi_phase(q, angle) + [h]
    return expand


def _rccx(a, q):
    x, y, z = q
    t, td, cx, h = (g.T, (z,), None), (TDG, (z,), None), g.CNOT, (g.H, (z,), None)
    return [h, t, (cx, (y, z), None), td, (cx, (x, z), None), t, (cx, (y, z), None), td, h]


def _rc3x(a, q):
    x, y, z, w = q
    h, t, td, cx = (g.H, (w,), None), (g.T, (w,), None), (TDG, (w,), None), g.CNOT
    return [h, t, (cx, (z, w), None), td, h, (cx, (x, w), None), t, (cx, (y, w), None), td,
            (cx, (x, w), None), t, (cx, (y, w), None), td, h, t, (cx, (z, w), None), td, h]


def _cswap(a, q):
    c, x, y = q
    return [(g.CNOT, (y, x), None)] + _ccx(a, (c, x, y)) + [(g.CNOT, (y, x), None)]


# name -> (number of angles, number of qubits, expand(angles, qubits) -> [(gate, qubits, angle)])
_COMMON = {
    "u3": (3, 1, _u3), "u2": (2, 1, _u2), "u1": (1, 1, _rot(g.PHASE)), "cx": (0, 2, _fixed(g.CNOT)),
    "id": (0, 1, _nothing), "p": (1, 1, _rot(g.PHASE)),
    "x": (0, 1, _fixed(g.X)), "y": (0, 1, _fixed(g.Y)), "z": (0, 1, _fixed(g.Z)),
    "h": (0, 1, _fixed(g.H)), "s": (0, 1, _fixed(g.S)), "sdg": (0, 1, _fixed(SDG)),
    "t": (0, 1, _fixed(g.T)), "tdg": (0, 1, _fixed(TDG)), "sx": (0, 1, _fixed(g.SX)),
    "rx": (1, 1, _rot(g.RX)), "ry": (1, 1, _rot(g.RY)), "rz": (1, 1, _rot(g.RZ)),
    "cz": (0, 2, _fixed(g.CZ)), "cy": (0, 2, _cy), "swap": (0, 2, _fixed(g.SWAP)),
    "ch": (0, 2, _ch), "ccx": (0, 3, _ccx), "cswap": (0, 3, _cswap),
    "crx": (1, 2, _rot(g.CRX)), "cry": (1, 2, _rot(g.CRY)), "crz": (1, 2, _rot(g.CRZ)),
    "cp": (1, 2, _rot(g.CPHASE)),
}
QELIB1 = dict(_COMMON, **{
    "u0": (1, 1, _nothing), "u": (3, 1, _u3), "sxdg": (0, 1, _fixed(SXDG)),
    "cu1": (1, 2, _rot(g.CPHASE)), "cu3": (3, 2, _cu3), "csx": (0, 2, _csx), "cu": (4, 2, _cu3),
    "rxx": (1, 2, _rot(g.RXX)), "rzz": (1, 2, _rot(g.RZZ)), "rccx": (0, 3, _rccx),
    "rc3x": (0, 4, _rc3x), "c3x": (0, 4, _mcx(_PI)), "c3sqrtx": (0, 4, _mcx(_PI / 2)),
    "c4x": (0, 5, _mcx(_PI)),
})
STDGATES = dict(_COMMON, **{
    "cu": (4, 2, _cu3), "CX": (0, 2, _fixed(g.CNOT)), "phase": (1, 1, _rot(g.PHASE)),
    "cphase": (1, 2, _rot(g.CPHASE)),
})
# the gates every program has, header or not
BUILTIN2 = {"U": (3, 1, _u3), "CX": (0, 2, _fixed(g.CNOT))}
BUILTIN3 = {"U": (3, 1, _u3), "gphase": (1, 0, _nothing)}


def _rzz3(a):
    return [("cx", None, (0, 1)), ("rz", a, (1,)), ("cx", None, (0, 1))]


def _rxx3(a):
    hh = [("h", None, (0,)), ("h", None, (1,))]
    return hh + _rzz3(a) + hh


def _ryy(rzz):
    # RYY(a) = W RZZ(a) W^dagger on both qubits with W = RX(-pi/2), since W Z W^dagger = Y
    def write(a):
        return ([("rx", "pi/2", (0,)), ("rx", "pi/2", (1,))] + rzz(a)
                + [("rx", "-pi/2", (0,)), ("rx", "-pi/2", (1,))])
    return write


def _same(name2, name3=None):
    return {2: lambda a: [(name2, a, None)], 3: lambda a: [(name3 or name2, a, None)]}


# our gate (by identity) -> {version: angle text -> [(header gate, angle text or None,
# positions among the operation's qubits, or None for all of them in order)]}
WRITE = {
    id(g.H): _same("h"), id(g.X): _same("x"), id(g.Y): _same("y"), id(g.Z): _same("z"),
    id(g.S): _same("s"), id(g.T): _same("t"), id(g.SX): _same("sx"),
    id(SDG): _same("sdg"), id(TDG): _same("tdg"),
    id(SXDG): {2: lambda a: [("sxdg", None, None)],
               3: lambda a: [("h", None, None), ("sdg", None, None), ("h", None, None)]},
    id(g.CNOT): _same("cx"), id(g.CZ): _same("cz"), id(g.SWAP): _same("swap"),
    id(g.RX): _same("rx"), id(g.RY): _same("ry"), id(g.RZ): _same("rz"),
    id(g.PHASE): _same("u1", "p"), id(g.CRX): _same("crx"), id(g.CRY): _same("cry"),
    id(g.CRZ): _same("crz"), id(g.CPHASE): _same("cu1", "cp"),
    id(g.RXX): {2: lambda a: [("rxx", a, None)], 3: _rxx3},
    id(g.RZZ): {2: lambda a: [("rzz", a, None)], 3: _rzz3},
    id(g.RYY): {2: _ryy(lambda a: [("rzz", a, (0, 1))]), 3: _ryy(_rzz3)},
}
