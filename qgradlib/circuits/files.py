"""Circuits and observables as JSON text: a small, versioned schema of our own.

A circuit file is one JSON object::

    {"format": "qgradlib.circuit", "version": 1,
     "n_qubits": 2, "n_params": 1, "n_inputs": 0,
     "operations": [
        {"gate": {"name": "H"}, "qubits": [0]},
        {"gate": {"name": "RY"}, "qubits": [1], "param": 0, "scale": 1.0, "offset": 0.0},
        {"gate": {"name": "RX"}, "qubits": [0], "angle": 0.25},
        {"gate": {"name": "mix", "kind": "generator", "generator": [[[0.5, 0.0], ...], ...]},
         "qubits": [0, 1], "param": 0, "scale": 2.0, "offset": 0.0},
        {"gate": {"name": "dephasing", "kind": "channel", "kraus": [...]}, "qubits": [1]}]}

- a standard gate is its name alone; any other gate carries its kind and data: ``unitary``
  (fixed), ``generator`` (and an optional ``shift_rule`` of ``shifts``/``coefficients``), or
  ``drift`` and ``drive`` (Hamiltonian); a channel carries its Kraus operators;
- a matrix is a list of rows, each entry a ``[re, im]`` pair; floats are written with
  Python's shortest round-trip form, so loading gives back exactly the same numbers;
- each parametric operation has its angle map: ``param``/``scale``/``offset``, ``input``/
  ``scale``/``offset`` (a data feature), or a fixed ``angle``;
- a gate built from a Python function cannot be saved (the function is code, not data).

An observable file is ``{"format": "qgradlib.observable", "version": 1, "n_qubits": n,
"terms": {"ZZ": -1.0, ...}, "dense": matrix or null}``.

Loading checks every field and names the one at fault (``operations[3].gate.generator``);
unknown formats and versions are refused, and matrices must be square, of power-of-two
size, unitary or Hermitian as their role requires.

Examples
--------
>>> import qgradlib as qg
>>> c = qg.Circuit(2).h(0).ry(1, offset=0.5).cnot(0, 1)
>>> qg.Circuit.from_json(c.to_json()) == c
True
"""
from __future__ import annotations

import json
from numbers import Integral, Real

import numpy as np

from .gates import STANDARD, Gate
from ..rules.shift_rules import ShiftRule

__all__ = ["circuit_to_json", "circuit_from_json", "observable_to_json", "observable_from_json",
           "VERSION"]

VERSION = 1
CIRCUIT = "qgradlib.circuit"
OBSERVABLE = "qgradlib.observable"


# -- writing -------------------------------------------------------------------------------------
def _matrix_out(m):
    return [[[float(v.real), float(v.imag)] for v in row] for row in np.asarray(m)]


def _gate_out(gate):
    if gate.kind == "channel":
        return {"name": gate.name, "kind": "channel", "kraus": [_matrix_out(k) for k in gate.kraus]}
    if STANDARD.get(gate.name) == gate:
        return {"name": gate.name}
    if gate.kind == "fixed":
        return {"name": gate.name, "kind": "fixed", "unitary": _matrix_out(gate.unitary)}
    if gate.kind == "generator":
        out = {"name": gate.name, "kind": "generator", "generator": _matrix_out(gate.generator)}
        if gate.rule is not None:
            out["shift_rule"] = {"shifts": [float(s) for s in gate.rule.shifts],
                                 "coefficients": [float(c) for c in gate.rule.coefficients]}
        return out
    if gate.kind == "hamiltonian":
        return {"name": gate.name, "kind": "hamiltonian", "drift": _matrix_out(gate.drift),
                "drive": gate.drive}
    raise ValueError(f"gate {gate.name!r} was built from a Python function (Gate.from_function), "
                     "which cannot be saved as data: rebuild it with Gate.from_generator or "
                     "Gate.fixed to save the circuit")


def circuit_to_json(circuit, indent=None) -> str:
    """The circuit as JSON text (schema in the module notes)."""
    ops = []
    for op in circuit.operations:
        entry = {"gate": _gate_out(op.gate), "qubits": list(op.qubits)}
        feature = getattr(op, "input", None)
        if op.param is not None:
            entry.update(param=op.param, scale=op.scale, offset=op.offset)
        elif feature is not None:
            entry.update(input=feature, scale=op.scale, offset=op.offset)
        elif op.angle is not None:
            entry["angle"] = op.angle
        ops.append(entry)
    doc = {"format": CIRCUIT, "version": VERSION, "n_qubits": circuit.n_qubits,
           "n_params": circuit.n_params, "n_inputs": getattr(circuit, "n_inputs", 0),
           "operations": ops}
    return json.dumps(doc, indent=indent, allow_nan=False)


