"""Small states: a lean run and adjoint pass where a Python call costs more than its arithmetic.

On a few qubits a kernel call is microseconds of arithmetic and as much again of Python, so
`qgradlib.engine.statevector.run` and `qgradlib.engine.adjoint.adjoint_gradient` hand circuits of
at most `SMALL_QUBITS` qubits (fixed and generator gates only, no inserted rotations) to this
module. A circuit is compiled once (memoised on it by its length, as programs are) into:

- *constant steps*: each run of consecutive fixed gates becomes one whole-register operation,
  a diagonal (N,), a permutation with phases, or up to `DENSE_QUBITS` qubits a dense (N, N)
  matrix (otherwise its gates stay apart, each one kernel call);
- *gate steps*: one a parametric gate, with its view of the state worked out in advance.
  Their matrices (or diagonals) come from one vectorised call per gate type per run
  (`_table`), for every row at once.

- *block steps* (up to `BLOCK_QUBITS` qubits): a run of parametric single-qubit gates on
  distinct qubits is one whole-register matrix, the Kronecker product of their 2 x 2
  matrices built per call, applied by one product. In the backward pass the gates of a
  block commute, so all their derivatives ``2 Im <lam|G_k|psi>`` are read at the block's
  output from one product with the stacked whole-register generators, and the block is
  undone by one product. Where rows differ in a block's angles, its gates run one by one.

The forward run alternates two buffers; the backward pass of the adjoint method walks the
same steps in reverse on the stacked bra and ket rows (the layout and memory of
`qgradlib.engine.adjoint`). Results agree with the general engine to rounding.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import kernels
from .program import is_gate

__all__ = ["SMALL_QUBITS", "DENSE_QUBITS", "BLOCK_QUBITS", "eligible", "memoised", "compiled", "gate_steps", "krons",
           "run", "backward"]

# at or below this many qubits the lean loop is used
SMALL_QUBITS = 12
# whole-register dense matrices for runs of fixed gates up to this many qubits
DENSE_QUBITS = 6
# single-qubit gates whose stride is below this act on a widened block over the last qubits
_TAIL = 8
# and only on batches of at least this many amplitudes (below, the strided product is cheaper)
_TAIL_MIN = 256
# shared one-qubit matrices on many rows act as a real block matrix up to this stride
_BLOCK_R = 8
_EYES = {}

# runs of single-qubit parametric gates become one whole-register block up to this many
# qubits (above, the (N, N) product costs more than the gates one by one)
BLOCK_QUBITS = 6
# bytes of stacked block generators one compiled circuit may hold (blocks of one qubit
# pattern share theirs)
_BLOCK_BYTES = 2 ** 23

_CONST_DIAG, _CONST_MONO, _CONST_DENSE, _FIXED, _ONE, _DIAG, _OTHER, _BLOCK = range(8)


@dataclass(frozen=True, eq=False)
class Compiled:
    """Steps of a small circuit: ``(code, *payload)`` tuples, and the gate groups of `_table`."""

    n: int
    steps: tuple
    groups: tuple       # (gate, columns (k,) intp, diagonal?) of every parametric gate type
    n_columns: int


def eligible(circuit, inserts=None) -> bool:
    """Whether the small-state loop runs ``circuit``: few qubits, gates of fixed or generator
    kind only, no inserted rotations."""
    if inserts is not None or circuit.n_qubits > SMALL_QUBITS:
        return False
    return memoised(circuit, "_memo_small_ok", lambda c: all(
        is_gate(op.gate) and op.gate.kind in ("fixed", "generator") for op in c.operations))


def memoised(circuit, key, build):
    """``build(circuit)``, memoised on the circuit under ``key`` until it grows (a circuit
    only ever grows: its length says whether a memo is still its own).

    Examples
    --------
    >>> import qgradlib as qg
    >>> c = qg.Circuit(1).ry(0)
    >>> memoised(c, "_memo_doc", len), memoised(c.rx(0), "_memo_doc", len)
    (1, 2)
    """
    hit = circuit.__dict__.get(key)
    if hit is None or hit[0] != len(circuit):
        hit = (len(circuit), build(circuit))
        circuit.__dict__[key] = hit
    return hit[1]


def compiled(circuit) -> Compiled:
    """The memoised `Compiled` form of an `eligible` circuit (recompiled when it grows)."""
    return memoised(circuit, "_memo_small", _compile)


def _compile(circuit):
    n = circuit.n_qubits
    steps, run_ops, groups = [], [], {}
    col = 0
    for op in circuit.operations:
        g = op.gate
        if not g.parametric:
            run_ops.append(op)
            continue
        steps.extend(_constant_steps(run_ops, n))
        run_ops = []
        key = id(g)
        if key not in groups:
            groups[key] = (g, [])
        gi = list(groups).index(key)
        pos = len(groups[key][1])
        groups[key][1].append(col)
        steps.append(_gate_step(g, tuple(op.qubits), n, gi, pos, col))
        col += 1
    steps.extend(_constant_steps(run_ops, n))
    if n <= BLOCK_QUBITS:
        steps = _blocks(steps, n)
    glist = tuple((g, np.array(cols, dtype=np.intp), bool(g.diagonal)) for g, cols in groups.values())
    return Compiled(n, tuple(steps), glist, col)


def gate_steps(comp):
    """The compiled steps of ``comp``, one gate or constant run a step: a `_BLOCK` step holds
    a run of gate steps taken together for the forward pass (its ``[1]``); callers that need
    the gates one by one (rows born between them, a carried rest of the circuit) get them
    taken apart here."""
    for s in comp.steps:
        if s[0] == _BLOCK:
            yield from s[1]
        else:
            yield s


def _blocks(steps, n):
    """Runs of `_ONE` steps on distinct qubits as `_BLOCK` steps (two gates or more)."""
    out, run, shared, used = [], [], {}, [0]

    def close():
        if len(run) < 2:
            out.extend(run)
        else:
            key = tuple((id(s[7]), _qubit(s, n)) for s in run)
            if key not in shared:
                N = 2 ** n
                if used[0] + 16 * len(run) * N * N > _BLOCK_BYTES:
                    out.extend(run)
                    run.clear()
                    return
                used[0] += 16 * len(run) * N * N
                # row form: (G_k psi) as a row is psi @ G_k.T, every k side by side
                full = [_kron({_qubit(s, n): s[7].T}, n) for s in run]
                shared[key] = np.ascontiguousarray(np.concatenate(full, axis=1))
            out.append((_BLOCK, tuple(run), tuple(_qubit(s, n) for s in run), shared[key],
                        np.array([s[3] for s in run], dtype=np.intp)))
        run.clear()

    for s in steps:
        if s[0] == _ONE and _qubit(s, n) not in {_qubit(r, n) for r in run}:
            run.append(s)
            continue
        close()
        if s[0] == _ONE:
            run.append(s)
        else:
            out.append(s)
    close()
    return out


def _qubit(s, n):
    """The qubit of a `_ONE` step (from its strides L = 2**q)."""
    return s[4].bit_length() - 1


def _kron(mats, n):
    """The whole-register matrix of 2 x 2 matrices ``{qubit: m}`` (identity elsewhere),
    qubit 0 the leftmost factor."""
    return krons(np.stack([mats.get(q, _EYE2) for q in range(n)])[None])[0]


def krons(f):
    """Kronecker products (L, 2**k, 2**k) of the 2 x 2 factors ``f`` (L, k, 2, 2), the first
    factor the most significant, for all L at once (one broadcast product a factor).

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> f = rng.normal(size=(2, 3, 2, 2))
    >>> bool(np.allclose(krons(f)[1], np.kron(np.kron(f[1, 0], f[1, 1]), f[1, 2])))
    True
    """
    L, k = f.shape[:2]
    if k == 0:
        return np.ones((L, 1, 1), dtype=complex)
    # pairs of neighbouring blocks a level at a time, all pairs of a level in one product
    # (two products for four factors, not three); an odd block out waits at the end
    blocks, spare = f, []
    while blocks.shape[1] > 1:
        c, d = blocks.shape[1:3]
        if c % 2:
            spare.append(blocks[:, -1])
            blocks = blocks[:, :-1]
        blocks = (blocks[:, 0::2, :, None, :, None] * blocks[:, 1::2, None, :, None, :]).reshape(
            L, c // 2, d * d, d * d)
    out = blocks[:, 0]
    for b in reversed(spare):          # the first set aside is the least significant
        p, q = out.shape[1], b.shape[1]
        out = (out[:, :, None, :, None] * b[:, None, :, None, :]).reshape(L, p * q, p * q)
    return out


_EYE2 = np.eye(2, dtype=complex)


def _constant_steps(ops, n):
    """One whole-register step for a run of fixed gates where it is cheap, else one a gate."""
    if not ops:
        return []
    N = 2 ** n
    if all(op.gate.diagonal for op in ops):
        d = np.ones((1, N), dtype=complex)
        for op in ops:
            kernels.apply_diag(d, n, np.diag(op.gate.unitary), tuple(op.qubits))
        d = d[0]
        return [(_CONST_DIAG, d.real.copy() if not np.any(d.imag) else d)]
    if all(kernels.monomial_structure(op.gate.unitary) is not None for op in ops):
        # a monomial maps amplitude src[i] to i with a unit phase: run it on 1, 2, ..., N
        # and read the source from the modulus and the phase from the argument
        x = np.arange(1, N + 1, dtype=complex)[None]
        x = _apply_ops(x, ops, n)[0]
        src = np.rint(np.abs(x)).astype(np.intp) - 1
        ph = x / np.abs(x)
        inv = np.empty(N, dtype=np.intp)
        inv[src] = np.arange(N)
        ones = bool(np.all(ph == 1))
        return [(_CONST_MONO, src, None if ones else ph, inv, None if ones else np.conj(ph)[inv])]
    if n <= DENSE_QUBITS:
        U = _apply_ops(np.eye(N, dtype=complex), ops, n).T      # row i of the run is U e_i
        return [(_CONST_DENSE, np.ascontiguousarray(U.T), np.ascontiguousarray(U.conj()))]
    return [(_FIXED, np.asarray(op.gate.unitary, dtype=complex), tuple(op.qubits),
             np.ascontiguousarray(np.asarray(op.gate.unitary, dtype=complex).conj().T)) for op in ops]


def _apply_ops(psi, ops, n):
    for op in ops:
        psi = kernels.apply_dense(np.ascontiguousarray(psi), n, np.asarray(op.gate.unitary, dtype=complex),
                                  tuple(op.qubits), np.empty_like(psi))
    return psi


def _gate_step(g, qubits, n, gi, pos, col):
    if g.diagonal:
        order = sorted(range(len(qubits)), key=lambda i: qubits[i])
        sq = tuple(qubits[i] for i in order)
        shape, axes = kernels._view_shape(1, n, sq)
        dshape = [1] * len(shape)
        for ax in axes:
            dshape[ax] = 2
        # the diagonal's entries re-ordered to ascending qubits (identity when they are)
        k = len(qubits)
        code = np.arange(2 ** k, dtype=float)
        perm = np.rint(kernels.sort_qubits(code, qubits, diag=True)[0]).astype(np.intp)
        perm = None if np.array_equal(perm, np.arange(2 ** k)) else perm
        G = np.diag(np.asarray(g.generator)).real
        Gs = G if perm is None else G[perm]
        return (_DIAG, gi, pos, col, tuple(shape[1:]), tuple(dshape[1:]), perm, Gs)
    if len(qubits) == 1:
        q = qubits[0]
        L, R = 2 ** q, 2 ** (n - q - 1)
        return (_ONE, gi, pos, col, L, R, R < _TAIL, np.asarray(g.generator, dtype=complex))
    return (_OTHER, gi, pos, col, qubits, g)


# -- a run ------------------------------------------------------------------------------------
class _Few(tuple):
    """A gate value shared by all rows but a few: ``(base, rows, values of those rows)``.

    The points of a shift plan differ from the unshifted point in one angle each, so a gate
    acts on most rows with one matrix: that product runs once for all rows, and the few
    rows whose angle differs are redone with their own.
    """


def _table(comp, phi):
    """Per group: matrices (or diagonals) (k, d, d) for shared angles, (k, P, d, d) where
    many rows differ, or the base values (k, d, d) and per column its few differing rows."""
    P = phi.shape[0]
    table = []
    for g, cols, diag in comp.groups:
        a = phi[:, cols]
        values = g.diagonal_values if diag else g._matrices
        base = values(a[0])
        if P == 1:
            table.append((base, None))
            continue
        differ = a != a[:1]
        count = int(np.count_nonzero(differ))
        if count == 0:
            table.append((base, None))
        elif count * 4 <= differ.size:
            # few rows differ: their values in one call, then column by column
            where = differ.T
            vals = values(a.T[where])
            per = np.cumsum([0] + where.sum(axis=1).tolist())
            rows = [np.flatnonzero(where[j]) for j in range(cols.size)]
            table.append((base, [(rows[j], vals[per[j]:per[j + 1]]) for j in range(cols.size)]))
        else:
            vals = values(a.T.reshape(-1))
            table.append((vals.reshape((cols.size, P) + vals.shape[1:]), "rows"))
    return table


def _value(table, gi, pos):
    vals, mode = table[gi]
    if mode is None or mode == "rows":
        return vals[pos]
    rows, few = mode[pos]
    return vals[pos] if rows.size == 0 else _Few((vals[pos], rows, few))


def _apply(code, s, cur, other, m, n):
    """Apply a gate step's value ``m`` (an array or `_Few`); returns (current, spare)."""
    if isinstance(m, _Few):
        base, rows, few = m
        sub = cur[rows]
        if code == _DIAG:
            _diag(cur, base, s[4], s[5], s[6])
            cur[rows] = _diag(sub, few, s[4], s[5], s[6])
            return cur, other
        _apply(code, s, cur, other, base, n)
        res = np.empty_like(sub)
        _apply(code, s, sub, res, few, n)
        other[rows] = res
        return other, cur
    if code == _DIAG:
        _diag(cur, m, s[4], s[5], s[6])
        return cur, other
    if code == _ONE:
        _one(cur, other, m, s[4], s[5], s[6])
    else:
        kernels.apply_dense(cur, n, m, s[4], other)
    return other, cur


