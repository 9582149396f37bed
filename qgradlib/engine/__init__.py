"""The engine: batches of gate angles to states to measured values.

Takes: a circuit and angles ``phi`` of shape (B, G). Gives: states (B, 2**n) complex128 (qubit 0
most significant), density matrices for noisy circuits, expectation values, probabilities,
samples, adjoint gradients and tangent states. It knows no autograd; its memory guard refuses
work that would not fit before allocating it.
"""
from .measure import expectations, pauli_expectation, probabilities
from .memory import StateTooLarge, available_bytes, guard
from .statevector import apply_diagonal, apply_gate, apply_matrix, run, zero_states
from .tangents import effective_generator, layer_covariances, state_derivatives, states_before

__all__ = ["StateTooLarge", "available_bytes", "guard", "apply_gate", "apply_matrix",
           "apply_diagonal", "run", "zero_states", "expectations", "probabilities",
           "pauli_expectation", "state_derivatives", "layer_covariances", "states_before",
           "effective_generator"]
