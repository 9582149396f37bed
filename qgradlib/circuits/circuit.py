"""Circuit: a list of operations and the linear map from parameters to gate angles.

Each parametric operation's angle is ``scale * theta[param] + offset`` (a trainable weight),
``scale * x[input] + offset`` (feature ``input`` of a data point ``x``, not trainable) or a
fixed number. That map, ``phi = A theta + B x + b``, is the only place parameters are shared
or scaled, so the chain rule of every derivative method is ``A.T @ dE/dphi`` (and
``B.T @ dE/dphi`` for the features).

Examples
--------
>>> import numpy as np
>>> import qgradlib as qg
>>> c = qg.Circuit(2).h(0).ry(1).cnot(0, 1).rz(1, param=0, scale=2.0).rx(0, angle=0.25)
>>> c.n_params
1
>>> c.angles(np.array([0.5])).tolist()
[0.5, 1.0, 0.25]
>>> d = qg.Circuit(1).ry(0, input=0).rz(0).ry(0, input=0, scale=0.5)   # re-uploading x[0]
>>> d.n_params, d.n_inputs
(1, 1)
>>> d.angles(np.array([0.3]), inputs=np.array([2.0])).tolist()
[2.0, 0.3, 1.0]
"""
from __future__ import annotations

from collections import Counter
from dataclasses import dataclass
from numbers import Real

import autograd.numpy as anp
from autograd.tracer import getval
import numpy as np
from autograd.tracer import Box, getval

from . import display
from . import gates as _g
from . import files, transform
from .channels import Channel
from .drawing import angle_text, draw, number
from .gates import Gate
from .resources import resources

__all__ = ["Circuit", "Operation"]


@dataclass(frozen=True)
class Operation:
    """One gate (or noise `Channel`) on some qubits; for parametric gates, how its angle is formed.

    Examples
    --------
    >>> import qgradlib as qg
    >>> op = qg.Circuit(2).crx(0, 1, scale=2.0).operations[0]
    >>> op.gate.name, op.qubits, op.param, op.scale, op.trainable
    ('CRX', (0, 1), 0, 2.0, True)
    """

    gate: Gate
    qubits: tuple
    param: int | None = None
    scale: float = 1.0
    offset: float = 0.0
    angle: float | None = None
    input: int | None = None       # angle = scale * x[input] + offset for a data point x

    @property
    def trainable(self) -> bool:
        return self.param is not None

    def __repr__(self):
        # short: the gate by name, never its matrices
        parts = [repr(self.gate.name), f"qubits={self.qubits}"]
        if self.param is not None or getattr(self, "input", None) is not None:
            parts.append(f"angle={angle_text(self)}")
        elif self.angle is not None:
            parts.append(f"angle={number(self.angle)}")
        return f"Operation({', '.join(parts)})"


