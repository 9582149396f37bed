"""The one door between autograd and the engine.

Takes: a circuit, what to measure and a batch of parameters. Gives: values, through one autograd
primitive whose derivative rules (shift, adjoint, difference) sit beside it; the executors
that spread its rows; and the ledger that counts what a device would run.
"""
from .distribute import ChunkError
from .expectation import density_matrix, evaluate, expect, probabilities, sample, state
from .fidelity import kernel_matrix
from .ledger import Ledger
from .statistics import counts, variance

__all__ = ["expect", "probabilities", "state", "sample", "density_matrix", "evaluate", "Ledger",
           "ChunkError", "kernel_matrix", "counts", "variance"]
