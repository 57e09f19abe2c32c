"""Which solver a job uses, and the one entry point that runs it."""

from __future__ import annotations

from ..errors import JobError
from ..problem import Problem
from ..spec import SolverSpec
from .amg import solve_amg
from .cg import Monitor, SolveResult
from .direct import solve_direct
from .fft import fft_eligibility

DIRECT_LIMIT = 30_000  # unknowns; sparse LU fill grows quickly in 3D beyond this
FFT_NEEDS = "a constant coefficient, no holds, and on each axis two dirichlet or two neumann faces"


def choose_method(solver: SolverSpec, unknowns: int) -> str:
    """The method ``auto`` resolves to before the problem is built: direct for small systems,
    else AMG-preconditioned CG. :func:`method_for` makes the final choice."""
    if solver.method != "auto":
        return solver.method
    return "direct" if unknowns <= DIRECT_LIMIT else "amg"


def method_for(solver: SolverSpec, problem: Problem) -> str:
    """The method a built problem is solved with: ``auto`` takes ``fft`` when it is exact.

    Raises JobError (at ``solver.method``) when ``fft`` is asked for a problem it cannot solve.
    """
    if solver.method in ("fft", "auto"):
        reason = fft_eligibility(problem)
        if reason is None:
            return "fft"
        if solver.method == "fft":
            raise JobError(f"method 'fft' needs {FFT_NEEDS}: {reason}", "solver.method")
    return choose_method(solver, problem.unknowns)


def solve(A, b, solver: SolverSpec, monitor: Monitor | None = None) -> SolveResult:
    """Solve an assembled system (every method but ``fft``, which solves from the Problem)."""
    method = choose_method(solver, A.shape[0])
    if method == "fft":
        raise ValueError("method 'fft' solves from the Problem with solvers.fft.solve_fft, not from a matrix")
    if method == "direct":
        return solve_direct(A, b, monitor)
    return solve_amg(A, b, solver.rtol, solver.max_iterations, solver.amg, monitor, solver.stagnation_window)
