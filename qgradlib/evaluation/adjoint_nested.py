"""The adjoint method inside autograd, to any order.

First derivatives: `adjoint_vjp` contracts the output cotangent into one weighted observable
and runs one backward pass (Jones and Gacon, arXiv:2009.02823 (2020)).

Higher derivatives: `adjoint_jacobian` (P, K, G) is an autograd primitive whose own VJP is a
shift rule. Each entry ``dE_k/dphi_g`` is, in every angle ``phi_j``, a trigonometric
polynomial with the frequencies of gate j (differentiating ``E`` in any angle keeps the
frequencies it has in ``phi_j``), so ``d/dphi_j J = sum_t c_t J(phi + s_t e_j)`` with gate j's
rule. The shifted Jacobians are computed by `adjoint_jacobian` again, as one batch, so a
Hessian (or a third derivative) is adjoint gradients at shifted angles. Gates without a
finite rule (Hamiltonian and function gates) are refused for nested use.

Examples
--------
>>> import numpy as np
>>> import qgradlib as qg
>>> from autograd import hessian
>>> c = qg.Circuit(1).ry(0)
>>> Z = qg.Observable({"Z": 1.0})
>>> h = hessian(lambda t: qg.expect(c, Z, t, gradient="adjoint"))(np.array([0.3]))
>>> bool(np.isclose(h[0, 0], -np.cos(0.3)))     # <Z> = cos(a)
True
"""
from __future__ import annotations

import weakref

import autograd.numpy as anp
import numpy as np
from autograd.extend import defvjp, primitive
from autograd.tracer import getval

from ..engine.adjoint import adjoint_gradient
from ..engine.kernels import state_dtype
from ..engine.measure import apply_observables, observable_scratch
from ..engine.statevector import apply_diagonal
from ..rules.plans import first_order_points

__all__ = ["adjoint_vjp", "adjoint_jacobian", "check_nested"]


def _weighted_observable(spec, g):
    """(psi, out, scratch) -> out = (sum_k g[row, k] O_k) psi row-wise, written in place;
    for probabilities O_k are projectors."""
    n = spec.circuit.n_qubits
    if spec.kind == "expect":
        def into(psi, out, scratch):
            apply_observables(psi, n, spec.observables, g, out, scratch)
        return into
    qubits = tuple(range(n)) if spec.qubits is None else spec.qubits

    def into(psi, out, scratch):
        out[...] = psi
        apply_diagonal(out, n, g.astype(complex), qubits)
    return into


# final states of a forward evaluation with gradient="adjoint" (and, for one exact observable,
# their O psi), held weakly by the Spec of that call until its VJP runs: the backward pass
# then skips its own forward run (and its application of the observable)
_forward_states: "weakref.WeakKeyDictionary" = weakref.WeakKeyDictionary()


def keep_states(spec, phi, kept, inverse):
    """Hold ``kept = [states, O psi or None]`` of the unique rows of ``phi`` for the VJP of
    this call (the list is emptied here: the held copy is the only reference)."""
    _forward_states[spec] = (np.asarray(phi, dtype=float).tobytes(), [kept.pop(0), kept.pop(0)], inverse)


def _take_states(spec, phi):
    """``[states, O psi or None]`` of the forward evaluation at ``phi`` (P, G), if they were
    kept, else None. Hand each on with ``pop`` so that no other reference keeps it alive."""
    held = _forward_states.pop(spec, None)
    if held is None or held[0] != phi.tobytes():
        return None
    _, kept, inverse = held
    del held
    if inverse.size == kept[0].shape[0] and np.array_equal(inverse, np.arange(inverse.size)):
        return kept
    return [None if a is None else a[inverse] for a in kept]


def adjoint_vjp(phi, spec, g):
    """sum_k g[p, k] dE_k/dphi[p, :] for raw arrays: one backward pass per row."""
    g = np.asarray(g, dtype=float)
    phi = np.asarray(phi, dtype=float)
    kept = _take_states(spec, phi) or [None, None]
    n = spec.circuit.n_qubits
    into, scratch = _weighted_observable(spec, g), 0.0
    if kept[1] is not None:
        # the forward pass kept O psi of its one observable: weighted here in place, the
        # backward pass starts from it (nothing to apply)
        kept[1] *= g[:, :1]
        into = None
    elif spec.kind == "expect":
        scratch = observable_scratch(n, spec.observables)
    # the states go straight into the call (popped, no local name), so the adjoint can free
    # them once copied into its stacked buffer
    return adjoint_gradient(spec.circuit, phi, columns=spec.columns, observable_into=into,
                            psi=kept.pop(0), observed=kept.pop(0), fuse=spec.fuse,
                            observable_scratch=scratch, dtype=state_dtype(spec.precision))


def check_nested(spec):
    """Refuse nested adjoint derivatives through gates that have no finite shift rule."""
    for j in spec.columns:
        gate = spec.circuit.parametric_operations[j].gate
        if gate.kind != "generator":
            raise ValueError(f"gradient='adjoint' gives second and higher derivatives through "
                             f"gates with a shift rule only; gate {gate.name!r} ({gate.kind}) has "
                             "none: use gradient='shift' for nested derivatives")


@primitive
def adjoint_jacobian(phi, spec):
    """dE_k/dphi_g for every row: shape (P, K, G), by K backward passes batched together."""
    phi = np.asarray(phi, dtype=float)
    P, G = phi.shape
    K = spec.n_out
    rows = np.repeat(phi, K, axis=0)
    g = np.tile(np.eye(K), (P, 1))
    return adjoint_vjp(rows, spec, g).reshape(P, K, G)


def _adjoint_jacobian_vjp(ans, phi, spec):
    held = {}

    def shifted():
        # autograd's jacobian (and hessian) calls this VJP once per output entry: the shifted
        # Jacobians do not depend on the cotangent, so they are computed once, not per call
        if "J" not in held:
            points, _, coeff, _ = first_order_points(spec.circuit, phi, None, spec.columns,
                                                     **spec.rule_options())
            P, G = np.shape(getval(phi))
            T = coeff.shape[1]
            held["J"] = None if T == 0 else (
                coeff, anp.reshape(adjoint_jacobian(points, spec), (P, T, spec.n_out, G)))
        return held["J"]

    def vjp(V):
        plan = shifted()
        if plan is None:
            return anp.zeros(np.shape(getval(phi)))
        coeff, J = plan
        return anp.einsum("pkg,jt,ptkg->pj", V, coeff, J)
    return vjp


defvjp(adjoint_jacobian, _adjoint_jacobian_vjp)
