"""Mathematics of spectra and shifted points: shift rules, stencils, first- and higher-order plans.

Takes: a gate's frequencies (or a circuit's columns and angles). Gives: shift rules, and plans
of shifted angle vectors with their coefficients. This stage never simulates.
"""
from .shift_rules import ShiftRule, frequencies_of, rule_for_frequencies

__all__ = ["ShiftRule", "frequencies_of", "rule_for_frequencies"]
