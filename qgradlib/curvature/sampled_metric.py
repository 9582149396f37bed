"""The metric tensor measured with shots, as a device would estimate it.

Layerwise and diagonal structures (Stokes, Izaac, Killoran and Carleo, Quantum 4, 269 (2020)):
the block of a layer is the covariance ``Re<K_a K_b> - <K_a><K_b>`` of its generators in the
state before the layer. A device runs the circuit up to the layer in each measurement setting
of the layer and reads every Pauli word of the ``K_a`` and of the products ``K_a K_b`` from
the bits of one shot. With ``N`` shots of a setting, the estimate

    g_ab = mean(K_a K_b) - (m_a m_b - Cov(m_a, m_b)),

where ``m_a`` is the estimate of ``<K_a>`` (summed over the settings that carry its words)
and ``Cov`` the unbiased (ddof = 1) estimate of the covariance of the two means, is unbiased:
``E[m_a m_b] = <K_a><K_b> + Cov(m_a, m_b)``. Its standard error is the delta-method one, from
the per-shot influence ``K_a K_b - m_b K_a - m_a K_b`` of every setting.

A Hamiltonian or function gate is a layer of its own; its effective generator
``K = i (dU/da) U^dagger`` is measured in its eigenbasis in the state after the gate, and its
variance is estimated by the sample variance (ddof = 1), which is unbiased.

Full structure (Mari, Bromley and Killoran, Phys. Rev. A 103, 012405 (2021)): the metric is
``-1/2`` times the Hessian of the fidelity ``F(x) = |<psi(phi)|psi(phi + x)>|^2`` at 0. Each
point ``x`` of the Hessian's shift plan is the overlap circuit ``U(phi)^dagger U(phi + x)``,
and ``F(x)`` is its probability of reading all zeros: with ``N`` shots the frequency of that
outcome is an unbiased estimate with variance ``F (1 - F) / N``. The metric is a fixed linear
combination of those frequencies, so it is unbiased and its variance is exact.

These are simulations of what a device would report: the shots are drawn from the simulated
state's exact probabilities.
"""
from __future__ import annotations

import numpy as np

from ..engine.density import _signs
from ..engine.measurement import outcome_distribution
from ..engine.statevector import apply_matrix, run
from ..rules.higher_plans import tensor

__all__ = ["layer_estimate", "effective_estimate", "overlap_estimate"]


def _support(word):
    return [q for q, w in enumerate(word) if w != "I"]


def _draw(p, shots, rng):
    p = np.clip(np.asarray(p, dtype=float), 0.0, None)
    return rng.multinomial(shots, p / p.sum()).astype(float)


def _mean_cov(counts, u, v, shots):
    """Sample means of per-outcome values ``u`` and ``v`` (..., X) and the unbiased covariance
    of the two means."""
    mu, mv = u @ counts / shots, v @ counts / shots
    cov = ((u * v) @ counts - shots * mu * mv) / (shots - 1) / shots
    return mu, mv, cov


