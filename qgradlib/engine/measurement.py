"""Measurement settings, shot allocation, readout error and finite-shot estimates.

A device measures Pauli terms by rotating each qubit into the eigenbasis of its letter and
reading out bits in the computational basis. Terms whose letters agree on every qubit where
both act (qubit-wise commuting) share one setting. Sampling a setting with ``s`` shots is
drawing basis-state counts from a multinomial over the rotated state's probabilities; each
shot gives the setting's observable value ``g(b) = sum_t c_t (-1)**parity(b on supp t)``, so
the estimate is the mean of ``g`` and its standard error ``sqrt(var(g) / s)`` (sample
variance, ``ddof=1``). Settings are independent: their variances add.

Shot allocation over the settings of one circuit (``shots`` is the *mean* number per
setting, so the total per circuit is ``shots * n_settings`` either way):

- ``"uniform"``: every setting gets ``shots``;
- ``"weighted"``: every setting first gets 2 shots (so it has a sample variance), the rest
  is split in proportion to the 1-norm of the setting's coefficients. The variance
  ``sum_g sigma_g**2 / s_g`` at fixed total is least for ``s_g ~ sigma_g`` (for single
  terms ``|c| sigma``: Wecker, Hastings and Troyer, Phys. Rev. A 92, 042303 (2015)); the
  1-norm bounds ``sigma_g`` without knowing the state.

Readout error flips each measured bit of qubit ``q`` with probability ``e_q``; it is applied
exactly to the outcome distribution before sampling (the same law as flipping sampled bits).

Examples
--------
>>> import qgradlib as qg
>>> H = qg.Observable({"ZZI": 1.0, "IZZ": 1.0, "XII": 0.5, "IXI": 0.5})
>>> [s.basis for s in measurement_settings(H)]
['ZZZ', 'XXI']
>>> allocate([2.0, 1.0], 100, "weighted").tolist()
[133, 67]
"""
from __future__ import annotations

from dataclasses import dataclass
from numbers import Real

import numpy as np

from .density import _signs, apply_unitary, density_probabilities
from .statevector import apply_matrix
from ..circuits.observables import Observable

__all__ = ["measure_scratch", "probability_scratch", "Setting", "MeasurementPlan", "measurement_settings", "n_settings", "plan_measurements",
           "allocate", "apply_readout", "check_readout", "measure", "outcome_distribution", "make_rng",
           "PointSeeds", "point_generators", "ALLOCATIONS"]

ALLOCATIONS = ("uniform", "weighted")

_H = np.array([[1, 1], [1, -1]], dtype=complex) / np.sqrt(2)
# H S^dagger maps the Y eigenbasis to the computational basis
_ROT = {"X": _H, "Y": _H @ np.diag([1, -1j])}


@dataclass(frozen=True)
class Setting:
    """One measurement setting: a basis letter per qubit and the terms it measures."""

    basis: str
    terms: tuple  # ((word, coefficient), ...)


def measurement_settings(observable: Observable) -> list:
    """Group the Pauli terms into qubit-wise commuting settings (greedy, largest first).

    The identity term needs no setting. A dense part, if any, is not included here: it is
    measured in its own eigenbasis (one more setting).

    Examples
    --------
    >>> import qgradlib as qg
    >>> from qgradlib.shots import measurement_settings
    >>> H = qg.Observable({"ZZ": 1.0, "ZI": 0.5, "XX": 0.2, "II": 3.0})
    >>> len(measurement_settings(H))          # all-Z for ZZ and ZI, all-X for XX
    2
    """
    groups = []  # [basis list, terms]
    items = sorted(observable.terms.items(), key=lambda kv: -abs(kv[1]))
    for word, c in items:
        if set(word) == {"I"}:
            continue
        for basis, terms in groups:
            if all(b == "I" or w == "I" or b == w for b, w in zip(basis, word)):
                for q, w in enumerate(word):
                    if w != "I":
                        basis[q] = w
                terms.append((word, c))
                break
        else:
            groups.append([list(word), [(word, c)]])
    return [Setting("".join(b), tuple(t)) for b, t in groups]


def n_settings(observable: Observable) -> int:
    """Measurement settings a device needs for one estimate of ``observable``.

    Examples
    --------
    >>> import qgradlib as qg
    >>> qg.shots.n_settings(qg.Observable({"ZZ": 1.0, "XI": 0.5, "IY": 0.1}))
    2
    """
    return max(1, len(measurement_settings(observable)) + (observable.dense is not None))


