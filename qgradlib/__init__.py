"""qgradlib: parameter-shift gradients, curvature and shot accounting for quantum circuits."""
from . import check, curvature, landscape, shots
from .circuits import Channel, Circuit, Gate, Observable, Operation, channels, commutator, gates
from .evaluation import (ChunkError, Ledger, counts, density_matrix, distribute, expect,
                         kernel_matrix, probabilities, sample, state, variance)
from .rules import ShiftRule
from .shots import Estimate, GradientEstimate, TensorEstimate, estimate, estimate_gradient
from .train import models, optimize, workflows

__version__ = "0.1.0"

__all__ = ["Circuit", "Operation", "Gate", "Observable", "ShiftRule", "Ledger", "expect",
           "probabilities", "state", "sample", "gates", "__version__",
           "Channel", "channels", "density_matrix", "estimate", "estimate_gradient", "Estimate",
           "GradientEstimate", "TensorEstimate", "check", "curvature", "models", "optimize",
           "workflows", "plot", "distribute", "ChunkError", "shots", "kernel_matrix", "counts",
           "variance", "commutator", "landscape"]


def __getattr__(name):
    # qgradlib.plot needs matplotlib, an optional extra: import it only when asked for
    if name == "plot":
        import importlib

        return importlib.import_module(".plot", __name__)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