def _one(psi, out, m, L, R, wide):
    """``out = m psi`` on one qubit; m (2, 2) shared or (B, 2, 2) per row."""
    B = psi.shape[0]
    if m.ndim == 2 and B > 1:
        # many rows, one matrix: a broadcast (2, 2) product over (B, L, 2, R) runs one tiny
        # product per (row, L) pair; on the float view of the amplitudes the same work is one
        # real matrix product, a block of kron(m, I_R) for narrow R, m itself where m is real
        f = psi.view(psi.real.dtype)
        o = out.view(psi.real.dtype)
        if R <= _BLOCK_R:
            np.matmul(f.reshape(-1, 4 * R), _real_block(m, R), out=o.reshape(-1, 4 * R))
            return out
        if not np.any(m.imag):
            np.matmul(m.real, f.reshape(B * L, 2, 2 * R), out=o.reshape(B * L, 2, 2 * R))
            return out
    if wide and psi.size >= _TAIL_MIN:
        eye = np.eye(R)
        if m.ndim == 2:
            blk = (m[:, None, :, None] * eye[None, :, None, :]).reshape(2 * R, 2 * R)
            np.matmul(psi.reshape(-1, 2 * R), blk.T, out=out.reshape(-1, 2 * R))
        else:
            blk = (m[:, :, None, :, None] * eye[None, None, :, None, :]).reshape(B, 2 * R, 2 * R)
            np.matmul(psi.reshape(B, -1, 2 * R), np.swapaxes(blk, 1, 2), out=out.reshape(B, -1, 2 * R))
        return out
    v = psi.reshape(B, L, 2, R)
    o = out.reshape(B, L, 2, R)
    np.matmul(m if m.ndim == 2 else m[:, None], v, out=o)
    return out