def observable_to_json(observable, indent=None) -> str:
    """The observable as JSON text (schema in the module notes)."""
    if observable.traced:
        raise TypeError("an observable with coefficients being differentiated cannot be saved")
    dense = None if observable.dense is None else _matrix_out(observable.dense)
    doc = {"format": OBSERVABLE, "version": VERSION, "n_qubits": observable.n_qubits,
           "terms": {w: float(c) for w, c in observable.terms.items()}, "dense": dense}
    return json.dumps(doc, indent=indent, allow_nan=False)


# -- reading -------------------------------------------------------------------------------------
def _fail(path, msg):
    raise ValueError(f"{path}: {msg}")


def _parse(text, what):
    if not isinstance(text, (str, bytes)):
        raise TypeError(f"text must be a JSON string; got {type(text).__name__}")
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as err:
        raise ValueError(f"text is not valid JSON: {err}") from None
    if not isinstance(doc, dict):
        _fail("(top level)", "must be a JSON object")
    if doc.get("format") != what:
        _fail("format", f"must be {what!r}; got {doc.get('format')!r}")
    if doc.get("version") != VERSION:
        _fail("version", f"this qgradlib reads version {VERSION}; got {doc.get('version')!r}")
    return doc


def _int(doc, key, path, low=0, high=None, optional=False):
    v = doc.get(key)
    if v is None and optional:
        return None
    if isinstance(v, bool) or not isinstance(v, Integral) or v < low or (high is not None and v >= high):
        rng = f"in {low}..{high - 1}" if high is not None else f">= {low}"
        _fail(f"{path}{key}", f"must be an integer {rng}; got {v!r}")
    return int(v)


def _float(doc, key, path, default=None):
    v = doc.get(key, default)
    if isinstance(v, bool) or not isinstance(v, Real) or not np.isfinite(v):
        _fail(f"{path}{key}", f"must be a finite number; got {v!r}")
    return float(v)


def _matrix_in(value, path):
    if not isinstance(value, list) or not value:
        _fail(path, "must be a non-empty list of rows of [re, im] pairs")
    d = len(value)
    out = np.empty((d, d), dtype=complex)
    for i, row in enumerate(value):
        if not isinstance(row, list) or len(row) != d:
            _fail(f"{path}[{i}]", f"must be a row of {d} [re, im] pairs (the matrix is square)")
        for j, v in enumerate(row):
            if (not isinstance(v, list) or len(v) != 2
                    or any(isinstance(x, bool) or not isinstance(x, Real) or not np.isfinite(x) for x in v)):
                _fail(f"{path}[{i}][{j}]", f"must be a pair [re, im] of finite numbers; got {v!r}")
            out[i, j] = complex(v[0], v[1])
    if d < 2 or d & (d - 1):
        _fail(path, f"must have a power-of-two size (2, 4, 8, ...); got {d}x{d}")
    return out


def _build(path, fn, *args):
    try:
        return fn(*args)
    except (ValueError, TypeError) as err:
        _fail(path, str(err))


def _gate_in(g, path):
    from .channels import from_kraus

    if not isinstance(g, dict):
        _fail(path, "must be an object with a name (and kind and data for a custom gate)")
    name = g.get("name")
    if not isinstance(name, str) or not name:
        _fail(f"{path}.name", f"must be a non-empty string; got {name!r}")
    kind = g.get("kind")
    if kind is None:
        if name not in STANDARD:
            _fail(f"{path}.name", f"{name!r} is not a standard gate; a custom gate needs its kind "
                  f"and data (standard gates: {', '.join(sorted(STANDARD))})")
        return STANDARD[name]
    if kind == "fixed":
        return _build(f"{path}.unitary", Gate.fixed, name, _matrix_in(g.get("unitary"), f"{path}.unitary"))
    if kind == "generator":
        gen = _matrix_in(g.get("generator"), f"{path}.generator")
        rule = None
        if g.get("shift_rule") is not None:
            r = g["shift_rule"]
            if not isinstance(r, dict):
                _fail(f"{path}.shift_rule", "must be an object with shifts and coefficients")
            rule = _build(f"{path}.shift_rule", ShiftRule, r.get("shifts"), r.get("coefficients"))
        return _build(f"{path}.generator", Gate.from_generator, name, gen, rule)
    if kind == "hamiltonian":
        drift = _matrix_in(g.get("drift"), f"{path}.drift")
        return _build(f"{path}.drift", Gate.from_hamiltonian, name, drift, g.get("drive"))
    if kind == "channel":
        kraus = g.get("kraus")
        if not isinstance(kraus, list) or not kraus:
            _fail(f"{path}.kraus", "must be a non-empty list of matrices")
        mats = [_matrix_in(k, f"{path}.kraus[{i}]") for i, k in enumerate(kraus)]
        return _build(f"{path}.kraus", from_kraus, mats, name)
    _fail(f"{path}.kind", f"must be 'fixed', 'generator', 'hamiltonian' or 'channel'; got {kind!r}")