class Circuit:
    """A parameterised circuit on ``n_qubits`` qubits.

    Gate methods append one operation and return the circuit, so calls chain. A parametric
    method takes ``param=`` (an existing parameter index, or omitted for a new one),
    ``scale=`` and ``offset=`` (angle = scale * theta[param] + offset), ``input=`` for
    feature ``k`` of a data point (angle = scale * x[k] + offset; not trainable, the same
    feature may be read by any number of gates), or ``angle=`` for a fixed, untrainable angle.

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> c = qg.Circuit(2).h(0).ry(1).cnot(0, 1).rz(1, param=0, scale=0.5)
    >>> c.n_qubits, c.n_params, len(c)
    (2, 1, 4)
    >>> round(float(qg.expect(c, qg.Observable({"ZZ": 1.0}), np.array([0.0]))), 12)
    1.0
    """

    def __init__(self, n_qubits: int):
        if isinstance(n_qubits, (bool, np.bool_)) or not isinstance(n_qubits, (int, np.integer)) \
                or n_qubits < 1:
            raise ValueError(f"n_qubits must be a positive int; got {n_qubits!r}")
        self._n = int(n_qubits)
        self._ops: list[Operation] = []
        self._n_params = 0
        self._n_inputs = 0
        self._cache = None
        self._version = 0          # bumped by every change; snapshot() is memoised on it
        self._frozen = False

    # -- read-only views ------------------------------------------------------------------
    @property
    def n_qubits(self) -> int:
        return self._n

    @property
    def n_params(self) -> int:
        """Length of the parameter vector theta."""
        return self._n_params

    @property
    def n_inputs(self) -> int:
        """Length of a data point x (one more than the largest ``input=`` index; 0 if none)."""
        return self._n_inputs

    @property
    def operations(self) -> tuple:
        """The operations in order (a tuple of frozen `Operation`)."""
        return tuple(self._ops)

    @property
    def parametric_operations(self) -> tuple:
        """The operations with an angle, in the order of the columns of `angles`."""
        # memoised by length: operations are only ever appended (plans ask once per column)
        memo = getattr(self, "_pops", None)
        if memo is None or memo[0] != len(self._ops):
            memo = (len(self._ops), tuple(op for op in self._ops if getattr(op.gate, "parametric", False)))
            self._pops = memo
        return memo[1]

    @property
    def has_noise(self) -> bool:
        """True when some operation is a noise `Channel` (the density-matrix path runs it)."""
        # memoised by length, like parametric_operations: operations are only appended
        memo = getattr(self, "_noise_memo", None)
        if memo is None or memo[0] != len(self._ops):
            memo = (len(self._ops), any(isinstance(op.gate, Channel) for op in self._ops))
            self._noise_memo = memo
        return memo[1]

    def __len__(self):
        return len(self._ops)

    def __repr__(self):
        extra = f", n_inputs={self._n_inputs}" if self._n_inputs else ""
        return (f"Circuit(n_qubits={self._n}, operations={len(self._ops)}, "
                f"n_params={self._n_params}{extra})")

    def __str__(self):
        return draw(self)

    def draw(self, theta=None, width=100) -> str:
        """The circuit as text: one line per qubit, operations in layers (`qgradlib.circuits.drawing`).

        ``theta`` binds the parameters (angles shown as numbers); lines wrap at ``width``.

        Examples
        --------
        >>> import qgradlib as qg
        >>> print(qg.Circuit(3).h(0).cnot(0, 2).noise(1, qg.channels.dephasing(0.1)).draw())
        0 -H-CNOT:1-------------
             |
        1 ---|------~dephasing~-
             |
        2 ---CNOT:2-------------
        """
        if theta is not None:
            theta = np.asarray(getval(check_theta(self, theta)), dtype=float)
            if theta.ndim != 1:
                raise ValueError(f"theta must have shape ({self.n_params},) to draw; got {theta.shape}")
        return draw(self, theta, width)

    def resources(self, theta=None):
        """Qubits, depth, gate counts, parameters, channels and the shifted circuits one
        gradient and one Hessian need, as a frozen `Resources` record."""
        theta = np.zeros(self._n_params) if theta is None else \
            np.asarray(getval(check_theta(self, theta)), dtype=float)
        return resources(self, theta)

    def _repr_html_(self):
        """A notebook display: the text drawing, then the resources and the gate counts."""
        r = self.resources()
        title = (f"Circuit: {display.plural(self._n, 'qubit')}, "
                 f"{display.plural(self._n_params, 'parameter')}, "
                 f"{display.plural(len(self._ops), 'operation')}")
        summary = display.table(None, [["depth", r.depth], ["two-qubit gates", r.two_qubit],
                                       ["noise channels", r.channels],
                                       ["circuits for one gradient", r.gradient_circuits],
                                       ["circuits for value, gradient and Hessian",
                                        r.hessian_circuits]])
        counts = sorted(r.counts.items(), key=lambda kv: (-kv[1], kv[0]))
        return display.display(title, display.preformatted(str(self)), summary,
                               display.table(["gate", "operations"], counts))

    # -- files ----------------------------------------------------------------------------
    def to_json(self, indent=None) -> str:
        """The circuit as JSON text in qgradlib's own versioned schema (`qgradlib.circuits.files`).

        Examples
        --------
        >>> import qgradlib as qg
        >>> text = qg.Circuit(1).ry(0, scale=2.0).to_json()
        >>> text[:52]
        '{"format": "qgradlib.circuit", "version": 1, "n_qubi'
        """
        return files.circuit_to_json(self, indent)

    @classmethod
    def from_json(cls, text) -> "Circuit":
        """A circuit from `to_json` text; every field is checked, errors name the field."""
        return files.circuit_from_json(cls, Operation, text)

    # -- comparing ------------------------------------------------------------------------
    def __eq__(self, other):
        """Same qubits, parameters and operations (gates, qubits, angle maps), exactly."""
        if not isinstance(other, Circuit):
            return NotImplemented
        return (self._n == other._n and self._n_params == other._n_params
                and self._n_inputs == other._n_inputs and self._ops == other._ops)

    # a circuit grows by appending, so it cannot keep a hash that agrees with ==
    __hash__ = None

    def __getstate__(self):
        # memos (compiled programs, periods) are rebuilt where the circuit lands
        return {k: v for k, v in self.__dict__.items() if not k.startswith("_memo")}

    # -- building -------------------------------------------------------------------------
    def add(self, gate: Gate, qubits, param=None, *, scale=1.0, offset=0.0, angle=None, input=None):
        """Append ``gate`` (a `Gate` or a noise `Channel`) on ``qubits`` (an int or a sequence of ints).

        Examples
        --------
        >>> import numpy as np
        >>> import qgradlib as qg
        >>> M = np.kron(np.diag([1.0, -1.0]), np.diag([1.0, -1.0])) / 2
        >>> qg.Circuit(2).add(qg.Gate.from_generator("zz", M), (0, 1)).n_params
        1
        """
        if self._frozen:
            raise ValueError("this circuit is a snapshot held by an evaluation and cannot change; "
                             "build on a copy (circuit.copy())")
        if not isinstance(gate, (Gate, Channel)):
            raise TypeError(f"gate must be a qgradlib Gate or Channel; got {type(gate).__name__}")
        qs = self._qubits(qubits, gate)
        if not gate.parametric:
            if param is not None or angle is not None or input is not None or scale != 1.0 \
                    or offset != 0.0:
                raise ValueError(f"gate {gate.name!r} is fixed: it takes no param, angle, input, "
                                 "scale or offset")
            return self._append(Operation(gate, qs))
        if input is not None:
            if param is not None or angle is not None:
                raise ValueError("give one of param= (a trainable weight), input= (a data feature) "
                                 "or angle= (fixed), not several")
            if isinstance(input, (bool, np.bool_)) or not isinstance(input, (int, np.integer)) \
                    or input < 0:
                raise ValueError(f"input must be a non-negative int (a feature index); got {input!r}")
            op = Operation(gate, qs, None, _finite(scale, "scale"), _finite(offset, "offset"),
                           input=int(input))
            self._n_inputs = max(self._n_inputs, int(input) + 1)
            return self._append(op)
        if angle is not None:
            if param is not None:
                raise ValueError("give either param= (trainable) or angle= (fixed), not both")
            if scale != 1.0 or offset != 0.0:
                raise ValueError("scale= and offset= apply to trainable angles; with angle= give the final value")
            return self._append(Operation(gate, qs, angle=_finite(angle, "angle")))
        if param is None:
            param = self._n_params
        if isinstance(param, (bool, np.bool_)) or not isinstance(param, (int, np.integer)) or param < 0:
            raise ValueError(f"param must be a non-negative int; got {param!r}")
        if param > self._n_params:
            raise ValueError(f"param={param} skips ahead: the next new parameter is {self._n_params}")
        op = Operation(gate, qs, int(param), _finite(scale, "scale"), _finite(offset, "offset"))
        self._n_params = max(self._n_params, int(param) + 1)
        return self._append(op)

    def _append(self, op):
        self._ops.append(op)
        self._cache = None
        self._version += 1
        return self

    def _qubits(self, qubits, gate):
        if isinstance(qubits, (int, np.integer)) and not isinstance(qubits, (bool, np.bool_)):
            qs = (int(qubits),)
        else:
            try:
                qs = tuple(qubits)
            except TypeError:
                raise TypeError(f"qubits must be an int or a sequence of ints; got {qubits!r}") from None
            for q in qs:
                if isinstance(q, (bool, np.bool_)) or not isinstance(q, (int, np.integer)):
                    raise TypeError(f"qubits must be ints; got {q!r}")
            qs = tuple(int(q) for q in qs)
        for q in qs:
            if not 0 <= q < self._n:
                raise ValueError(f"qubit {q} is out of range for a circuit of {self._n} qubits (0..{self._n - 1})")
        if len(set(qs)) != len(qs):
            raise ValueError(f"qubits {qs} repeat a qubit: a gate acts on distinct qubits")
        if len(qs) != gate.n_qubits:
            raise ValueError(f"gate {gate.name!r} acts on {gate.n_qubits} qubit(s); got qubits {qs}")
        return qs

    def copy(self) -> "Circuit":
        """An independent circuit with the same operations (appending to one leaves the other).

        ``copy.copy`` and ``copy.deepcopy`` give the same: operations are frozen values, so
        sharing them is safe.
        """
        out = Circuit(self._n)
        out._ops = list(self._ops)
        out._n_params = self._n_params
        out._n_inputs = self._n_inputs
        return out

    def __copy__(self):
        return self.copy()

    def __deepcopy__(self, memo):
        return self.copy()

    def snapshot(self) -> "Circuit":
        """A frozen copy of the circuit as it is now, memoised until the circuit changes.

        An evaluation holds the snapshot of what it evaluated, so its derivative (computed
        later, when autograd calls the VJP) belongs to that circuit even if the user appends
        gates meanwhile. A snapshot refuses to change.
        """
        if self._frozen:
            return self
        memo = getattr(self, "_snap", None)
        if memo is None or memo[0] != self._version:
            snap = self.copy()
            snap._frozen = True
            memo = (self._version, snap)
            self._snap = memo
        return memo[1]

    def __add__(self, other):
        """Concatenate: ``other``'s parameters are renumbered to follow ``self``'s; both read
        the same data point (feature ``k`` stays feature ``k``)."""
        if not isinstance(other, Circuit):
            return NotImplemented
        if other._n != self._n:
            raise ValueError(f"cannot concatenate circuits on {self._n} and {other._n} qubits")
        return transform.compose(self, other)

    def compose(self, other, qubits=None) -> "Circuit":
        """This circuit followed by ``other``, other's qubit i placed on ``qubits[i]``.

        ``qubits`` defaults to ``0 .. other.n_qubits - 1``. Other's parameters are renumbered
        to follow this circuit's, as with ``+``; this circuit is not changed.

        Examples
        --------
        >>> import qgradlib as qg
        >>> pair = qg.Circuit(2).ry(0).cnot(0, 1)
        >>> c = qg.Circuit(3).h(0).compose(pair, qubits=[2, 1])
        >>> [(op.gate.name, op.qubits, op.param) for op in c.operations]
        [('H', (0,), None), ('RY', (2,), 0), ('CNOT', (2, 1), None)]
        """
        return transform.compose(self, other, qubits)

    def inverse(self) -> "Circuit":
        """The adjoint circuit (`qgradlib.circuits.transform`): operations reversed, each gate
        inverted, the same parameters with their angle maps negated. Refused for noise.

        Examples
        --------
        >>> import numpy as np
        >>> import qgradlib as qg
        >>> c = qg.Circuit(2).ry(0).cnot(0, 1).rz(1)
        >>> u = c + c.inverse()        # theta[0:2], then the inverse's own copy as theta[2:4]
        >>> bool(np.allclose(qg.state(u, np.array([0.3, 0.7, 0.3, 0.7])), [1, 0, 0, 0]))
        True
        """
        return transform.inverse(self)

    # -- the angle map --------------------------------------------------------------------
    def angle_map(self):
        """``(A, b)``: gate angles ``phi = theta @ A.T + b``; A has shape (G, n_params).

        For a circuit with data inputs the full map is ``phi = theta @ A.T + x @ B.T + b``,
        with ``B = input_map()``; ``b`` holds the offsets of the input gates.
        """
        if self._cache is None:
            pops = self.parametric_operations
            A = np.zeros((len(pops), self._n_params))
            B = np.zeros((len(pops), self._n_inputs))
            b = np.zeros(len(pops))
            idx = np.zeros(len(pops), dtype=int)
            scale = np.zeros(len(pops))
            for k, op in enumerate(pops):
                if op.param is not None:
                    A[k, op.param] = op.scale
                    b[k] = op.offset
                    idx[k] = op.param
                    scale[k] = op.scale
                elif getattr(op, "input", None) is not None:
                    B[k, op.input] = op.scale
                    b[k] = op.offset
                else:
                    b[k] = op.angle
            xcols = np.array([k for k, op in enumerate(pops) if getattr(op, "input", None) is not None],
                             dtype=int)
            xidx = np.array([pops[k].input for k in xcols], dtype=int)
            xscale = np.array([pops[k].scale for k in xcols], dtype=float)
            self._cache = (A, b, idx, scale, B, xcols, xidx, xscale)
        return self._cache[0], self._cache[1]

    def input_map(self):
        """``B`` of shape (G, n_inputs): the data-feature part of ``phi = A theta + B x + b``.

        Examples
        --------
        >>> import qgradlib as qg
        >>> qg.Circuit(1).ry(0, input=1, scale=2.0).rz(0).input_map().tolist()
        [[0.0, 2.0], [0.0, 0.0]]
        """
        self.angle_map()
        return self._cache[4]

    @property
    def input_columns(self) -> tuple:
        """Columns of `angles` (indices into `parametric_operations`) that read a data feature."""
        self.angle_map()
        return tuple(int(k) for k in self._cache[5])

    def angles(self, theta, inputs=None):
        """Gate angles for parameters ``theta`` of shape (n_params,) or (B, n_params).

        A circuit with data inputs also needs ``inputs``, one data point (n_inputs,) or a data
        set (N, n_inputs); a batch of theta and a data set pair up row by row, so B and N must
        agree (or one of them be unbatched). Differentiable with autograd in both; returns
        shape (G,) or (rows, G).
        """
        theta = check_theta(self, theta)
        inputs = check_inputs(self, inputs, theta)
        self.angle_map()
        _, b, idx, scale, _, xcols, xidx, xscale = self._cache
        if self._n_params == 0:
            phi = anp.zeros(theta.shape[:-1] + (b.size,)) + b
        else:
            phi = theta[..., idx] * scale + b
        if inputs is not None:
            # the input gates' columns, added as a (rows, G) array built from x by one product
            place = np.zeros((xcols.size, b.size))
            place[np.arange(xcols.size), xcols] = xscale
            phi = phi + anp.dot(inputs[..., xidx], place)
        big = np.abs(getval(phi)).max(initial=0.0)
        if big >= MAX_ANGLE:
            raise ValueError(f"theta gives a gate angle of magnitude {big:.3g}; angles (scale * theta "
                             "+ offset, plus scale * inputs) must stay below 2**40 (about 1.1e12) in "
                             "magnitude, beyond which a float64 no longer holds an angle to 1e-4 rad")
        return phi

    # -- standard gates -------------------------------------------------------------------
    def h(self, q): return self.add(_g.H, q)  # noqa: E704
    def x(self, q): return self.add(_g.X, q)  # noqa: E704
    def y(self, q): return self.add(_g.Y, q)  # noqa: E704
    def z(self, q): return self.add(_g.Z, q)  # noqa: E704
    def s(self, q): return self.add(_g.S, q)  # noqa: E704
    def t(self, q): return self.add(_g.T, q)  # noqa: E704
    def sx(self, q): return self.add(_g.SX, q)  # noqa: E704
    def cnot(self, control, target): return self.add(_g.CNOT, (control, target))  # noqa: E704
    def cz(self, a, b): return self.add(_g.CZ, (a, b))  # noqa: E704
    def swap(self, a, b): return self.add(_g.SWAP, (a, b))  # noqa: E704

    def rx(self, q, param=None, *, scale=1.0, offset=0.0, angle=None, input=None):
        """RX(a) = expm(-1j * a * X / 2)."""
        return self.add(_g.RX, q, param, scale=scale, offset=offset, angle=angle,
                        input=input)

    def ry(self, q, param=None, *, scale=1.0, offset=0.0, angle=None, input=None):
        """RY(a) = expm(-1j * a * Y / 2)."""
        return self.add(_g.RY, q, param, scale=scale, offset=offset, angle=angle,
                        input=input)

    def rz(self, q, param=None, *, scale=1.0, offset=0.0, angle=None, input=None):
        """RZ(a) = expm(-1j * a * Z / 2)."""
        return self.add(_g.RZ, q, param, scale=scale, offset=offset, angle=angle,
                        input=input)

    def phase(self, q, param=None, *, scale=1.0, offset=0.0, angle=None, input=None):
        """PHASE(a) = diag(1, exp(1j * a))."""
        return self.add(_g.PHASE, q, param, scale=scale, offset=offset, angle=angle,
                        input=input)

    def crx(self, control, target, param=None, *, scale=1.0, offset=0.0, angle=None, input=None):
        """RX on ``target`` controlled by ``control``."""
        return self.add(_g.CRX, (control, target), param, scale=scale, offset=offset, angle=angle,
                        input=input)

    def cry(self, control, target, param=None, *, scale=1.0, offset=0.0, angle=None, input=None):
        """RY on ``target`` controlled by ``control``."""
        return self.add(_g.CRY, (control, target), param, scale=scale, offset=offset, angle=angle,
                        input=input)

    def crz(self, control, target, param=None, *, scale=1.0, offset=0.0, angle=None, input=None):
        """RZ on ``target`` controlled by ``control``."""
        return self.add(_g.CRZ, (control, target), param, scale=scale, offset=offset, angle=angle,
                        input=input)

    def cphase(self, a, b, param=None, *, scale=1.0, offset=0.0, angle=None, input=None):
        """diag(1, 1, 1, exp(1j * a))."""
        return self.add(_g.CPHASE, (a, b), param, scale=scale, offset=offset, angle=angle,
                        input=input)

    def rxx(self, a, b, param=None, *, scale=1.0, offset=0.0, angle=None, input=None):
        """expm(-1j * a * XX / 2)."""
        return self.add(_g.RXX, (a, b), param, scale=scale, offset=offset, angle=angle,
                        input=input)

    def ryy(self, a, b, param=None, *, scale=1.0, offset=0.0, angle=None, input=None):
        """expm(-1j * a * YY / 2)."""
        return self.add(_g.RYY, (a, b), param, scale=scale, offset=offset, angle=angle,
                        input=input)

    def rzz(self, a, b, param=None, *, scale=1.0, offset=0.0, angle=None, input=None):
        """expm(-1j * a * ZZ / 2)."""
        return self.add(_g.RZZ, (a, b), param, scale=scale, offset=offset, angle=angle,
                        input=input)

    def euler(self, q, axes="zyz"):
        """Three rotations of qubit ``q`` about the named axes: three new parameters.

        ``axes`` is three letters from ``x``, ``y``, ``z`` with no letter next to itself, the
        first applied first: ``"zyz"`` appends RZ(theta[k]), RY(theta[k+1]), RZ(theta[k+2]).
        With ``"zyz"`` (and likewise ``"zxz"``, ``"xyx"``, ...) every single-qubit unitary is
        reached up to a global phase (for Z-Y-Z: Nielsen and Chuang, Theorem 4.1). Each
        rotation is a two-term gate, so the gradient stays exact.

        Examples
        --------
        >>> import qgradlib as qg
        >>> [op.gate.name for op in qg.Circuit(1).euler(0, axes="xyx").operations]
        ['RX', 'RY', 'RX']
        """
        if not isinstance(axes, str) or len(axes) != 3 or set(axes.lower()) - set("xyz") \
                or any(a == b for a, b in zip(axes.lower(), axes.lower()[1:])):
            raise ValueError("axes must be three letters from 'x', 'y', 'z' with no letter next "
                             f"to itself, such as 'zyz', 'zxz' or 'xyx'; got {axes!r}")
        self._qubits(q, _g.RX)      # check the qubit before appending anything
        for a in axes.lower():
            self.add({"x": _g.RX, "y": _g.RY, "z": _g.RZ}[a], q)
        return self

    # -- noise (a channel from qgradlib.channels; no angle) ------------------------------------
    def noise(self, qubits, channel):
        """Append the noise ``channel`` (from `qgradlib.channels`) on ``qubits``.

        Examples
        --------
        >>> import qgradlib as qg
        >>> c = qg.Circuit(2).h(0).noise(0, qg.channels.depolarizing(0.01))
        >>> c.has_noise
        True
        """
        if not isinstance(channel, Channel):
            raise TypeError("channel must be a qgradlib Channel, such as "
                            f"qgradlib.channels.depolarizing(0.01); got {type(channel).__name__}")
        return self.add(channel, qubits)


