"""Independent references for the tests (no engine code): a dense kron-built simulator."""
from .dense import (FIXED, GENERATORS, PAULI, ROTATIONS, angle_gradient, circuit_ops,
                    circuit_state, dense_expectation, dense_marginals, dense_state, embed,
                    observable_dense, pauli_dense, reference_angle_map, reference_angles,
                    reference_data_angles,
                    state_derivatives, theta_gradient)

__all__ = ["FIXED", "GENERATORS", "PAULI", "ROTATIONS", "angle_gradient", "circuit_ops",
           "circuit_state", "dense_expectation", "dense_marginals", "dense_state", "embed",
           "observable_dense", "pauli_dense", "reference_angle_map", "reference_angles",
           "reference_data_angles",
           "state_derivatives", "theta_gradient"]
