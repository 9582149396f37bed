"""iCANS: gradient descent that picks the shots of each gradient component as it goes.

Kübler, Arrasmith, Cincio and Coles, "An adaptive optimizer for measurement-frugal
variational algorithms", Quantum 4, 263 (2020), Algorithm 1 (iCANS1). With learning rate
``alpha`` below ``2 / L`` (``L`` a Lipschitz constant of the gradient), each step takes a
shift-rule gradient estimate ``g_i`` with ``s_i`` shots per shifted circuit of parameter
``i`` and the per-shot variance ``S_i`` of that estimate, updates ``theta_i -= alpha g_i``
and exponential moving averages (decay ``mu``, bias-corrected by ``1 - mu**k``)

    xi_i  <- mu xi_i  + (1 - mu) S_i          chi_i <- mu chi_i + (1 - mu) g_i

and chooses the next shots as the number that maximises the expected gain per shot:

    s_i = ceil( 2 L alpha / (2 - L alpha) * xi_i / (chi_i**2 + b mu**k) )
    gamma_i = ((alpha - L alpha**2 / 2) chi_i**2 - L alpha**2 xi_i / (2 s_i)) / s_i

clipped to ``[s_min, s_{argmax gamma}]``: no component gets more shots than the one whose
expected gain per shot is largest. ``b`` keeps the shots finite while the mean gradient is
still unknown.

Examples
--------
>>> import numpy as np
>>> s = next_shots(xi=np.array([1.0, 1.0]), chi=np.array([0.5, 0.05]), k=10, rate=0.5,
...                lipschitz=1.0, mu=0.99, bias=1e-6, min_shots=2)
>>> s.tolist()       # the second asks 267, capped by the first (the best gain per shot)
[3, 3]
"""
from __future__ import annotations

import numpy as np

__all__ = ["next_shots", "gains"]


def gains(shots, xi, chi, rate, lipschitz):
    """Expected gain per shot ``gamma_i`` of iCANS (Kübler et al. 2020, eq. (12))."""
    s = np.asarray(shots, dtype=float)
    a, L = rate, lipschitz
    return ((a - L * a ** 2 / 2) * chi ** 2 - L * a ** 2 * xi / (2 * s)) / s


def next_shots(xi, chi, k, *, rate, lipschitz, mu, bias, min_shots):
    """The shots per shifted circuit of each component for the next step.

    ``xi`` and ``chi`` are the bias-corrected moving averages of the per-shot variances and
    of the gradient after ``k`` steps.
    """
    xi = np.asarray(xi, dtype=float)
    chi = np.asarray(chi, dtype=float)
    a, L = rate, lipschitz
    raw = 2 * L * a / (2 - L * a) * xi / (chi ** 2 + bias * mu ** k)
    s = np.ceil(np.minimum(raw, 1e12))
    cap = s[int(np.argmax(gains(np.maximum(s, 1.0), xi, chi, a, L)))]
    return np.clip(s, min_shots, max(cap, min_shots)).astype(int)


def run(estimate_gradient, exact_value, x, steps, trace, o):
    """The iCANS loop; ``estimate_gradient(x, shots per parameter) -> (g, standard errors)``.

    Returns ``(x, value, gradient, steps, status, shots)``, ``shots`` the per-parameter shots
    of the last gradient estimate.

    Stops after ``steps`` updates, or at the first point where the ledger's shots have
    reached ``budget`` (status 3; the last step may overshoot it by its own shots). The
    history's cost is ``exact_value(x)``, the simulator's exact cost: iCANS itself measures
    no cost values, and these are outside the ledger.
    """
    m = x.size
    a, L, mu, b = o["rate"], o["lipschitz"], o["mu"], o["bias"]
    s = np.full(m, int(o["min_shots"]))
    xi, chi = np.zeros(m), np.zeros(m)
    x = x.copy()
    k = 0
    g = np.zeros(m)
    while True:
        if k > 0 and o["budget"] is not None and trace.book.shots >= o["budget"]:
            v = exact_value(x)
            trace.record(v, float(np.linalg.norm(g)))
            trace.advance(x, v, k, float(np.linalg.norm(g)))
            return x, v, g, k, 3, s
        g, se = estimate_gradient(x, s)
        gn = float(np.linalg.norm(g))
        v = exact_value(x)
        trace.record(v, gn)
        if k > 0 and trace.advance(x, v, k, gn):
            return x, v, g, k, 2, s
        if k == steps:
            return x, v, g, k, 1, s
        x = x - a * g
        k += 1
        per_shot = se ** 2 * s            # the estimate's variance is S_i / s_i
        xi = mu * xi + (1 - mu) * per_shot
        chi = mu * chi + (1 - mu) * g
        s = next_shots(xi / (1 - mu ** k), chi / (1 - mu ** k), k, rate=a, lipschitz=L, mu=mu,
                       bias=b, min_shots=o["min_shots"])
