"""A plain statevector simulator written with autograd.numpy: the backprop baseline.

It is what one writes in an afternoon: the state is a (2,)*n tensor, every gate is a
``tensordot`` with its matrix followed by ``moveaxis``, and autograd differentiates the
whole program by reverse mode (storing every intermediate state). It knows the gates of the
benchmark circuits (RY, CZ) and Pauli-sum observables, nothing more.
"""
from __future__ import annotations

import autograd.numpy as anp
import numpy as np

__all__ = ["layered_energy", "pauli_expectation"]

_CZ = np.diag([1.0, 1.0, 1.0, -1.0]).reshape(2, 2, 2, 2).astype(complex)
_PAULI = {"X": np.array([[0, 1], [1, 0]], dtype=complex),
          "Y": np.array([[0, -1j], [1j, 0]]),
          "Z": np.array([[1, 0], [0, -1]], dtype=complex)}


def _apply1(psi, m, q):
    return anp.moveaxis(anp.tensordot(m, psi, axes=([1], [q])), 0, q)


def _apply2(psi, m4, q1, q2):
    out = anp.tensordot(m4, psi, axes=([2, 3], [q1, q2]))
    return anp.moveaxis(out, [0, 1], [q1, q2])


def _ry(a):
    c, s = anp.cos(a / 2), anp.sin(a / 2)
    return anp.reshape(anp.stack([c, -s, s, c]), (2, 2)) + 0j


def pauli_expectation(psi, terms):
    """sum_k c_k <psi|P_k|psi> for a dict of Pauli words (qubit 0 leftmost)."""
    total = 0.0
    for word, c in terms.items():
        phi = psi
        for q, letter in enumerate(word):
            if letter != "I":
                phi = _apply1(phi, _PAULI[letter], q)
        total = total + c * anp.real(anp.sum(anp.conj(psi) * phi))
    return total


def layered_energy(theta, n, layers, terms):
    """<H> after ``layers`` of (RY on every qubit, CZ chain) from |0...0>."""
    psi = np.zeros((2,) * n, dtype=complex)
    psi[(0,) * n] = 1.0
    k = 0
    for _ in range(layers):
        for q in range(n):
            psi = _apply1(psi, _ry(theta[k]), q)
            k += 1
        for q in range(n - 1):
            psi = _apply2(psi, _CZ, q, q + 1)
    return pauli_expectation(psi, terms)
