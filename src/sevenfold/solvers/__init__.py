"""Linear solvers for the assembled SPD system, each recording its residual history."""

from .cg import Monitor, SolveResult, pcg
from .select import assembled_method, choose_method, method_for, solve, solve_problem

__all__ = ["Monitor", "SolveResult", "pcg", "choose_method", "method_for", "solve", "solve_problem", "assembled_method"]