def _finite(v, name):
    if isinstance(v, bool) or not isinstance(v, (Real, np.floating, np.integer)):
        raise TypeError(f"{name} must be a real number; got {type(v).__name__}")
    v = float(v)
    if not np.isfinite(v):
        raise ValueError(f"{name} must be finite; got {v!r}")
    return v


# Beyond this magnitude a float64 holds an angle to worse than 1e-4 rad (its spacing there is
# 2**-12) and the reduction modulo a gate's period loses every digit of the phase.
MAX_ANGLE = 2.0 ** 40


def check_inputs(circuit: Circuit, inputs, theta=None):
    """Validate a data point (n_inputs,) or data set (N, n_inputs) against ``circuit``.

    ``None`` is right exactly when the circuit reads no data feature. With ``theta`` given,
    a batch of theta (B, m) and a data set (N, n) must pair up: B == N. Keeps autograd boxes.
    """
    from autograd.tracer import getval

    d = circuit.n_inputs
    if inputs is None:
        if d:
            raise ValueError(f"this circuit reads {d} data feature(s) (gates with input=): give "
                             f"inputs= of shape ({d},) or (N, {d}); functions without inputs= take "
                             "circuits without data inputs only")
        return None
    if not d:
        raise ValueError("inputs= was given but this circuit reads no data feature (add gates "
                         "with input=k to read feature k)")
    form = f"({d},) or (N, {d})"
    arr, listed = _real_array(inputs, "inputs", form)
    if arr.ndim == 0 or arr.ndim > 2 or arr.shape[-1] != d or (arr.ndim == 2 and arr.shape[0] == 0):
        raise ValueError(f"inputs must have shape {form} with N >= 1; got {arr.shape}")
    if not np.all(np.isfinite(arr)):
        raise ValueError("inputs must be finite (found NaN or inf)")
    if theta is not None:
        t = np.shape(getval(theta))
        if len(t) == 2 and arr.ndim == 2 and t[0] != arr.shape[0]:
            raise ValueError(f"a batch of theta {t} and a data set {arr.shape} pair up row by "
                             "row, so their lengths must agree; give theta of shape "
                             f"({circuit.n_params},) to evaluate one model over the data set")
    return _traced(inputs, arr, listed, "inputs")


