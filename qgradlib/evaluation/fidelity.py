"""Fidelity kernels of a feature circuit: ``k(x, y) = |<phi(x)|phi(y)>|**2``.

A feature circuit reads a data point through its ``input=`` gates and prepares ``|phi(x)>``
from ``|0...0>``; the fidelity kernel between two points is the overlap of their feature
states (Havlicek et al., Nature 567, 209 (2019); Schuld and Killoran, Phys. Rev. Lett. 122,
040504 (2019)).

- exactly, on the simulator: every feature state is prepared once, and the kernel matrix is
  the squared modulus of one complex matrix product of the stacked states;
- with ``shots``, as a device would estimate it: the compute-uncompute circuit
  ``U(y)^dagger U(x)`` (`qgradlib.circuits.transform.overlap_circuit`) is simulated for every
  pair, in batches, and ``shots`` readouts of it are drawn; the kernel entry is the frequency
  of the all-zero outcome, ``Binomial(shots, p) / shots`` with ``p`` that circuit's all-zero
  probability. This costs one circuit of twice the depth per entry, as on a device.

The ledger counts what a device would run: one compute-uncompute circuit per entry, i.e.
``N (N - 1) / 2`` for the symmetric Gram matrix of one data set (the diagonal is 1 and needs
none, the lower triangle mirrors the upper) and ``N M`` for ``X`` against ``Y``; with shots,
``shots`` readouts each. Simulated kernel values are not device measurements.

Examples
--------
>>> import numpy as np
>>> import qgradlib as qg
>>> feature = qg.Circuit(1).ry(0, input=0)
>>> K = qg.kernel_matrix(feature, np.array([[0.0], [np.pi / 2], [np.pi]]))
>>> K.round(6).tolist()                    # |<phi(x)|phi(y)>|^2 = cos((x - y) / 2)^2
[[1.0, 0.5, 0.0], [0.5, 1.0, 0.5], [0.0, 0.5, 1.0]]
>>> with qg.Ledger() as book:
...     _ = qg.kernel_matrix(feature, np.zeros((4, 1)), shots=100, seed=0)
>>> book.circuits, book.shots                # 4 * 3 / 2 compute-uncompute circuits
(6, 600)
"""
from __future__ import annotations

import numpy as np
from autograd.tracer import getval

from . import ledger
from ..circuits.transform import overlap_circuit
from ..engine import memory
from ..engine.threads import engine_threads
from ..engine.measurement import make_rng
from .expectation import _check_circuit, _check_shots, state

__all__ = ["kernel_matrix"]


