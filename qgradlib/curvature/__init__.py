"""Curvature: Hessians, derivative tensors of any order, the metric tensor, Fisher information.

Takes: a circuit, an observable and one parameter vector. Gives: tensors in theta built from
merged plans of shifted points, evaluated in one batch (see `qgradlib.curvature.tensors`).
"""
from .fisher import fisher_information
from .metric import Layer, layers, metric_tensor
from .tensors import DerivativeTensors, HessianResult, derivatives, hessian

__all__ = ["HessianResult", "DerivativeTensors", "Layer", "hessian", "derivatives", "layers",
           "metric_tensor", "fisher_information"]
