"""What a circuit is: gates, noise channels, observables, Pauli words and the circuit itself.

Takes: gate methods, generators, Pauli strings. Gives: a `Circuit` with its linear angle map
``phi = A theta + b`` and `Observable` values to measure. This stage never simulates.
"""
from . import channels, gates
from .channels import Channel
from .circuit import Circuit, Operation, check_theta
from .gates import Gate
from .observables import Observable, commutator

__all__ = ["Circuit", "Operation", "Gate", "Channel", "Observable", "channels", "gates",
           "check_theta", "commutator"]
