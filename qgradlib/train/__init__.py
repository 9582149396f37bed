"""Training: optimisers, rotosolve, standard problems, workflows and progress bars.

Takes: a cost (or a circuit and observable) and a starting point. Gives: scipy
`OptimizeResult` records priced in executions and shots.
"""
from . import models, optimize, workflows

__all__ = ["models", "optimize", "workflows"]
