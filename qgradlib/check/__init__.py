"""Audits: every gradient method side by side, against autograd's own numerical checks.

Takes: a circuit, an observable and a point. Gives: a `GradientReport` with deviations,
timings and executions per method. ``METHODS`` names the methods an audit can run.
"""
from .audit import METHODS, GradientReport, MethodAudit, gradients

__all__ = ["gradients", "GradientReport", "MethodAudit", "METHODS"]
