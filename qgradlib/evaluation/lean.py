"""The lean lane: exact `expect` calls on small circuits with one autograd primitive.

The common call of a training loop, ``grad(lambda t: expect(c, H, t, gradient="adjoint"))``
on a few qubits, spends more time in thin layers (argument checks, the spec, the angle map
as three autograd operations, the memory guard's text, BLAS thread limits, the ledger's
bookkeeping) than in arithmetic. After one call has gone the general way and succeeded,
`Lane` memoises on the circuit's snapshot what that call worked out, and later calls with the
same circuit, observables and options go straight from ``theta`` to the value:

- one primitive, `lane_value`, from ``theta`` (m,) to the value(s); its VJP (registered
  below it) applies the angle map's transpose ``A.T`` itself, after
  - with ``gradient="adjoint"``, one observable and every qubit on one side (up to
    `DENSE_QUBITS`) with Pauli rotations: nothing but a scale, the forward call having
    computed ``dE/dphi`` with the value (`qgradlib.engine.whole.round_trip`);
  - else with ``gradient="adjoint"``: the adjoint backward pass from the forward call's states,
    by layers (`qgradlib.engine.sides`: circuits whose parametric gates act on one qubit,
    their kept states; one traced observable gets ``O psi`` in the forward call already) or
    gate by gate (`qgradlib.engine.small`);
  - with ``gradient="shift"``: the general path's own shift plan and batch at the forward
    call's angles (the same circuits counted, the same engine; a layered circuit's batch is
    born from the forward call's kept states); on a layered circuit whose plan depends on
    no angle, the memoised plan's points go straight to the growing batch (`grown_shifts`);
- the angle map as index and scale arrays, ``phi = theta[idx] * scale + b`` (a copy of
  theta where the map is the identity);
- the memory guard's byte counts and messages (the guard itself still runs every call);
- the BLAS thread limit (`qgradlib.engine.threads`) only from `LIMIT_QUBITS` qubits on, on
  the gate-by-gate path: on four qubits one row's products are too small for a second
  OpenBLAS thread to matter, while the limit costs about 15 us a call; from five qubits on
  the whole-register products of `qgradlib.engine.small` ran several times slower with two
  threads next to a busy process. The layered path's products stay at or below 64 x 64 x 64,
  which OpenBLAS runs on the calling thread.

Values and derivatives equal those of the general path to rounding, and the ledger counts the
same circuits. Anything else (shots, readout, executors, data inputs, initial states, single
precision, a batch of theta, nested or forward-mode derivatives, finite differences under
autograd) takes the general path.

Examples
--------
>>> import numpy as np
>>> import qgradlib as qg
>>> from autograd import grad
>>> c = qg.Circuit(2).ry(0).cnot(0, 1).ry(1)
>>> Z = qg.Observable({"ZZ": 1.0})
>>> f = lambda t: qg.expect(c, Z, t, gradient="adjoint")
>>> first = grad(f)(np.array([0.3, 0.5]))       # the general path; the lane is kept
>>> again = grad(f)(np.array([0.3, 0.5]))       # the lane
>>> bool(np.allclose(first, again, rtol=1e-12, atol=1e-15))
True
"""
from __future__ import annotations

from collections import Counter
from dataclasses import dataclass

import numpy as np
from autograd.core import VJPNode
from autograd.extend import defvjp, primitive
from autograd.tracer import Box

from . import ledger
from ..circuits.circuit import MAX_ANGLE
from ..engine import memory, sides, small, whole
from ..engine.adjoint import adjoint_gradient, adjoint_states, lean_backward
from ..engine.threads import engine_threads
from ..engine.measure import apply_observables, expectations, observable_pieces, observable_scratch
from .rows import peak_states
from ..engine.growing import grown_values
from ..rules.plans import distinct_points, fixed_plan

__all__ = ["Lane", "lane_for", "lane_value", "LANE_QUBITS", "LIMIT_QUBITS"]

# circuits of at most this many qubits take the lane (the small-state loop's limit)
LANE_QUBITS = small.SMALL_QUBITS
# at or below this many qubits one observable's O psi is a product with its matrix (16 x 16
# at most: one call, where its pieces take three a flip pattern)
DENSE_QUBITS = 4
# from this many qubits on, the lane's engine calls run inside the BLAS thread limit
LIMIT_QUBITS = 5