def _real_block(m, R):
    """The real (4R, 4R) matrix that maps a row of ``2R`` amplitudes, read as ``4R`` floats
    (real and imaginary parts interleaved), through ``kron(m, I_R)``, for a row times it."""
    return _real_blocks(_block_parts(m[None]), R)[0]


def _block_parts(m):
    """The real parts of the matrices ``m`` (k, 2, 2) that `_real_blocks` spreads out."""
    re, im = np.swapaxes(m.real, 1, 2), np.swapaxes(m.imag, 1, 2)
    # [., j, t, i, s]: input amplitude j (part t) to output amplitude i (part s)
    parts = np.empty((m.shape[0], 2, 2, 2, 2))
    parts[:, :, 0, :, 0] = re
    parts[:, :, 1, :, 1] = re
    parts[:, :, 1, :, 0] = -im
    parts[:, :, 0, :, 1] = im
    return parts


def _real_blocks(parts, R):
    """`_real_block` (k, 4R, 4R) of every matrix, from its `_block_parts` (k, 2, 2, 2, 2)."""
    eye = _EYES.get(R)
    if eye is None:
        eye = _EYES.setdefault(R, np.eye(R)[None, None, :, None, None, :, None])
    return (parts[:, :, None, :, :, None, :] * eye).reshape(parts.shape[0], 4 * R, 4 * R)


