"""Shots: finite-shot estimates of values and gradients, with their standard errors.

Takes: a circuit, observables, parameters and a shot budget. Gives: estimates a device's
statistics would produce (simulated), priced in the ledger. Measurement settings and shot
allocation are re-exported from the engine, where sampling happens.
"""
from ..engine.measurement import allocate, measurement_settings, n_settings
from .estimation import Estimate, GradientEstimate, TensorEstimate, estimate, estimate_gradient

__all__ = ["Estimate", "GradientEstimate", "TensorEstimate", "estimate", "estimate_gradient", "allocate",
           "measurement_settings", "n_settings"]