def kernel_matrix(feature_circuit, X, Y=None, shots=None, seed=None, *, theta=None):
    """Fidelity kernel matrix ``K[i, j] = |<phi(X[i])|phi(Y[j])>|**2`` of a feature circuit.

    Parameters
    ----------
    feature_circuit : Circuit
        Reads the data point through ``input=`` gates (``n_inputs`` features); noise-free.
    X : array_like, shape (N, n_inputs)
    Y : array_like, shape (M, n_inputs), optional
        Second data set; None for the Gram matrix of ``X`` (symmetric, unit diagonal,
        positive semidefinite without shots).
    shots : int, optional
        Estimate each entry as a device would, from ``shots`` readouts of the
        compute-uncompute circuit (see the module notes); None for exact overlaps.
    seed : int or numpy.random.Generator, optional
        Randomness of the shots.
    theta : array_like, shape (n_params,), optional
        Weights of a feature circuit that also has trainable gates (required then).

    Returns
    -------
    ndarray, shape (N, N) or (N, M)

    Examples
    --------
    >>> import numpy as np
    >>> import qgradlib as qg
    >>> feature = qg.Circuit(2).h(0).h(1).rz(0, input=0).rz(1, input=1).rzz(0, 1, input=0)
    >>> X = np.array([[0.1, 0.5], [1.2, -0.3], [0.4, 0.9]])
    >>> K = qg.kernel_matrix(feature, X)
    >>> K.shape, bool(np.allclose(np.diag(K), 1.0)), bool(np.allclose(K, K.T))
    ((3, 3), True, True)
    >>> qg.kernel_matrix(feature, X, X[:2]).shape
    (3, 2)
    """
    _check_circuit(feature_circuit)
    c = feature_circuit
    if not c.n_inputs:
        raise ValueError("feature_circuit reads no data feature: add gates with input=k to encode "
                         "feature k of a data point")
    if c.has_noise:
        raise ValueError("feature_circuit has noise channels: the fidelity kernel here is the "
                         "overlap of pure feature states; use a noise-free feature circuit")
    if c.n_params and theta is None:
        raise ValueError(f"feature_circuit has {c.n_params} trainable parameter(s): give theta= "
                         f"of shape ({c.n_params},)")
    if theta is None:
        theta = np.zeros(0)
    if np.ndim(getval(theta)) != 1:
        raise ValueError(f"theta must have shape ({c.n_params},) (one feature map for all points); "
                         f"got {np.shape(getval(theta))}")
    shots = _check_shots(shots)
    Xs = _data_set(c, X, "X")
    Ys = None if Y is None else _data_set(c, Y, "Y")
    N = Xs.shape[0]
    M = N if Ys is None else Ys.shape[0]
    d = 2 ** c.n_qubits
    memory.guard(16 * d * (N + (0 if Ys is None else M)) + 8 * N * M,
                 f"{N + (0 if Ys is None else M)} feature states of {c.n_qubits} qubits and a "
                 f"{N} x {M} kernel matrix")
    # every feature state once, then one complex matrix product
    A = state(c, theta, inputs=Xs)
    B = A if Ys is None else state(c, theta, inputs=Ys)
    # the engine's BLAS rule for the product too: with another process busy on the machine,
    # OpenBLAS's second thread made it 1.6x slower than one thread (benchmarks' kernel row)
    with engine_threads(c.n_qubits):
        overlap = A.conj() @ B.T
    K = overlap.real ** 2 + overlap.imag ** 2
    if Ys is None:
        circuits = N * (N - 1) // 2
        np.fill_diagonal(K, 1.0)
        K = (K + K.T) / 2          # exactly symmetric, whatever the rounding of the product
    else:
        circuits = N * M
    ledger.record(circuits, 1, shots or 0, {"kernel": circuits})
    if shots is None:
        return np.clip(K, 0.0, 1.0)
    return _sampled(c, theta, Xs, Ys, shots, make_rng(seed))


# pairs of points simulated together by the shot path (bounded in bytes per batch below)
_PAIR_BYTES = 64 * 2 ** 20


def _sampled(c, theta, Xs, Ys, shots, rng):
    """All-zero frequencies of ``shots`` readouts of each pair's compute-uncompute circuit."""
    N = Xs.shape[0]
    if Ys is None:
        i, j = np.triu_indices(N, k=1)
        left, right = Xs[i], Xs[j]
    else:
        i, j = np.divmod(np.arange(N * Ys.shape[0]), Ys.shape[0])
        left, right = Xs[i], Ys[j]
    k = overlap_circuit(c)
    p0 = np.empty(left.shape[0])
    batch = max(1, _PAIR_BYTES // (16 * 2 ** c.n_qubits))
    for a in range(0, left.shape[0], batch):
        rows = np.hstack([left[a:a + batch], right[a:a + batch]])
        amp = state(k, theta, inputs=rows)[:, 0]
        p0[a:a + batch] = amp.real ** 2 + amp.imag ** 2
    freq = rng.binomial(shots, np.clip(p0, 0.0, 1.0)) / shots
    if Ys is not None:
        return freq.reshape(N, Ys.shape[0])
    out = np.eye(N)
    out[i, j] = freq
    out[j, i] = freq
    return out


def _data_set(circuit, X, name):
    raw = getval(X)
    try:
        arr = np.asarray(raw, dtype=float)
    except (TypeError, ValueError):
        raise TypeError(f"{name} must be a real array of shape (N, {circuit.n_inputs}); "
                        f"got {type(raw).__name__}") from None
    if arr.ndim != 2 or arr.shape[1] != circuit.n_inputs or arr.shape[0] == 0:
        raise ValueError(f"{name} must have shape (N, {circuit.n_inputs}) with N >= 1 (one row per "
                         f"data point); got {arr.shape}")
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name} must be finite (found NaN or inf)")
    return arr
