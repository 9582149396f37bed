"""qgradlib: parameter-shift gradients, curvature and shot accounting for quantum circuits."""
from . import channels, check, curvature, distribute, gates, models, optimize, workflows
from .channels import Channel
from .circuit import Circuit, Operation
from .distribute import ChunkError
from .estimation import Estimate, GradientEstimate, estimate, estimate_gradient
from .expectation import density_matrix, expect, probabilities, sample, state
from .gates import Gate
from .ledger import Ledger
from .observables import Observable
from .shift_rules import ShiftRule

__version__ = "0.1.0"

__all__ = ["Circuit", "Operation", "Gate", "Observable", "ShiftRule", "Ledger", "expect",
           "probabilities", "state", "sample", "gates", "__version__",
           "Channel", "channels", "density_matrix", "estimate", "estimate_gradient", "Estimate",
           "GradientEstimate", "check", "curvature", "models", "optimize", "workflows", "plot",
           "distribute", "ChunkError"]


def __getattr__(name):
    # qgradlib.plot needs matplotlib, an optional extra: import it only when asked for
    if name == "plot":
        import importlib

        return importlib.import_module(".plot", __name__)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