def circuit_from_json(cls, Operation, text):
    """A circuit of class ``cls`` (operations of class ``Operation``) from JSON text written
    by `circuit_to_json`."""
    from dataclasses import fields

    doc = _parse(text, CIRCUIT)
    n = _int(doc, "n_qubits", "", low=1, high=64)
    m = _int(doc, "n_params", "")
    k = _int(doc, "n_inputs", "", optional=True) or 0
    ops = doc.get("operations")
    if not isinstance(ops, list):
        _fail("operations", "must be a list")
    c = cls(n)
    has_input = "input" in {f.name for f in fields(Operation)}
    out = []
    for i, e in enumerate(ops):
        path = f"operations[{i}]"
        if not isinstance(e, dict):
            _fail(path, "must be an object")
        gate = _gate_in(e.get("gate"), f"{path}.gate")
        qs = e.get("qubits")
        if not isinstance(qs, list):
            _fail(f"{path}.qubits", f"must be a list of qubit indices; got {qs!r}")
        try:
            qs = c._qubits(qs, gate)
        except (ValueError, TypeError) as err:
            _fail(f"{path}.qubits", str(err))
        keys = [key for key in ("param", "input", "angle") if e.get(key) is not None]
        if not gate.parametric:
            if keys:
                _fail(f"{path}.{keys[0]}", f"gate {gate.name!r} is fixed and takes no angle")
            out.append(Operation(gate, qs))
            continue
        if len(keys) != 1:
            _fail(path, f"a parametric gate needs exactly one of param, input, angle; got {keys}")
        if keys[0] == "angle":
            out.append(Operation(gate, qs, angle=_float(e, "angle", f"{path}.")))
            continue
        scale = _float(e, "scale", f"{path}.", 1.0)
        offset = _float(e, "offset", f"{path}.", 0.0)
        if keys[0] == "param":
            out.append(Operation(gate, qs, _int(e, "param", f"{path}.", high=m),
                                 scale, offset))
        else:
            if not has_input:
                _fail(f"{path}.input", "this qgradlib has no data inputs")
            out.append(Operation(gate, qs, None, scale, offset,
                                 input=_int(e, "input", f"{path}.", high=k)))
    c._ops = out
    c._n_params = m
    if has_input:
        c._n_inputs = k
    return c


def observable_from_json(cls, text):
    """An observable of class ``cls`` from JSON text written by `observable_to_json`."""
    doc = _parse(text, OBSERVABLE)
    n = _int(doc, "n_qubits", "", low=1, high=64)
    terms = doc.get("terms")
    if not isinstance(terms, dict):
        _fail("terms", "must be an object {Pauli string: coefficient}")
    for w, v in terms.items():
        if not isinstance(w, str) or len(w) != n or set(w) - set("IXYZ"):
            _fail(f"terms[{w!r}]", f"must be a Pauli string of {n} letters I, X, Y, Z")
        if isinstance(v, bool) or not isinstance(v, Real) or not np.isfinite(v):
            _fail(f"terms[{w!r}]", f"must be a finite real number; got {v!r}")
    dense = doc.get("dense")
    out = cls.__new__(cls)
    out._n, out._terms, out._dense = n, {w: float(v) for w, v in terms.items()}, None
    if dense is not None:
        d = _build("dense", cls.from_matrix, _matrix_in(dense, "dense"))
        if d.n_qubits != n:
            _fail("dense", f"must be {2 ** n}x{2 ** n} for {n} qubits")
        out._dense = d.dense
    return out
