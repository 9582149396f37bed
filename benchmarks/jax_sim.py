"""A plain statevector simulator written with jax.numpy: the jitted baseline (optional).

The state is a (2,)*n tensor; every RY is a ``tensordot`` with its 2x2 matrix followed by
``moveaxis``, every CZ a sign flip of one quarter of the tensor; the value is
``<Z0 Z1> + 0.5 <X0>`` and its gradient comes from ``jax.grad`` of the whole program, jitted.
JAX is an optional extra (``pip install .[bench]``); `available` says whether it is there.
"""
from __future__ import annotations

import os

__all__ = ["available", "gradient_function", "energy_terms"]

# the benchmarks compare CPU engines in double precision
os.environ.setdefault("JAX_PLATFORMS", "cpu")


def available():
    """None when JAX imports, else the reason it does not (for the skip message)."""
    try:
        import jax  # noqa: F401
    except Exception as err:      # ImportError, or a broken install
        return f"JAX is not installed ({type(err).__name__}: {err}); pip install '.[bench]'"
    return None


def energy_terms(n):
    """The observable of the comparison, as Pauli words (qubit 0 leftmost)."""
    return {"ZZ" + "I" * (n - 2): 1.0, "X" + "I" * (n - 1): 0.5}


def gradient_function(n, layers):
    """``(value_fn, grad_fn)`` of the layered RY/CZ circuit, both jitted (not yet compiled)."""
    import jax
    import jax.numpy as jnp

    jax.config.update("jax_enable_x64", True)

    def apply1(psi, m, q):
        return jnp.moveaxis(jnp.tensordot(m, psi, axes=([1], [q])), 0, q)

    def cz(psi, a, b):
        idx = [slice(None)] * n
        idx[a] = 1
        idx[b] = 1
        return psi.at[tuple(idx)].multiply(-1.0)

    def energy(theta):
        psi = jnp.zeros((2,) * n, dtype=jnp.complex128).at[(0,) * n].set(1.0)
        k = 0
        for _ in range(layers):
            for q in range(n):
                c, s = jnp.cos(theta[k] / 2), jnp.sin(theta[k] / 2)
                psi = apply1(psi, jnp.array([[c, -s], [s, c]]).astype(jnp.complex128), q)
                k += 1
            for q in range(n - 1):
                psi = cz(psi, q, q + 1)
        p = jnp.abs(psi) ** 2
        sign = jnp.array([1.0, -1.0])
        zz = jnp.sum(p * sign.reshape((2,) + (1,) * (n - 1)) * sign.reshape((1, 2) + (1,) * (n - 2)))
        x0 = jnp.real(jnp.sum(jnp.conj(psi) * jnp.flip(psi, axis=0)))
        return zz + 0.5 * x0

    return jax.jit(energy), jax.jit(jax.grad(energy))