def check_theta(circuit: Circuit, theta):
    """Validate theta and return it as float64: shape (n_params,) or (B, n_params), real, finite.

    Integer arrays, lists, tuples and nested lists become float arrays. Inside an autograd
    derivative the result stays a box, so the derivative reaches the caller's argument:

    - a list or tuple of floats is stacked with ``autograd.numpy.array`` (autograd then returns
      the gradient as a list, as it does for any list argument);
    - an integer array that is itself the argument being differentiated is converted exactly;
    - an integer array made by other autograd operations, and a list of Python ints, are
      refused: autograd carries derivatives with respect to integers as integers (its
      indexing rule truncates them), so the derivative could already be wrong upstream.

    Booleans are refused everywhere.

    Examples
    --------
    >>> import qgradlib as qg
    >>> from qgradlib.circuits import check_theta
    >>> c = qg.Circuit(1).ry(0).rx(0)
    >>> check_theta(c, [1, 2]).dtype, check_theta(c, [0.1, 0.2]).shape
    (dtype('float64'), (2,))
    >>> check_theta(c, [0.1])
    Traceback (most recent call last):
        ...
    ValueError: theta must have shape (2,)...
    """
    form = f"({circuit.n_params},) or (B, {circuit.n_params})"
    arr, listed = _real_array(theta, "theta", form)
    if arr.ndim == 0 or arr.ndim > 2 or arr.shape[-1] != circuit.n_params:
        raise ValueError(f"theta must have shape ({circuit.n_params},) or (B, {circuit.n_params}); "
                         f"got {arr.shape}")
    if not np.all(np.isfinite(arr)):
        raise ValueError("theta must be finite (found NaN or inf)")
    return _traced(theta, arr, listed, "theta")


