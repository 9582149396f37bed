"""Ratio benchmarks of qgradlib, each against a baseline measured in the same run.

Run ``python -m benchmarks`` (``--quick`` for a small smoke run); see docs/performance.md.
"""
