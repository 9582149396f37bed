"""Standard problems to train on: spin-chain and MaxCut observables, layered and QAOA circuits.

Sign conventions (qubit 0 is the leftmost Pauli letter, as everywhere in qgradlib):

- `ising_chain`: ``H = -J sum_i Z_i Z_{i+1} - g sum_i X_i`` (ferromagnetic for J > 0, the
  transverse field g along X).
- `heisenberg_chain`: ``H = J sum_i (X_i X_{i+1} + Y_i Y_{i+1} + anisotropy * Z_i Z_{i+1})
  - field * sum_i Z_i`` (antiferromagnetic for J > 0), in Pauli matrices, so each bond is
  four times ``J S_i . S_{i+1}`` written in spin-1/2 operators.
- `maxcut`: ``C = sum_(i,j) w_ij (Z_i Z_j - 1) / 2``, whose expectation is *minus* the
  expected cut weight, so that minimising it maximises the cut.

Examples
--------
>>> import numpy as np
>>> import qgradlib as qg
>>> H = ising_chain(3, J=1.0, g=0.5)
>>> sorted(H.terms.items())[:2]
[('IIX', -0.5), ('IXI', -0.5)]
>>> c = qaoa(ring(4), p=1)
>>> c.n_params
2
"""
from __future__ import annotations

from numbers import Real

import numpy as np

from ..circuits.circuit import Circuit
from ..circuits.observables import Observable

__all__ = ["ising_chain", "heisenberg_chain", "maxcut", "cut_value", "ring", "layered", "qaoa"]


# -- argument checks ------------------------------------------------------------------------------
def _int(v, name, low):
    if isinstance(v, (bool, np.bool_)) or not isinstance(v, (int, np.integer)) or v < low:
        raise ValueError(f"{name} must be an int >= {low}; got {v!r}")
    return int(v)


def _real(v, name):
    if isinstance(v, (bool, np.bool_)) or not isinstance(v, (Real, np.floating, np.integer)) \
            or not np.isfinite(v):
        raise TypeError(f"{name} must be a finite real number; got {v!r}")
    return float(v)


def _bonds(n, periodic):
    if not isinstance(periodic, (bool, np.bool_)):
        raise TypeError(f"periodic must be True or False; got {periodic!r}")
    if periodic and n < 3:
        raise ValueError(f"a periodic chain needs n >= 3 (a ring of {n} would count a bond twice); "
                         "use periodic=False")
    pairs = [(i, i + 1) for i in range(n - 1)]
    return pairs + [(n - 1, 0)] if periodic else pairs


def _word(n, letters):
    w = ["I"] * n
    for q, p in letters.items():
        w[q] = p
    return "".join(w)


def _edges(edges, n=None):
    try:
        es = [tuple(e) for e in edges]
    except TypeError:
        raise TypeError("edges must be a sequence of vertex pairs such as [(0, 1), (1, 2)]") from None
    if not es:
        raise ValueError("edges must hold at least one pair")
    seen = set()
    for e in es:
        if len(e) != 2 or any(isinstance(v, (bool, np.bool_)) or not isinstance(v, (int, np.integer))
                              or v < 0 for v in e):
            raise ValueError(f"each edge must be a pair of non-negative int vertices; got {e!r}")
        if e[0] == e[1]:
            raise ValueError(f"edge {e!r} joins a vertex to itself")
        key = frozenset(e)
        if key in seen:
            raise ValueError(f"edge {e!r} appears twice; give it once (with its total weight)")
        seen.add(key)
    es = [(int(a), int(b)) for a, b in es]
    top = max(max(e) for e in es) + 1
    if n is None:
        n = top
    else:
        n = _int(n, "n", 1)
        if n < top:
            raise ValueError(f"n={n} is too small for vertex {top - 1} (vertices are 0..n-1)")
    return es, n


def _weights(weights, m):
    if weights is None:
        return np.ones(m)
    try:
        w = np.asarray(weights, dtype=float)
    except (TypeError, ValueError):
        raise TypeError("weights must be a sequence of real numbers, one per edge") from None
    if w.shape != (m,):
        raise ValueError(f"weights must have one entry per edge ({m}); got shape {w.shape}")
    if not np.all(np.isfinite(w)):
        raise ValueError("weights must be finite")
    return w