@dataclass(frozen=True, eq=False)
class MeasurementPlan:
    """How K observables are measured together on one circuit.

    The Pauli words of all observables are grouped into shared settings; each observable's
    estimate is read from the same counts. A dense part is measured in its own eigenbasis.

    Attributes
    ----------
    settings : tuple of Setting
        Over the union of words; a term's coefficient is its summed ``|c|`` (the weight).
    coefficients : tuple of ndarray
        Per setting, (K, T) coefficients of each observable on the setting's words.
    constants : ndarray
        (K,) identity coefficients (no shots needed).
    dense : tuple
        ``(k, eigenvalues, eigenvectors)`` for each observable ``k`` with a dense part.
    """

    n_qubits: int
    settings: tuple
    coefficients: tuple
    constants: np.ndarray
    dense: tuple

    @property
    def n_settings(self) -> int:
        return max(1, len(self.settings) + len(self.dense))

    @property
    def weights(self) -> np.ndarray:
        """Coefficient 1-norm of every setting (dense settings: largest |eigenvalue|)."""
        w = [float(np.abs(c).sum()) for c in self.coefficients]
        w += [float(np.abs(ev).max()) for _, ev, _ in self.dense]
        return np.array(w)


def plan_measurements(observables) -> MeasurementPlan:
    """The shared measurement plan of a sequence of observables on the same qubits."""
    obs = list(observables)
    n = obs[0].n_qubits
    weight = {}
    for o in obs:
        for w, c in o.terms.items():
            weight[w] = weight.get(w, 0.0) + abs(c)
    settings = measurement_settings(Observable(weight)) if weight else []
    coeffs = tuple(np.array([[o.terms.get(w, 0.0) for w, _ in s.terms] for o in obs]) for s in settings)
    const = np.array([o.terms.get("I" * n, 0.0) for o in obs])
    dense = tuple((k, *np.linalg.eigh(o.dense)) for k, o in enumerate(obs) if o.dense is not None)
    return MeasurementPlan(n, tuple(settings), coeffs, const, dense)


def allocate(weights, shots: int, allocation: str = "uniform") -> np.ndarray:
    """Shots per setting: ``shots`` each (uniform), or ``shots * len(weights)`` in total
    split by ``weights`` after a floor of 2 each (weighted; largest remainders get the spare).

    Examples
    --------
    >>> from qgradlib.shots import allocate
    >>> allocate([3.0, 1.0], 10).tolist(), allocate([3.0, 1.0], 10, "weighted").tolist()
    ([10, 10], [14, 6])
    """
    w = np.asarray(weights, dtype=float)
    S = w.size
    if allocation == "uniform" or S <= 1 or not np.any(w > 0):
        return np.full(S, shots, dtype=np.int64)
    floor = min(2, shots)
    extra = (shots - floor) * S
    ideal = extra * w / w.sum()
    out = np.floor(ideal).astype(np.int64)
    spare = extra - int(out.sum())
    out[np.argsort(-(ideal - out), kind="stable")[:spare]] += 1
    return out + floor


def make_rng(seed):
    """A numpy Generator from an int, a Generator or None."""
    if isinstance(seed, np.random.Generator):
        return seed
    if seed is None:
        return np.random.default_rng()
    if isinstance(seed, (int, np.integer)) and not isinstance(seed, (bool, np.bool_)):
        if seed < 0:
            raise ValueError(f"seed must be a non-negative int (or a numpy.random.Generator); got {seed!r}")
        return np.random.default_rng(int(seed))
    raise TypeError(f"seed must be an int, a numpy.random.Generator or None; got {seed!r}")


class PointSeeds:
    """Independent random streams for consecutive evaluation points.

    Point ``i`` of a call draws its shots from ``numpy.random.default_rng([base, i])``, so
    its numbers depend on ``base`` (one draw from the user's generator per call) and on its
    place in the call, not on which process samples it or in what chunks: serial and
    distributed runs agree exactly. `take` hands out the streams of the next points in
    order, which is how the engine walks through a batch.

    Examples
    --------
    >>> seeds = PointSeeds(7, start=2)
    >>> a = seeds.take(2)[1].random()           # point 3
    >>> bool(a == np.random.default_rng([7, 3]).random())
    True
    """

    def __init__(self, base: int, start: int = 0):
        self.base = int(base)
        self.next = int(start)

    def take(self, count: int) -> list:
        out = [np.random.default_rng([self.base, i]) for i in range(self.next, self.next + count)]
        self.next += count
        return out


def point_generators(rng, count: int):
    """A list of ``count`` per-point generators from `PointSeeds`; a Generator as it is."""
    return rng.take(count) if isinstance(rng, PointSeeds) else rng


def check_readout(readout, n: int):
    """Validate ``readout``: a float or n floats in [0, 0.5]; returns a tuple of n floats or None."""
    if readout is None:
        return None
    if isinstance(readout, (Real, np.floating, np.integer)) and not isinstance(readout, (bool, np.bool_)):
        vals = [readout] * n
    else:
        if isinstance(readout, (str, bytes)):
            raise TypeError(f"readout must be a flip probability or a sequence of one per qubit; got {readout!r}")
        try:
            vals = list(readout)
        except TypeError:
            raise TypeError("readout must be a flip probability or a sequence of one per qubit; "
                            f"got {type(readout).__name__}") from None
        if len(vals) != n:
            raise ValueError(f"readout must give one flip probability per qubit ({n}); got {len(vals)}")
    out = []
    for v in vals:
        if isinstance(v, (bool, np.bool_)) or not isinstance(v, (Real, np.floating, np.integer)):
            raise TypeError(f"readout flip probabilities must be real numbers; got {v!r}")
        if not 0.0 <= float(v) <= 0.5:
            raise ValueError(f"readout flip probabilities must lie in [0, 0.5]; got {v!r}")
        out.append(float(v))
    return tuple(out)


