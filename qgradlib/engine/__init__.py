"""Batched statevector kernels: states of shape (B, 2**n), complex128, qubit 0 most significant."""
from .memory import StateTooLarge, available_bytes, guard
from .statevector import apply_gate, apply_matrix, apply_diagonal, run, zero_states
from .measure import expectations, probabilities, pauli_expectation

__all__ = ["StateTooLarge", "available_bytes", "guard", "apply_gate", "apply_matrix",
           "apply_diagonal", "run", "zero_states", "expectations", "probabilities",
           "pauli_expectation"]