# -- observables ----------------------------------------------------------------------------------
def ising_chain(n, J=1.0, g=1.0, periodic=True) -> Observable:
    """Transverse-field Ising chain ``H = -J sum Z_i Z_{i+1} - g sum X_i`` on ``n`` qubits.

    Parameters
    ----------
    n : int
        Sites (qubits); at least 2, at least 3 when periodic.
    J, g : float
        Coupling and transverse field; ``g = J`` is the critical point.
    periodic : bool
        Include the bond ``(n-1, 0)``.

    Examples
    --------
    >>> ising_chain(2, periodic=False).terms
    {'ZZ': -1.0, 'XI': -1.0, 'IX': -1.0}
    """
    n = _int(n, "n", 2)
    J, g = _real(J, "J"), _real(g, "g")
    terms = {}
    for a, b in _bonds(n, periodic):
        terms[_word(n, {a: "Z", b: "Z"})] = -J
    for q in range(n):
        terms[_word(n, {q: "X"})] = -g
    return Observable(terms)


def heisenberg_chain(n, J=1.0, periodic=True, anisotropy=1.0, field=0.0) -> Observable:
    """Heisenberg (XXZ) chain ``H = J sum (XX + YY + anisotropy ZZ) - field sum Z``.

    Parameters
    ----------
    n : int
        Sites; at least 2, at least 3 when periodic.
    J : float
        Exchange; J > 0 is antiferromagnetic.
    periodic : bool
    anisotropy : float
        The ZZ coupling relative to XX and YY (1 is the isotropic chain).
    field : float
        A uniform field along Z.

    Examples
    --------
    >>> sorted(heisenberg_chain(2, periodic=False).terms)
    ['XX', 'YY', 'ZZ']
    """
    n = _int(n, "n", 2)
    J, d, h = _real(J, "J"), _real(anisotropy, "anisotropy"), _real(field, "field")
    terms = {}
    for a, b in _bonds(n, periodic):
        for p, c in (("X", J), ("Y", J), ("Z", J * d)):
            terms[_word(n, {a: p, b: p})] = c
    if h != 0.0:
        for q in range(n):
            terms[_word(n, {q: "Z"})] = -h
    return Observable(terms)


def maxcut(edges, weights=None, n=None) -> Observable:
    """MaxCut cost ``sum w_ij (Z_i Z_j - 1) / 2``: its expectation is minus the expected cut.

    A basis state assigns each vertex a side by its bit; ``(1 - Z_i Z_j) / 2`` is 1 exactly when
    the edge's ends differ, so the ground energy is minus the largest cut weight.

    Parameters
    ----------
    edges : sequence of (int, int)
        Vertices are qubits; each edge once.
    weights : sequence of float, optional
        One per edge (default 1).
    n : int, optional
        Qubits (default: the largest vertex + 1).

    Examples
    --------
    >>> maxcut([(0, 1)]).terms
    {'ZZ': 0.5, 'II': -0.5}
    """
    es, n = _edges(edges, n)
    w = _weights(weights, len(es))
    terms = {}
    for (a, b), wt in zip(es, w):
        zz = _word(n, {a: "Z", b: "Z"})
        terms[zz] = terms.get(zz, 0.0) + 0.5 * wt
    terms["I" * n] = -0.5 * float(w.sum())
    return Observable(terms)


def cut_value(edges, bits, weights=None) -> float:
    """Weight of the edges whose ends sit on different sides of ``bits``.

    ``bits`` is a sequence of 0/1 per vertex, or a basis-state index (qubit 0 the most
    significant bit).

    Examples
    --------
    >>> cut_value(ring(4), [0, 1, 0, 1])
    4.0
    >>> cut_value(ring(4), 0b0101)
    4.0
    """
    es, n = _edges(edges)
    w = _weights(weights, len(es))
    if isinstance(bits, (int, np.integer)) and not isinstance(bits, (bool, np.bool_)):
        if not 0 <= bits < 2 ** n:
            raise ValueError(f"bits as a basis index must lie in 0..{2 ** n - 1}; got {bits}")
        b = [(int(bits) >> (n - 1 - q)) & 1 for q in range(n)]
    else:
        b = list(bits)
        if len(b) < n or any(v not in (0, 1) for v in b):
            raise ValueError(f"bits must hold a 0 or 1 for each of the {n} vertices; got {bits!r}")
    return float(sum(wt for (i, j), wt in zip(es, w) if b[i] != b[j]))