def layer_estimate(psi, n, terms, products, settings, Ac, shots, rng):
    """One layer's block of the metric in theta, and its variance, from sampled settings.

    Parameters
    ----------
    psi : ndarray (2**n,)
        The state before the layer.
    terms : list of dict
        Per column of the layer, the traceless Pauli part of its generator ``{word: c}``.
    products : dict
        ``(a, b) -> {word: c}``, the real (Hermitian) part of ``K_a K_b`` for the pairs
        estimated (``a <= b``; only ``a == b`` for the diagonal structure); identity words
        allowed (they need no shot).
    settings : sequence of Setting
        The layer's measurement settings; every word of ``terms`` and ``products`` other than
        the identity is among the terms of exactly one of them.
    Ac : ndarray (L, m)
        The rows of the angle map of the layer's columns.

    Returns
    -------
    value, variance : ndarray (m, m)
    """
    L = len(terms)
    where = {w: s for s, st in enumerate(settings) for w, _ in st.terms}
    X = 2 ** n
    # per setting: per-outcome values of each K_a's words read there, and of each product's
    a_vals = np.zeros((len(settings), L, X))
    b_vals = {ab: np.zeros((len(settings), X)) for ab in products}
    const = {ab: 0.0 for ab in products}
    signs = {}

    def sign(word):
        if word not in signs:
            signs[word] = _signs(n, _support(word))
        return signs[word]

    for a, t in enumerate(terms):
        for w, c in t.items():
            a_vals[where[w], a] += c * sign(w)
    for ab, t in products.items():
        for w, c in t.items():
            if set(w) == {"I"}:
                const[ab] += c
            else:
                b_vals[ab][where[w]] += c * sign(w)
    counts = [_draw(outcome_distribution(psi[None], n, st.basis)[0], shots, rng) for st in settings]
    means = np.array([a_vals[s] @ counts[s] / shots for s in range(len(settings))])   # (S, L)
    m = means.sum(axis=0)
    g = np.zeros((L, L))
    infl = np.zeros((len(settings), L, L, X))   # per-shot influence of each entry
    for (a, b), bv in b_vals.items():
        second = const[(a, b)] + sum(bv[s] @ counts[s] / shots for s in range(len(settings)))
        cov = sum(_mean_cov(counts[s], a_vals[s, a], a_vals[s, b], shots)[2]
                  for s in range(len(settings)))
        g[a, b] = g[b, a] = second - (m[a] * m[b] - cov)
        f = bv - m[b] * a_vals[:, a] - m[a] * a_vals[:, b]
        infl[:, a, b] = infl[:, b, a] = f
    value = Ac.T @ g @ Ac
    # the theta entries' per-shot influence, and its sample variance over each setting's shots
    mapped = np.einsum("ik,sijx,jl->sklx", Ac, infl, Ac)
    var = np.zeros_like(value)
    for s in range(len(settings)):
        mu = mapped[s] @ counts[s] / shots
        var += ((mapped[s] ** 2) @ counts[s] - shots * mu ** 2) / (shots - 1) / shots
    return value, np.maximum(var, 0.0)


def effective_estimate(after, n, K, qubits, shots, rng):
    """Variance of the effective generator ``K`` (on ``qubits``) in the state ``after``:
    the sample variance of its eigenvalues read in its eigenbasis, and the variance of that
    estimate (delta method)."""
    ev, V = np.linalg.eigh(K)
    rotated = apply_matrix(after[None], n, V.conj().T, tuple(qubits))[0]
    idx = np.zeros(2 ** n, dtype=int)
    j = np.arange(2 ** n)
    for q in qubits:
        idx = 2 * idx + ((j >> (n - 1 - q)) & 1)
    values = ev[idx]
    counts = _draw(np.abs(rotated) ** 2, shots, rng)
    mean = values @ counts / shots
    dev2 = (values - mean) ** 2
    s2 = dev2 @ counts / (shots - 1)
    m2 = dev2 @ counts / shots
    var = max((dev2 ** 2 @ counts / shots - m2 ** 2) / shots, 0.0)
    return s2, var


def overlap_estimate(circuit, phi, plan, origin, columns, A, shots, rng):
    """The full metric in theta from sampled overlap circuits, and its variance (exact for
    the linear estimate, with the frequencies' variance estimated as p (1 - p) / (N - 1))."""
    n = circuit.n_qubits
    P = plan.n_points
    keep = [p for p in range(P) if p not in set(origin)]
    freq = np.ones(P)
    var = np.zeros(P)
    if keep:
        psi0 = run(circuit, phi[None])[0]
        rows = max(1, min(len(keep), 2 ** 24 // (16 * 2 ** n)))
        for lo in range(0, len(keep), rows):
            part = keep[lo:lo + rows]
            ins = None if plan.inserts is None else [plan.inserts[p] for p in part]
            states = run(circuit, phi[None, :] + plan.deltas[part], ins)
            fid = np.clip(np.abs(states @ psi0.conj()) ** 2, 0.0, 1.0)
            hits = rng.binomial(shots, fid)
            f = hits / shots
            freq[part] = f
            var[part] = f * (1.0 - f) / (shots - 1)
    W = -0.5 * tensor(plan, np.eye(P), columns, A, 2)       # (P, m, m): weight of each point
    value = np.tensordot(freq, W, axes=1)
    return value, np.tensordot(var, W ** 2, axes=1)