@dataclass(frozen=True, eq=False)
class Lane:
    """What one exact call on a small circuit needs, worked out once.

    ``circuit`` is the frozen snapshot the general call evaluated; ``observables`` the
    tuple of `Observable` values (held, so that their ids stay theirs); ``adjoint`` whether
    autograd may differentiate through the lane (``gradient="adjoint"``).
    """

    circuit: object
    observables: tuple
    single: bool
    adjoint: bool
    idx: np.ndarray          # (G,) the parameter each gate angle reads (0 for fixed angles)
    scale: np.ndarray        # (G,) its scale (0 for fixed angles and gates read by no parameter)
    offset: np.ndarray       # (G,) the offset, or the fixed angle
    n_params: int
    want: frozenset          # columns the adjoint differentiates (trainable, scale != 0)
    settings: int            # measurement settings a device would use (for the ledger)
    forward_bytes: int
    forward_what: str
    adjoint_bytes: int
    adjoint_what: str
    scratch: float           # states a row that applying the observables allocates
    layered: bool            # whether the circuit runs as layers (`qgradlib.engine.sides`)
    first: int               # the earliest layer holding a column to differentiate
    kept_bytes: int
    kept_what: str
    pieces: object           # on a layered circuit one observable's `observable_pieces`
                             # (its matrix on up to `DENSE_QUBITS`), else None
    shifts: object           # phi (1, G) -> the shift-rule Jacobian (1, K, G), or None
    identity: bool           # the angle map is phi = theta
    covered: bool            # every parameter is read by a gate with a nonzero scale
    peak: object             # rows -> the states the general path guards for them at once
                             # (`qgradlib.evaluation.rows.peak_states`)
    trip: object = None      # a traced adjoint call on up to `DENSE_QUBITS` qubits of Pauli
                             # rotations: its `qgradlib.engine.whole.RoundTrip`, else None

    def to_theta(self, dphi):
        """The chain rule through phi = A theta + b: ``A.T @ dphi`` (m,), A one entry a row
        (float even when there is no gate: bincount of nothing counts in ints)."""
        if self.identity:
            return dphi
        return np.bincount(self.idx, weights=self.scale * dphi, minlength=self.n_params).astype(
            float, copy=False)

    def angles(self, theta):
        """Gate angles (1, G) of a plain theta (m,), or None when one is out of range
        (the general path then names the problem)."""
        return self.row_angles(theta.reshape(1, -1))

    def row_angles(self, theta):
        """Gate angles (B, G) of a plain theta (B, m), or None when one is out of range."""
        phi = theta.copy() if self.identity else theta[:, self.idx] * self.scale + self.offset
        # NaN and inf fail the comparison too: a parameter read with a nonzero scale is
        # checked here (`plain` checks the others)
        if phi.size and not np.abs(phi).max() < MAX_ANGLE:
            return None
        return phi

    def forward(self, phi, keep=False):
        """(values (K,), final state (1, 2**n), kept run or None) at gate angles ``phi``
        (1, G), the values of one observable a 1-tuple; ``keep`` (for a traced call) keeps
        what the layered gradient reads."""
        n = self.circuit.n_qubits
        kept = None
        if keep and self.trip is not None:
            # the value and its derivatives in one pass: the VJP only scales them
            memory.guard(self.kept_bytes, self.kept_what)
            value, dphi = whole.round_trip(self.trip, phi[0])
            ledger.record(1, self.settings, 0, {"value": 1})
            return (value,), None, dphi
        if self.layered and keep:
            memory.guard(self.kept_bytes, self.kept_what)
        else:
            memory.guard(self.forward_bytes, self.forward_what)
        if self.layered:
            psi, kept = sides.run(self.circuit, phi[0], keep=keep)
            psi = psi.reshape(1, -1)
        elif n >= LIMIT_QUBITS:
            with engine_threads(n):
                psi = small.run(self.circuit, phi)
        else:
            psi = small.run(self.circuit, phi)
        if self.pieces is not None:
            # one observable: its bra O psi now, the value <psi|O psi> from it
            lam = _applied(self.pieces, psi[0])
            vals = (np.vdot(psi[0], lam).real,)
            if kept is not None:
                kept = (kept, lam)
        else:
            vals = expectations(psi, n, self.observables)[0]
        ledger.record(1, self.settings, 0, {"value": 1})
        return vals, psi, kept

    def gradient(self, phi, psi, g, kept=None):
        """``sum_k g[k] dE_k/dtheta`` (m,) from the final state ``psi`` (1, 2**n) at ``phi``
        (and the kept run of a layered circuit, or the derivatives of a round trip)."""
        if type(kept) is np.ndarray:
            return self.to_theta(kept * g)
        if type(kept) is tuple:
            # one observable: g is the cotangent of its value (a scalar)
            kept, lam = kept
            dphi = sides.gradient(self.circuit, kept, lam, self.first)
            dphi *= g
            return self.to_theta(dphi)
        n = self.circuit.n_qubits
        w = np.reshape(np.asarray(g, dtype=float), (1, -1))
        if kept is not None:
            lam = np.empty_like(psi)
            apply_observables(psi, n, self.observables, w, lam, np.empty_like(psi))
            dphi = sides.gradient(self.circuit, kept, lam[0], self.first)
            return self.to_theta(dphi)

        def into(kets, out, scratch):
            apply_observables(kets, n, self.observables, w, out, scratch)

        if not lean_backward(self.circuit, 1):
            # the general backward pass (with its own guard and thread limit), from the state
            dphi = adjoint_gradient(self.circuit, phi, columns=self.want, observable_into=into,
                                    psi=psi, observable_scratch=self.scratch)[0]
        else:
            memory.guard(self.adjoint_bytes, self.adjoint_what)
            both = np.empty((2, psi.shape[1]), dtype=complex)
            both[0] = psi[0]
            if n >= LIMIT_QUBITS:
                with engine_threads(n):
                    dphi = small.backward(self.circuit, both, phi, self.want, observable_into=into)[0]
            else:
                dphi = small.backward(self.circuit, both, phi, self.want, observable_into=into)[0]
        return self.to_theta(dphi)