def ring(n) -> list:
    """Edges ``(0, 1), (1, 2), ..., (n-1, 0)`` of a ring of ``n >= 3`` vertices.

    Examples
    --------
    >>> ring(3)
    [(0, 1), (1, 2), (2, 0)]
    """
    return _bonds(_int(n, "n", 3), True)


# -- circuits -------------------------------------------------------------------------------------
_ROTATIONS = ("rx", "ry", "rz")
_ENTANGLERS = ("cz", "cnot", None)


def layered(n, layers, rotations=("ry",), entangler="cz", periodic=False, final=True) -> Circuit:
    """A layered circuit: rotations on every qubit, then an entangling chain, repeated.

    Parameters
    ----------
    n : int
        Qubits.
    layers : int
        Repetitions of (rotations, entangler).
    rotations : sequence of {"rx", "ry", "rz"}
        Applied in order to each qubit in each layer; each is a new parameter.
    entangler : {"cz", "cnot", None}
        Two-qubit gate on the pairs ``(0, 1), (1, 2), ...``; None for no entangler.
    periodic : bool
        Also entangle ``(n-1, 0)`` (for n >= 3).
    final : bool
        End with one more layer of rotations (so the last entangler is not wasted).

    Returns
    -------
    Circuit
        ``n * len(rotations) * (layers + final)`` parameters, numbered in gate order.

    Examples
    --------
    >>> layered(3, 2).n_params
    9
    >>> layered(2, 1, rotations=("rx", "rz"), entangler="cnot", final=False).n_params
    4
    """
    n = _int(n, "n", 1)
    layers = _int(layers, "layers", 0)
    if isinstance(rotations, str):
        rotations = (rotations,)
    try:
        rots = tuple(rotations)
    except TypeError:
        raise TypeError(f"rotations must be a sequence of names from {_ROTATIONS}") from None
    if not rots or any(r not in _ROTATIONS for r in rots):
        raise ValueError(f"rotations must be a non-empty sequence of names from {_ROTATIONS}; "
                         f"got {rotations!r}")
    if entangler not in _ENTANGLERS:
        raise ValueError(f"entangler must be one of {_ENTANGLERS}; got {entangler!r}")
    if not isinstance(final, (bool, np.bool_)):
        raise TypeError(f"final must be True or False; got {final!r}")
    if layers == 0 and not final:
        raise ValueError("layers=0 with final=False builds an empty circuit")
    if not isinstance(periodic, (bool, np.bool_)):
        raise TypeError(f"periodic must be True or False; got {periodic!r}")
    pairs = _bonds(n, bool(periodic) and n >= 3)
    c = Circuit(n)

    def rotate():
        for q in range(n):
            for r in rots:
                getattr(c, r)(q)
    for _ in range(layers):
        rotate()
        if entangler is not None and n > 1:
            for a, b in pairs:
                getattr(c, entangler)(a, b)
    if final:
        rotate()
    return c


def qaoa(edges, p, weights=None, n=None) -> Circuit:
    """QAOA circuit for MaxCut on ``edges`` with ``p`` layers (Farhi, Goldstone and Gutmann, 2014).

    Starts in ``|+>^n`` (H on every qubit); layer k applies ``exp(-1j gamma_k C)`` with
    ``C = sum w_ij (1 - Z_i Z_j) / 2`` the cut (as RZZ gates of angle ``-w_ij gamma_k``, up to a
    global phase) and then ``exp(-1j beta_k sum X_i)`` (RX gates of angle ``2 beta_k``).

    Returns
    -------
    Circuit
        ``2 p`` parameters ordered ``(gamma_1, beta_1, ..., gamma_p, beta_p)``; each is shared
        by all the gates of its layer.

    Examples
    --------
    >>> c = qaoa([(0, 1), (1, 2)], p=2)
    >>> c.n_params, len(c)
    (4, 13)
    """
    es, n = _edges(edges, n)
    w = _weights(weights, len(es))
    p = _int(p, "p", 1)
    c = Circuit(n)
    for q in range(n):
        c.h(q)
    for k in range(p):
        gamma, beta = 2 * k, 2 * k + 1
        for (a, b), wt in zip(es, w):
            c.rzz(a, b, param=gamma, scale=-float(wt))
        for q in range(n):
            c.rx(q, param=beta, scale=2.0)
    return c
