"""Landscape: exact reconstruction of the cost along parameters, and trainability diagnostics.

Takes: a circuit (or a builder of circuits by size), an observable and parameters. Gives:
the cost along one parameter or direction (or over two parameters) as an exact trigonometric
polynomial from 2R + 1 evaluations (`reconstruct`); gradient variances over random parameters
as the circuit grows, with an exponential fit (`gradient_variance`); and a redundancy report
from the metric tensor's rank and the Hessian's spectrum at a point (`redundancy`). All are
priced in the ledger; with shots, estimates carry standard errors.
"""
from .reconstruction import Reconstruction, Reconstruction2D, reconstruct
from .trainability import GradientVariance, Redundancy, gradient_variance, redundancy

__all__ = ["reconstruct", "Reconstruction", "Reconstruction2D", "gradient_variance",
           "GradientVariance", "redundancy", "Redundancy"]
