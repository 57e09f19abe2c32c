"""Linear solvers for the assembled SPD system, each recording its residual history."""

from .cg import Monitor, SolveResult, pcg
from .select import choose_method, method_for, solve

__all__ = ["Monitor", "SolveResult", "pcg", "choose_method", "method_for", "solve"]
