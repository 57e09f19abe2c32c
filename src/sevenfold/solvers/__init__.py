"""Linear solvers for the assembled SPD system, each recording its residual history."""

from .cg import Monitor, SolveResult, pcg
from .select import choose_method, solve

__all__ = ["Monitor", "SolveResult", "pcg", "choose_method", "solve"]
