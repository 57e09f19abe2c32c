"""Which solver a job uses, and the one entry point that runs it."""

from __future__ import annotations

from ..spec import SolverSpec
from .amg import solve_amg
from .cg import Monitor, SolveResult
from .direct import solve_direct

DIRECT_LIMIT = 30_000  # unknowns; sparse LU fill grows quickly in 3D beyond this


def choose_method(solver: SolverSpec, unknowns: int) -> str:
    """The method ``auto`` resolves to: direct for small systems, else AMG-preconditioned CG."""
    if solver.method != "auto":
        return solver.method
    return "direct" if unknowns <= DIRECT_LIMIT else "amg"


def solve(A, b, solver: SolverSpec, monitor: Monitor | None = None) -> SolveResult:
    method = choose_method(solver, A.shape[0])
    if method == "direct":
        return solve_direct(A, b, monitor)
    return solve_amg(A, b, solver.rtol, solver.max_iterations, solver.amg, monitor, solver.stagnation_window)