def lane_for(spec, single, shifts=None):
    """The `Lane` of an exact call described by ``spec`` (a checked `Spec` of kind "expect"),
    or None when the call does not fit one. ``shifts`` (``gradient="shift"``) computes the
    shift-rule Jacobian at gate angles (1, G) the way the general path's VJP does."""
    c = spec.circuit
    if (spec.kind != "expect" or spec.shots is not None or spec.readout is not None
            or spec.executor is not None or spec.memory is not None or not spec.fuse
            or spec.precision != "double" or c.n_inputs or c.has_noise
            or c.n_qubits > LANE_QUBITS or not small.eligible(c)
            or any(o.dense is not None for o in spec.observables)):
        return None
    n = c.n_qubits
    c.angle_map()
    _, b, idx, scale = c._cache[:4]
    scale = np.where([op.param is not None for op in c.parametric_operations], scale, 0.0) \
        if scale.size else scale
    # the guards of the general path (`guard_rows`, `adjoint_gradient`), bytes and text ready
    fwd = _guarded(n, peak_states(spec, 1), "evaluating 1 circuit(s)")
    scratch = observable_scratch(n, spec.observables)
    adj = _guarded(n, adjoint_states(1, scratch), "the adjoint method on 1 row(s)")
    want = frozenset(spec.columns)
    layered, first, kept = False, 0, (0, "")
    if sides.eligible(c):
        comp = sides.compiled(c)
        states = sides.kept_states(comp) + scratch
        if memory.state_bytes(n, states) <= sides.KEEP_BYTES:
            layered = True
            first = min((int(comp.layer[k]) for k in want), default=comp.n_layers)
            kept = _guarded(n, states, "the adjoint method on 1 row(s), states kept a layer")
    pieces = observable_pieces(n, spec.observables[0]) if layered and single else None
    trip = None
    if pieces is not None and n <= DENSE_QUBITS:
        pieces = _dense(pieces, n)
        if spec.gradient == "adjoint":
            trip = whole.round_trip_for(sides.compiled(c), pieces, first)
    return Lane(c, tuple(spec.observables), bool(single), spec.gradient == "adjoint",
                np.asarray(idx, dtype=np.intp), np.asarray(scale, dtype=float),
                np.asarray(b, dtype=float), c.n_params, want, spec.settings,
                *fwd, *adj, scratch, layered, first, *kept, pieces, shifts,
                idx.size == c.n_params and np.array_equal(idx, np.arange(idx.size))
                and np.all(scale == 1) and not np.any(b),
                set(np.asarray(idx)[np.asarray(scale) != 0].tolist()) == set(range(c.n_params)),
                lambda rows: peak_states(spec, rows), trip)


def _dense(pieces, n):
    """The matrix (N, N) of an observable from its pieces: column j is ``O e_j``."""
    eye = np.eye(2 ** n, dtype=complex)
    out = np.array([_applied(pieces, e) for e in eye]).T.copy()
    out.flags.writeable = False
    return out


