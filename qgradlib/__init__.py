"""qgradlib: parameter-shift gradients, curvature and shot accounting for quantum circuits.

The public names are listed in ``__all__``; ``__version__`` is the package version.

Examples
--------
>>> import numpy as np
>>> import qgradlib as qg
>>> c = qg.Circuit(1).ry(0)
>>> round(float(qg.expect(c, qg.Observable({"Z": 1.0}), np.array([np.pi / 3]))), 12)
0.5
"""
from . import check, curvature, landscape, shots
from .circuits import Channel, Circuit, Gate, Observable, Operation, channels, commutator, gates
from .circuits.qasm import QasmError, from_qasm, to_qasm
from .evaluation import (ChunkError, Ledger, NestedPlanWarning, counts, density_matrix, distribute,
                         expect, kernel_matrix, probabilities, sample, state, variance)
from .rules import ShiftRule
from .shots import Estimate, GradientEstimate, TensorEstimate, estimate, estimate_gradient

__version__ = "0.1.0"

__all__ = ["Circuit", "Operation", "Gate", "Observable", "ShiftRule", "Ledger", "expect",
           "probabilities", "state", "sample", "gates", "__version__",
           "Channel", "channels", "density_matrix", "estimate", "estimate_gradient", "Estimate",
           "GradientEstimate", "TensorEstimate", "check", "curvature", "models", "optimize",
           "workflows", "plot", "distribute", "ChunkError", "shots", "kernel_matrix", "counts",
           "variance", "commutator", "NestedPlanWarning",
           "landscape", "to_qasm", "from_qasm", "QasmError"]


_LAZY = {"plot": ".plot", "models": ".train.models", "optimize": ".train.optimize",
         "workflows": ".train.workflows"}


def __getattr__(name):
    # loaded when first asked for: qgradlib.plot needs matplotlib (an optional extra), and the
    # optimisers bring scipy.optimize, which takes longer to import than NumPy itself
    if name in _LAZY:
        import importlib

        module = importlib.import_module(_LAZY[name], __name__)
        globals()[name] = module
        return module
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