def _real_array(value, name, form):
    """``value`` (an array, a number, or nested lists and tuples, boxed by autograd or not) as
    a plain numeric array, and whether it came as a sequence; refuses booleans, non-numbers,
    ragged sequences and lists of ints inside a derivative, naming ``name`` and ``form``."""
    raw = getval(value)
    listed = isinstance(raw, (list, tuple))
    if listed:
        leaves = _leaves(raw)
        if any(isinstance(v, (bool, np.bool_)) for v in leaves):
            raise TypeError(f"{name} must hold real numbers, not booleans")
        if isinstance(value, Box) and any(not isinstance(v, (float, np.floating)) for v in leaves):
            raise TypeError(f"{name} is a list of ints inside an autograd derivative: autograd "
                            "cannot differentiate with respect to Python ints; pass a float array "
                            f"such as np.array({name}, dtype=float)")
        try:
            raw = np.asarray(_unboxed(raw))
        except (ValueError, TypeError):  # rows of different lengths, or non-numbers
            raise ValueError(f"{name} must have shape {form}; got a ragged or non-numeric "
                             "sequence") from None
    if not isinstance(raw, (np.ndarray, Real, np.generic)) or isinstance(raw, (bool, np.bool_)):
        raise TypeError(f"{name} must be a real array of shape {form}; got {type(raw).__name__}")
    arr = np.asarray(raw)
    if arr.dtype.kind not in "fiu" or arr.dtype == bool:
        raise TypeError(f"{name} must be a real numeric array; got dtype {arr.dtype}")
    return arr, listed