def grown_shifts(spec, general):
    """``phi (1, G) -> (1, K, G)``: the shift-rule Jacobian of a lane's call at gate angles
    ``phi``, as the general path's VJP computes it (``general``, which it falls back to).

    Where the plan depends on no angle and its points are distinct circuits (generator
    gates: `qgradlib.rules.plans.distinct_points`) on a layered circuit, the points are
    ``phi + delta`` of the memoised plan and go straight to the growing batch
    (`qgradlib.engine.growing.grown_values`), the rows' memory guard and the ledger's count
    worked out once: the same circuits counted with the same purposes, the same engine, the
    plan's layout and the rows' dispatch not repeated every call.
    """
    c = spec.circuit
    opts = spec.rule_options()
    if (spec.splits != 1 or not sides.eligible(c)
            or not distinct_points(c, spec.columns, **opts)):
        return general
    fixed = fixed_plan(c, spec.columns, **opts)
    if fixed is None or fixed[0].shape[0] < 2:
        return general
    delta, coeff, names = fixed
    T = delta.shape[0]
    labels = Counter(names)
    nbytes, what = _guarded(c.n_qubits, peak_states(spec, T), f"evaluating {T} circuit(s)")

    def shifts(phi):
        memory.guard(nbytes, what)
        vals = grown_values(c, phi + delta, spec.observables)
        if vals is None:
            return general(phi)
        ledger.record(T, spec.settings, 0, labels)
        return np.einsum("gt,tk->kg", coeff, vals)[None]
    return shifts


def _applied(pieces, psi):
    """``O psi`` (N,) of a state (N,) from an observable's pieces (or its dense matrix)."""
    if type(pieces) is np.ndarray:
        return pieces @ psi
    flip, ph = pieces[0]
    lam = psi * ph if flip is None else np.take(psi, flip) * ph
    for flip, ph in pieces[1:]:
        lam += (psi if flip is None else np.take(psi, flip)) * ph
    return lam


def _guarded(n, states, what):
    """``(bytes, message)`` of `qgradlib.engine.memory.guard_states` for ``states`` states."""
    count = f"{int(states):,}" if float(states).is_integer() else f"{states:.3g}"
    return memory.state_bytes(n, states), f"{what} ({count} states of {n} qubits at once)"


def plain(theta, lane):
    """Whether ``theta`` suits the lane: a float64 array (n_params,) of finite values, given
    as it is or traced by one reverse-mode derivative (when the lane may be differentiated)."""
    x = theta
    if isinstance(x, Box):
        if not (lane.adjoint or lane.shifts is not None) or type(x._node) is not VJPNode:
            return False
        x = x._value
    return (type(x) is np.ndarray and x.dtype == np.float64 and x.shape == (lane.n_params,)
            and (lane.covered or bool(np.isfinite(x).all())))


@primitive
def lane_value(theta, lane, held):
    """The value(s) of ``lane``'s observables at ``theta`` (m,): a float for one observable,
    else (K,). ``held`` is ``[phi]``, the gate angles (1, G) of ``theta`` from
    `Lane.angles`, and whether the call is traced (the layered run then keeps its states);
    the final state and the kept run are appended to it for the VJP."""
    # a traced layered run keeps its states: the adjoint pass reads them, and a shift
    # plan's batch is born from them (`qgradlib.engine.sides.born_finals`)
    vals, psi, kept = lane.forward(held[0], keep=held[1])
    held[1:] = [psi, kept]
    return vals[0] if lane.single else vals


def _lane_value_vjp(ans, theta, lane, held):
    phi, psi, kept = held
    if not lane.adjoint:
        return _shift_vjp(lane, phi)

    def vjp(g):
        if isinstance(g, Box):
            # a derivative of this VJP in its cotangent: it is linear in g, with the Jacobian
            # (a plain array, theta being traced once) as the coefficients
            import autograd.numpy as anp
            K = len(lane.observables)
            J = np.stack([lane.gradient(phi, psi, np.eye(K)[k], kept) for k in range(K)])
            return anp.dot(anp.reshape(g, (K,)), J)
        return lane.gradient(phi, psi, g if type(kept) is tuple else np.reshape(g, (-1,)), kept)
    return vjp


def _shift_vjp(lane, phi):
    """The VJP of a shift-rule lane: ``g`` times the plan's Jacobian (built once, for all
    the VJP calls of a jacobian), then ``A.T``."""
    cache = []

    def vjp(g):
        if not cache:
            cache.append(lane.shifts(phi)[0])           # (K, G)
        J = cache[0]
        if isinstance(g, Box):
            import autograd.numpy as anp
            dphi = anp.dot(anp.reshape(g, (-1,)), J)
            return anp.dot(dphi, _map_transpose(lane))
        dphi = np.reshape(g, (-1,)) @ J
        return lane.to_theta(dphi)
    return vjp


def _map_transpose(lane):
    """A.T as a dense (G, m) array (for a traced cotangent)."""
    A = np.zeros((lane.idx.size, lane.n_params))
    A[np.arange(lane.idx.size), lane.idx] = lane.scale
    return A


defvjp(lane_value, _lane_value_vjp)