def _diag(psi, d, shape, dshape, perm):
    """``psi *= d`` on the step's qubits, in place; d (d,) shared or (B, d) per row."""
    B = psi.shape[0]
    if perm is not None:
        d = d[..., perm]
    d = d.reshape(((1,) if d.ndim == 1 else (B,)) + dshape)
    v = psi.reshape((B,) + shape)
    v *= d
    return psi


def _forward(comp, cur, other, table, n):
    """Apply every step; returns (final buffer, spare)."""
    for s in comp.steps:
        code = s[0]
        if code < _ONE:
            cur, other = _constant(s, cur, other, n)
        elif code == _BLOCK:
            mats = _block_values(s, table)
            if mats is None:          # rows differ: the gates one by one
                for b in s[1]:
                    cur, other = _apply(_ONE, b, cur, other, _value(table, b[1], b[2]), n)
            else:
                # row form: psi -> psi @ U.T, U.T the Kronecker product of the transposes
                np.matmul(cur, _kron({q: m.T for q, m in zip(s[2], mats)}, n), out=other)
                cur, other = other, cur
        else:
            cur, other = _apply(code, s, cur, other, _value(table, s[1], s[2]), n)
    return cur, other


def _constant(s, cur, other, n):
    """Apply a constant step (a code below ``_ONE``); returns (current, spare)."""
    code = s[0]
    if code == _CONST_DIAG:
        cur *= s[1]
        return cur, other
    if code == _CONST_MONO:
        np.take(cur, s[1], axis=1, out=other, mode="clip")
        if s[2] is not None:
            other *= s[2]
    elif code == _CONST_DENSE:
        np.matmul(cur, s[1], out=other)
    else:
        kernels.apply_dense(cur, n, s[1], s[2], other)
    return other, cur


