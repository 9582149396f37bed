"""Models: spin-chain and MaxCut observables, layered and QAOA circuits, against outside references."""
from functools import reduce

import numpy as np
import pytest
import scipy.sparse.linalg as sla

import qgradlib as qg
from qgradlib import models

_P = {"I": np.eye(2), "X": np.array([[0, 1], [1, 0]]), "Y": np.array([[0, -1j], [1j, 0]]),
      "Z": np.diag([1.0, -1.0])}


def kron_word(word):
    # independent dense build: qubit 0 is the leftmost kron factor (big-endian convention)
    return reduce(np.kron, [_P[c] for c in word])


def kron_matrix(obs):
    return sum(c * kron_word(w) for w, c in obs.terms.items())


def test_observable_matrix_matches_kron_products_for_z_and_y_terms():
    # regression: the sparse build's parity sign once wrapped around in uint8 (255 for -1)
    H = qg.Observable({"ZIY": 0.7, "XZZ": -1.3, "IYI": 0.4, "ZZZ": 0.25})
    assert np.allclose(H.matrix().toarray(), kron_matrix(H), atol=1e-14)
