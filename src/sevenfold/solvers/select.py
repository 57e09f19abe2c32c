"""Which solver a job uses, and the one entry point that runs it on a Problem.

``auto`` takes ``fft`` when the problem allows it (exact, no matrix), else ``gmg``, falling
back to ``amg`` when multigrid converges slowly. Small systems need no special case: below
512 cells multigrid's coarsest level is the whole grid, solved by LU (and measured here,
gmg beats sparse LU at every size from 12^3 up: 0.03 s against 1.6 s at 24^3).
"""

from __future__ import annotations

import time

import numpy as np

from ..errors import JobError
from ..operator import assemble, scatter
from ..problem import Problem, complete_field
from ..spec import SolverSpec
from .amg import solve_amg
from .cg import Monitor, QuietMonitor, SolveResult
from .direct import solve_direct
from .fft import fft_eligibility, solve_fft
from .gmg import solve_gmg

DIRECT_LIMIT = 30_000  # unknowns an assembled system is factorised up to under auto
FFT_NEEDS = "a constant coefficient, no holds, and on each axis two dirichlet or two neumann faces"
# auto leaves gmg for amg when, after GUARD_ITERATIONS, the mean residual reduction per
# iteration is worse than GUARD_RATE (that pace would need over 25 iterations for 1e-8)
GUARD_ITERATIONS = 10
GUARD_RATE = 0.5


def choose_method(solver: SolverSpec) -> str:
    """The method ``auto`` resolves to before the problem is built (no fft test yet)."""
    return solver.method if solver.method != "auto" else "gmg"


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
    return choose_method(solver)


def assembled_method(solver: SolverSpec, unknowns: int) -> str:
    """``direct`` or ``amg``: what solves an already assembled matrix for this solver section."""
    if solver.method in ("direct", "amg"):
        return solver.method
    if solver.method in ("fft", "gmg"):
        raise ValueError(f"method {solver.method!r} solves from the Problem, not from an assembled matrix")
    return "direct" if unknowns <= DIRECT_LIMIT else "amg"


def solve(A, b, solver: SolverSpec, monitor: Monitor | None = None) -> SolveResult:
    """Solve an assembled system with ``direct`` or AMG-preconditioned CG."""
    if assembled_method(solver, A.shape[0]) == "direct":
        return solve_direct(A, b, monitor)
    return solve_amg(A, b, solver.rtol, solver.max_iterations, solver.amg, monitor, solver.stagnation_window)


class _SlowMultigrid(Exception):
    def __init__(self, rate: float, iteration: int) -> None:
        self.rate, self.iteration = rate, iteration


class _RateGuard:
    """Passes progress on, and stops multigrid whose mean rate is worse than GUARD_RATE."""

    def __init__(self, inner: Monitor) -> None:
        self.inner = inner

    def iteration(self, iteration: int, relative_residual: float, elapsed: float) -> None:
        self.inner.iteration(iteration, relative_residual, elapsed)
        if iteration >= GUARD_ITERATIONS and relative_residual > 0:
            rate = relative_residual ** (1.0 / iteration)
            if rate > GUARD_RATE:
                raise _SlowMultigrid(rate, iteration)

    def stop_requested(self) -> bool:
        return self.inner.stop_requested()


def solve_assembled(problem: Problem, solver: SolverSpec, method: str,
                    monitor: Monitor) -> tuple[np.ndarray, SolveResult]:
    """Assemble the CSR system and solve it with ``amg`` or ``direct``."""
    t0 = time.perf_counter()
    system = assemble(problem)
    assembly = time.perf_counter() - t0
    result = solve(system.matrix, system.rhs, solver.model_copy(update={"method": method}), monitor)
    result.assembly_seconds = assembly
    return scatter(system, problem, result.x), result


def solve_problem(problem: Problem, solver: SolverSpec, method: str,
                  monitor: Monitor | None = None) -> tuple[np.ndarray, SolveResult]:
    """u on every cell (held values in place, gauge applied) and the solve's record; floating
    electrodes take the potentials that give them their charges (electrodes.py)."""
    if problem.floating:
        from ..electrodes import solve_floating

        return solve_floating(problem, solver, method, monitor or QuietMonitor(), _solve_fixed)
    return _solve_fixed(problem, solver, method, monitor)


def _solve_fixed(problem: Problem, solver: SolverSpec, method: str,
                 monitor: Monitor | None = None) -> tuple[np.ndarray, SolveResult]:
    monitor = monitor or QuietMonitor()
    if method == "fft":
        return solve_fft(problem, monitor=monitor)
    if method == "gmg":
        guarded = solver.method == "auto"
        try:
            u, result = solve_gmg(problem, solver.rtol, solver.max_iterations,
                                  _RateGuard(monitor) if guarded else monitor, solver.stagnation_window)
        except _SlowMultigrid as slow:
            switch = {"from": "gmg", "to": "amg", "after_iterations": slow.iteration, "rate": slow.rate,
                      "reason": f"gmg reduced the residual only {slow.rate:.2f} per iteration over "
                                f"{slow.iteration} iterations (auto wants at most {GUARD_RATE})"}
            if hasattr(monitor, "switched"):  # the residual log and the progress display mark it
                monitor.switched(switch)  # type: ignore[attr-defined]
            u, result = solve_assembled(problem, solver, "amg", monitor)
            result.notes = (f"auto chose gmg, which reduced the residual only {slow.rate:.2f} per "
                            f"iteration over {slow.iteration} iterations; solved with amg instead")
            result.switch = switch
            return u, result
        return complete_field(problem, u), result
    return solve_assembled(problem, solver, method, monitor)
