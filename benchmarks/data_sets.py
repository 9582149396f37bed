"""Figures for models over data sets: gradients of a batch loss and fidelity kernel matrices.

Each is a ratio against a baseline measured in the same run: the forward pass of the same
batch for the gradients, and the feature states computed once plus one complex matrix
product for the kernel matrix.
"""
from __future__ import annotations

import autograd.numpy as anp
import numpy as np
from autograd import grad

import qgradlib as qg

from .timing import paired

__all__ = ["data_model", "batch_adjoint", "batch_shift", "kernel_gram"]


def data_model(n, layers):
    """Per layer: every qubit uploads its feature (RY), then RY and RZ weights, a CZ ring."""
    c = qg.Circuit(n)
    for _ in range(layers):
        for q in range(n):
            c.ry(q, input=q)
        for q in range(n):
            c.ry(q).rz(q)
        for q in range(n):
            c.cz(q, (q + 1) % n)
    return c


def _setup(sz):
    n, N = sz["data_n"], sz["data_N"]
    c = data_model(n, sz["data_m"] // (2 * n))
    rng = np.random.default_rng(3)
    X = rng.uniform(-np.pi, np.pi, size=(N, n))
    theta = rng.uniform(-np.pi, np.pi, size=c.n_params)
    H = qg.Observable({"Z" + "I" * (n - 1): 1.0, "I" * (n - 1) + "Z": 0.5})
    return c, H, X, theta


def _gradient_ratio(sz, repeats, method):
    c, H, X, theta = _setup(sz)
    fwd = lambda: qg.expect(c, H, theta, inputs=X)  # noqa: E731
    loss = lambda t: anp.mean(qg.expect(c, H, t, inputs=X, gradient=method))  # noqa: E731
    g = lambda: grad(loss)(theta)  # noqa: E731
    t, b = paired(g, fwd, repeats, sz["min_time"])
    return c, t, b


def batch_adjoint(sz, repeats, result):
    c, t, b = _gradient_ratio(sz, repeats, "adjoint")
    N = sz["data_N"]
    return result("batch_adjoint", f"adjoint gradient of a mean loss over N = {N} samples / the "
                  f"forward pass of the batch, n = {c.n_qubits}, m = {c.n_params}", 4.0, "<=",
                  t / b, seconds=t, N=N, m=c.n_params, seconds_gradient=float(np.median(t)),
                  seconds_forward=float(np.median(b)))


def batch_shift(sz, repeats, result):
    c, t, b = _gradient_ratio(sz, repeats, "shift")
    N, m = sz["data_N"], c.n_params
    return result("batch_shift", f"shift-rule gradient of a mean loss over N = {N} samples / the "
                  f"forward pass of the batch, n = {c.n_qubits}, m = {m} (bound: (2m + 1) x 0.5)",
                  (2 * m + 1) * 0.5, "<=", t / b, seconds=t, N=N, m=m, circuits=(2 * m + 1) * N,
                  seconds_gradient=float(np.median(t)), seconds_forward=float(np.median(b)))


def kernel_gram(sz, repeats, result):
    n, N = sz["data_n"], sz["data_N"]
    c = qg.Circuit(n)
    for q in range(n):
        c.h(q)
    for q in range(n):
        c.rz(q, input=q)
    for q in range(n):
        c.rzz(q, (q + 1) % n, input=q, scale=0.5)
    X = np.random.default_rng(4).uniform(-np.pi, np.pi, size=(N, n))

    def baseline():
        S = qg.state(c, np.zeros(0), inputs=X)
        return np.abs(S.conj() @ S.T) ** 2

    t, b = paired(lambda: qg.kernel_matrix(c, X), baseline, repeats, sz["min_time"])
    return result("kernel_gram", f"fidelity kernel matrix {N} x {N}, n = {n} / the {N} feature "
                  f"states once plus one {N} x {N} complex matrix product", 2.0, "<=", t / b, seconds=t,
                  seconds_kernel=float(np.median(t)), seconds_baseline=float(np.median(b)))