def apply_readout(p, n: int, flips) -> np.ndarray:
    """Outcome distributions (..., 2**n) after bit ``q`` flips with probability ``flips[q]``."""
    if flips is None:
        return p
    p = np.asarray(p, dtype=float)
    lead = p.shape[:-1]
    t = p.reshape(lead + (2,) * n)
    for q, e in enumerate(flips):
        if e:
            t = (1.0 - e) * t + e * np.flip(t, axis=len(lead) + q)
    return t.reshape(p.shape)


def outcome_distribution(states, n: int, basis: str | None = None, *, density=False) -> np.ndarray:
    """Probabilities (B, 2**n) of reading ``states`` (states, or vectorised rho) in ``basis``."""
    r = states
    for q, b in enumerate(basis or ""):
        if b in _ROT:
            r = apply_unitary(r, n, _ROT[b], (q,)) if density else apply_matrix(r, n, _ROT[b], (q,))
    p = density_probabilities(r, n) if density else np.abs(r) ** 2
    p = np.clip(p, 0.0, None)
    return p / p.sum(axis=1, keepdims=True)


def _draw(p, values, shots, rng):
    """Means (B, K) and variances of the means (B, K) of ``values`` (K, D), outcomes from p (B, D)."""
    if shots is None:
        return p @ values.T, np.zeros((p.shape[0], values.shape[0]))
    if isinstance(rng, list):   # one generator per point (PointSeeds)
        counts = np.array([g.multinomial(shots, row) for g, row in zip(rng, p)],
                          dtype=np.int64).reshape(p.shape)
    else:
        counts = rng.multinomial(shots, p)
    mean = counts @ values.T / shots
    if shots < 2:
        return mean, np.full(mean.shape, np.inf)
    # sample variance (ddof=1) from the first two moments of the counts
    var = np.maximum(counts @ (values ** 2).T - shots * mean ** 2, 0.0) / (shots - 1)
    return mean, var / shots


def probability_scratch(density: bool = False) -> float:
    """States a row that `outcome_distribution` (computational basis), `apply_readout` and a
    marginal allocate beyond the states: half-size float copies (``|psi|**2``, clipped,
    normalised, flipped, marginalised), 3 states at most; for density matrices they are
    vectors of 2**n, nothing next to a 4**n matrix. The memory guard's estimate."""
    return 0.0 if density else 3.0


def measure_scratch(n: int, plan: MeasurementPlan, density: bool = False) -> float:
    """States (density matrices with ``density``) a row that `measure` allocates beyond its
    input: where a setting rotates qubits, the rotated copy (and, for rho, `apply_unitary`'s
    two products); the probabilities with the temporaries of their sign vectors (2.5), and
    the sign table of the widest setting (a state a term: each vector sits in a list and in
    its stack). For rho the vectors are 2**n long, nothing next to a 4**n matrix.
    The memory guard's estimate (`qgradlib.engine.memory`): change it with `measure`."""
    rotates = bool(plan.dense) or any(b in "XY" for s in plan.settings for b in s.basis)
    terms = max((len(s.terms) for s in plan.settings), default=0) + len(plan.dense)
    if density:
        return (3.0 if rotates else 0.0) + (2.5 + terms) * 2.0 ** -n
    return (1.0 if rotates else 0.0) + 2.5 + terms


def measure(states, plan: MeasurementPlan, shots, rng, *, density=False, allocation="uniform",
            readout=None):
    """Estimates (B, K) and their variances (B, K) for a batch of states or vectorised rho.

    ``shots=None`` gives the exact values under the readout model (variance 0). ``rng`` is a
    Generator, or a list of one Generator per state (each state's shots from its own stream).
    """
    n = plan.n_qubits
    B = states.shape[0]
    mean = np.tile(plan.constants.astype(float), (B, 1))
    var = np.zeros_like(mean)
    per = [None] * plan.n_settings if shots is None else allocate(plan.weights, shots, allocation)
    for g, setting in enumerate(plan.settings):
        p = apply_readout(outcome_distribution(states, n, setting.basis, density=density), n, readout)
        signs = np.stack([_signs(n, [q for q, w in enumerate(word) if w != "I"])
                          for word, _ in setting.terms])
        m, v = _draw(p, plan.coefficients[g] @ signs, per[g], rng)
        mean += m
        var += v
    for i, (k, ev, vec) in enumerate(plan.dense):
        if density:
            D = 2 ** n
            p = np.real(np.einsum("ia,bij,ja->ba", vec.conj(), states.reshape(B, D, D), vec))
        else:
            p = np.abs(states @ vec.conj()) ** 2
        p = np.clip(p, 0.0, None)
        m, v = _draw(p / p.sum(axis=1, keepdims=True), ev[None, :], per[len(plan.settings) + i], rng)
        mean[:, k] += m[:, 0]
        var[:, k] += v[:, 0]
    return mean, var