def _block_values(s, table):
    """The 2 x 2 matrices of a block's gates when every row shares them, else None."""
    mats = [_value(table, b[1], b[2]) for b in s[1]]
    if all(type(m) is np.ndarray and m.ndim == 2 for m in mats):
        return mats
    return None


def _invert(m, diag, rows):
    """The inverse of a unitary value, tiled over the stacked bra and ket rows when it is
    per row (``rows`` = 2P)."""
    if isinstance(m, _Few):
        base, idx, few = m
        return _Few((_invert(base, diag, rows), np.concatenate([idx, idx + rows // 2]),
                     _invert(few, diag, 2 * few.shape[0])))
    inv = np.conj(m) if diag else np.conj(np.swapaxes(m, -1, -2))
    extra = 1 if diag else 2
    if inv.ndim > extra and inv.shape[0] != rows:
        inv = np.concatenate([inv, inv])
    return inv


def run(circuit, phi, psi=None, out=None):
    """Final states (B, 2**n) of an `eligible` circuit at gate angles ``phi`` (B, G).

    ``psi`` (B, 2**n) are the initial states (default ``|0...0>``, not modified); ``out``
    receives the result when given. Checks of shapes are the caller's
    (`qgradlib.engine.statevector.run`).

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> c = qg.Circuit(2).h(0).cnot(0, 1).ry(1)
    >>> bool(np.allclose(run(c, np.zeros((1, 1))), qg.state(c, np.zeros(1), fuse=False)))
    True
    """
    comp = compiled(circuit)
    B = phi.shape[0]
    N = 2 ** comp.n
    # the matrices first: their temporaries come and go before the two buffers exist
    table = _table(comp, phi)
    cur = out if out is not None else np.empty((B, N), dtype=complex)
    if psi is None:
        cur[...] = 0
        cur[:, 0] = 1
    else:
        cur[...] = psi
    other = np.empty_like(cur)
    res, _ = _forward(comp, cur, other, table, comp.n)
    if out is not None and res is not out:
        out[...] = res
        return out
    return res


# -- the adjoint backward pass ------------------------------------------------------------------
def _dots(lam, mu):
    """<lam_p|mu_p> for every row."""
    if lam.shape[0] == 1:
        return np.array([np.vdot(lam[0], mu[0])])
    return np.einsum("bi,bi->b", lam.conj(), mu)


def backward(circuit, both, phi, want, observable_into=None, apply_observable=None):
    """dE/dphi (P, G) from the stacked final states ``both`` (2P, 2**n): rows :P the kets,
    rows P: are filled with ``O psi`` here (the layout of `qgradlib.engine.adjoint`), unless
    neither ``observable_into`` nor ``apply_observable`` is given: then they hold it already.

    ``want`` holds the columns to differentiate; the others stay zero. Uses ``both`` and one
    buffer like it, nothing larger.
    """
    comp = compiled(circuit)
    n = comp.n
    P = phi.shape[0]
    table = _table(comp, phi)        # before the buffer: its temporaries come and go first
    buf = np.empty_like(both)
    if observable_into is not None:
        observable_into(both[:P], both[P:], buf[:P])
    elif apply_observable is not None:
        both[P:] = apply_observable(both[:P])
    # (neither: rows P: hold O psi already)
    grad = np.zeros((P, comp.n_columns))
    cur, other = both, buf
    for s in reversed(comp.steps):
        code = s[0]
        if code == _BLOCK:
            cur, other = _undo_block(s, cur, other, table, n, P, grad, want)
            continue
        if code in (_DIAG, _ONE, _OTHER) and s[3] in want:
            _derivative(s, cur, other, n, P, grad)
        cur, other = _undo(s, cur, other, table, n)
    return grad


def _undo_block(s, cur, other, table, n, P, grad, want):
    """Derivatives of a block's gates, read at its output, then the block undone."""
    mats = _block_values(s, table)
    if mats is None:
        for b in reversed(s[1]):
            if b[3] in want:
                _derivative(b, cur, other, n, P, grad)
            cur, other = _undo(b, cur, other, table, n)
        return cur, other
    # the gates act on distinct qubits and commute: 2 Im <lam|G_k|psi> at the block's output
    k = len(s[1])
    v = (cur[:P] @ s[3]).reshape(P, k, -1)                  # rows of G_k psi
    d = 2 * np.imag(np.einsum("pkn,pn->pk", v, cur[P:].conj()))
    for j, c in enumerate(s[4]):
        if c in want:
            grad[:, c] = d[:, j]
    # undo: row form psi -> psi @ conj(U), conj(U) the Kronecker product of the conjugates
    np.matmul(cur, _kron({q: np.conj(m) for q, m in zip(s[2], mats)}, n), out=other)
    return other, cur


def _derivative(s, both, buf, n, P, grad):
    """``grad[:, col] = 2 Im <lam|G|psi>`` at the gate's output, psi rows :P, lam rows P:."""
    code, col = s[0], s[3]
    psi, lam, mu = both[:P], both[P:], buf[:P]
    if code == _DIAG:
        np.copyto(mu, psi)
        _diag(mu, s[7], s[4], s[5], None)
    elif code == _ONE:
        _one(psi, mu, s[7], s[4], s[5], s[6])
    else:
        kernels.apply_dense(psi, n, np.asarray(s[5].generator, dtype=complex), s[4], mu)
    grad[:, col] = 2 * np.imag(_dots(lam, mu))


def _undo(s, cur, other, table, n):
    """Undo one step on every stacked row; returns (current, spare)."""
    code = s[0]
    if code == _CONST_DIAG:
        cur *= np.conj(s[1])
        return cur, other
    if code == _CONST_MONO:
        np.take(cur, s[3], axis=1, out=other, mode="clip")
        if s[4] is not None:
            other *= s[4]
        return other, cur
    if code == _CONST_DENSE:
        np.matmul(cur, s[2], out=other)
        return other, cur
    if code == _FIXED:
        kernels.apply_dense(cur, n, s[3], s[2], other)
        return other, cur
    m = _invert(_value(table, s[1], s[2]), code == _DIAG, cur.shape[0])
    return _apply(code, s, cur, other, m, n)