def _traced(value, arr, listed, name):
    """The checked ``value`` as float64, kept boxed inside an autograd derivative so that the
    derivative reaches the caller's argument (see `check_theta` for the integer cases)."""
    if not isinstance(value, Box) and not (listed and _holds_box(value)):
        return np.asarray(arr, dtype=float)
    if listed:
        return anp.array(value)
    if arr.dtype.kind in "iu":
        if not _is_argument(value):
            raise TypeError(f"{name} is an integer array made inside an autograd derivative: "
                            "autograd carries derivatives with respect to integer arrays as "
                            "integers and truncates them; differentiate with respect to a float "
                            f"array (np.asarray({name}, dtype=float))")
        return value * 1.0
    return value


def _leaves(seq):
    out = []
    for v in seq:
        v = getval(v)
        if isinstance(v, (list, tuple)):
            out.extend(_leaves(v))
        else:
            out.append(v)
    return out


def _unboxed(seq):
    """The nested sequence with every autograd box replaced by its value."""
    return [_unboxed(getval(v)) if isinstance(getval(v), (list, tuple)) else getval(v) for v in seq]


def _holds_box(seq):
    return any(isinstance(v, Box) or (isinstance(v, (list, tuple)) and _holds_box(v)) for v in seq)


def _is_argument(box):
    """True when ``box`` (at every level of nesting) is the argument of its derivative itself."""
    while isinstance(box, Box):
        if getattr(box._node, "parents", None) != []:
            return False
        box = box._value
    return True
