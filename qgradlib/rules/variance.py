"""Shift rules and shot splits chosen for the least estimator variance.

A rule ``f'(a) = sum_k c_k f(a + s_k)`` estimated with ``n_k`` shots on term ``k`` has
variance ``sum_k c_k**2 sigma_k**2 / n_k``, with ``sigma_k**2`` the single-shot variance of
the observable in the shifted state (at most ``||O||**2``). For a budget of ``N`` shots:

- an even split (``n_k = N / T`` for T terms) gives ``T sum_k c_k**2 sigma_k**2 / N``;
- a split in proportion to ``|c_k| sigma_k`` is optimal (a Lagrange multiplier on
  ``sum_k n_k = N``) and gives ``(sum_k |c_k| sigma_k)**2 / N``. Without knowledge of the
  ``sigma_k`` the split is in proportion to ``|c_k|``, and ``(sum_k |c_k|)**2 ||O||**2 / N``
  bounds the variance.

For one frequency the two-term rule at shift pi/2 has the least ``sum |c_k|``. For several,
different shift sets give different coefficients (Wierichs, Izaac, Wang and Lin, Quantum 6,
677 (2022), sec. 4 and app. C): the 2R-term equidistant rule, the general rule on the exact
frequency set with shifts chosen for the least 1-norm, or an equidistant rule on the
multiples of a base that contain the set (more terms, sometimes a smaller norm).
`least_variance_rule` compares them by the variance bound of the split in use.

Examples
--------
>>> import numpy as np
>>> rule = ShiftRule.equidistant(0.5, 2)                 # a controlled rotation's rule
>>> round(rule_variance(rule, "even"), 6), round(rule_variance(rule, "proportional"), 6)
(1.5, 1.0)
>>> split_shots(rule.coefficients, 400).tolist()       # in proportion to |c|
[169, 31, 31, 169]
"""
from __future__ import annotations

from functools import lru_cache

import numpy as np

from .shift_rules import ShiftRule, _general_shifts, rule_for_frequencies

__all__ = ["SPLITS", "candidate_rules", "rule_variance", "least_variance_rule", "split_shots"]

SPLITS = ("even", "proportional")


def _check_split(split):
    if split not in SPLITS:
        raise ValueError(f"the shot split must be one of {SPLITS}; got {split!r}")
    return split


def rule_variance(rule, split="proportional", sigma=None) -> float:
    """Estimator variance of ``rule`` times the total shots, for the given split.

    ``sigma`` (shape (T,)) holds the single-shot standard deviations of the terms; by
    default 1, which makes the result the bound for an observable of norm 1.
    """
    _check_split(split)
    c = np.abs(np.asarray(rule.coefficients, dtype=float))
    s = np.ones_like(c) if sigma is None else np.asarray(sigma, dtype=float).reshape(c.shape)
    if split == "even":
        return float(c.size * np.sum(c ** 2 * s ** 2))
    return float(np.sum(c * s) ** 2)


def candidate_rules(frequencies) -> dict:
    """The exact first-derivative rules available for a frequency set, by name."""
    w = np.sort(np.asarray(frequencies, dtype=float).reshape(-1))
    if w.size == 0:
        raise ValueError("a gate without frequencies has no derivative rule")
    out = {"default": rule_for_frequencies(w)}
    if w.size == 1:
        return out
    out["general"] = ShiftRule.general(w)
    out["general, even split"] = _even_split_rule(tuple(np.round(w, 12)))
    base = w[0]
    ratio = w / base
    # the smallest base whose multiples hold the set: the set's least frequency divided by
    # a small integer, when all ratios become integers
    for d in range(1, 5):
        r = ratio * d
        if np.allclose(r, np.round(r), rtol=0, atol=1e-8):
            R = int(round(r[-1]))
            # with d = 1 and R = len(w) the set is w0..R w0, whose rule is the default already
            if (d > 1 or R > w.size) and R <= 16:
                out[f"equidistant R={R}"] = ShiftRule.equidistant(base / d, R)
            break
    return out


def _even_split_rule(w: tuple) -> ShiftRule:
    """The general rule on ``w`` with shifts chosen for the least even-split variance.

    Like `ShiftRule.general`, but Nelder-Mead minimises ``T sum c_k**2`` instead of
    ``sum |c_k|``: with equal shots per term, flatter coefficients are worth more than a
    small 1-norm.
    """
    x, c = _general_shifts(w, "even")
    return ShiftRule(np.concatenate([x, -x]), np.concatenate([c, -c]) / 2, tuple(w))


@lru_cache(maxsize=256)
def _least(freqs: tuple, split: str):
    rules = candidate_rules(np.array(freqs))
    v = {k: rule_variance(r, split) for k, r in rules.items()}
    low = min(v.values())
    # among rules within 1e-6 of the least bound: the fewest terms, then the default
    close = [k for k in rules if v[k] <= low * (1 + 1e-6)]
    name = min(close, key=lambda k: (rules[k].n_terms, k != "default"))
    return name, rules[name]


def least_variance_rule(frequencies, split="proportional"):
    """``(name, rule)``: the candidate rule with the least variance bound for ``split``."""
    _check_split(split)
    w = np.sort(np.asarray(frequencies, dtype=float).reshape(-1))
    return _least(tuple(np.round(w, 12)), split)


def split_shots(coefficients, total, minimum=2) -> np.ndarray:
    """Integer shots per term in proportion to ``|coefficients|``, summing to ``total``.

    Every term gets at least ``minimum`` (a sample variance needs two); the rest goes by
    largest remainders, so the sum is exact.
    """
    c = np.abs(np.asarray(coefficients, dtype=float).reshape(-1))
    total = int(total)
    if c.size == 0:
        return np.zeros(0, dtype=int)
    if total < minimum * c.size:
        raise ValueError(f"{total} shots cannot give {c.size} terms at least {minimum} each")
    if not np.any(c > 0):
        c = np.ones_like(c)
    free = total - minimum * c.size
    share = free * c / c.sum()
    n = np.floor(share).astype(int)
    left = free - int(n.sum())
    order = np.argsort(-(share - n), kind="stable")
    n[order[:left]] += 1
    return n + minimum
