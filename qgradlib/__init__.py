"""qgradlib: parameter-shift gradients, curvature and shot accounting for quantum circuits."""
from . import channels, check, curvature, distribute, gates
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
           "GradientEstimate", "distribute", "ChunkError"]
