"""Which solver a job uses, and the one entry point that runs it on a Problem.

``auto`` takes ``fft`` when the problem allows it (exact, no matrix), else ``gmg``, falling
back to ``amg`` only when multigrid's measured rate is poor (worse than GUARD_RATE per iteration
after GUARD_ITERATIONS; the result's notes say so). A gmg solve that stops for another reason
(the attainable-accuracy floor, a breakdown) is not handed to amg, which would meet the same
floor more slowly: on cells 1000 times wider than tall amg-CG did not reach 1e-9 in 500
iterations where gmg stopped at the floor after 15. Small systems need no special case: below
512 cells multigrid's coarsest level is the whole grid, solved by LU (and measured here,
gmg beats sparse LU at every size from 12^3 up: 0.03 s against 1.6 s at 24^3).

Each method's modules (and with them numba's kernels, scipy.sparse, pyamg) are imported
only when that method runs: ``check`` and the fft path load no stencil kernels.

A solve that stops short raises SolverError whose ``partial`` holds the last iterate; here
it also gets ``field``, that iterate on every cell (held values in place, gauge applied).
"""

from __future__ import annotations

import time

import numpy as np

from ..errors import JobError, SolverError
from ..problem import Problem, complete_field
from ..spec import SolverSpec
from .cg import Monitor, QuietMonitor, SolveResult
from .fft import fft_eligibility

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


def assemble(problem: Problem):
    """The CSR system of a problem (:func:`sevenfold.operator.assemble`, imported on first use)."""
    from ..operator import assemble as assemble_csr

    return assemble_csr(problem)


def solve(A, b, solver: SolverSpec, monitor: Monitor | None = None) -> SolveResult:
    """Solve an assembled system with ``direct`` or AMG-preconditioned CG."""
    if assembled_method(solver, A.shape[0]) == "direct":
        from .direct import solve_direct

        return solve_direct(A, b, monitor)
    from .amg import solve_amg

    return solve_amg(A, b, solver.rtol, solver.max_iterations, solver.amg, monitor, solver.stagnation_window)


class FieldLease:
    """The cell fields a problem's operator is built from, lent to a solve that lets them go
    once its operator exists, and gets them back rebuilt when something needs them again.

    ``coefficient``, ``source``, ``held_value`` and ``hold_index`` are 28 bytes per cell of an
    isotropic job (44 with directional k): once the face arrays (gmg) or the CSR matrix
    (amg, direct) are built, the solve needs none of them, so :meth:`release` drops them from
    the problem (at the solve's first iteration report) and :meth:`restore` puts back the
    arrays ``rebuild`` makes (the same job built again, deterministic) for ``complete_field``,
    a fallback to amg, the balance and the derived fields. ``held`` and the face terms stay.
    The Problem is frozen for everyone else; only this lease replaces its arrays.
    """

    FIELDS = ("coefficient", "source", "held_value", "hold_index")

    def __init__(self, problem: Problem, rebuild) -> None:
        self.problem, self.rebuild, self.released = problem, rebuild, False

    def release(self) -> None:
        if not self.released:
            for name in self.FIELDS:
                object.__setattr__(self.problem, name, None)
            self.released = True

    def restore(self) -> Problem:
        if self.released:
            fresh = self.rebuild()
            for name in self.FIELDS:
                object.__setattr__(self.problem, name, getattr(fresh, name))
            self.released = False
        return self.problem


class _Releasing:
    """Passes progress on; the first report (the operator is built by then) releases the lease,
    or earlier :meth:`operator_built`, which a solver calls as soon as its operator exists (gmg:
    before the hierarchy, so the fields and the levels are never held at once)."""

    def __init__(self, inner: Monitor, lease: FieldLease) -> None:
        self.inner, self.lease = inner, lease

    def operator_built(self) -> None:
        self.lease.release()

    def iteration(self, iteration: int, relative_residual: float, elapsed: float) -> None:
        self.lease.release()
        self.inner.iteration(iteration, relative_residual, elapsed)

    def stop_requested(self) -> bool:
        return self.inner.stop_requested()


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
                    monitor: Monitor, lease: FieldLease | None = None) -> tuple[np.ndarray, SolveResult]:
    """Assemble the CSR system and solve it with ``amg`` or ``direct``."""
    from ..operator import scatter

    t0 = time.perf_counter()
    system = assemble(lease.restore() if lease else problem)
    assembly = time.perf_counter() - t0
    if lease is not None:
        monitor = _Releasing(monitor, lease)
    try:
        result = solve(system.matrix, system.rhs, solver.model_copy(update={"method": method}), monitor)
    except SolverError as exc:
        if exc.partial is not None:
            exc.partial.assembly_seconds = assembly
            exc.field = scatter(system, lease.restore() if lease else problem, exc.partial.x)
        raise
    result.assembly_seconds = assembly
    return scatter(system, lease.restore() if lease else problem, result.x), result


def solve_problem(problem: Problem, solver: SolverSpec, method: str,
                  monitor: Monitor | None = None, lease: FieldLease | None = None,
                  ) -> tuple[np.ndarray, SolveResult]:
    """u on every cell (held values in place, gauge applied) and the solve's record; floating
    electrodes take the potentials that give them their charges (electrodes.py).

    With a ``lease`` on ``problem``'s fields, the iterative and direct methods drop them while
    they solve; ``problem`` has them back (rebuilt) when this returns, or raises SolverError
    with a kept iterate (other errors leave them dropped: the job ends there). Floating
    electrodes solve several times with their own held values: no lease there.
    """
    if problem.floating:
        from ..electrodes import solve_floating

        return solve_floating(problem, solver, method, monitor or QuietMonitor(), _solve_fixed)
    return _solve_fixed(problem, solver, method, monitor, lease)


def _solve_fixed(problem: Problem, solver: SolverSpec, method: str,
                 monitor: Monitor | None = None, lease: FieldLease | None = None,
                 ) -> tuple[np.ndarray, SolveResult]:
    monitor = monitor or QuietMonitor()
    if method == "fft":
        from .fft import solve_fft

        return solve_fft(problem, monitor=monitor)
    if method == "gmg":
        from .gmg import solve_gmg

        guarded = solver.method == "auto"
        watched = _RateGuard(monitor) if guarded else monitor
        try:
            u, result = solve_gmg(problem, solver.rtol, solver.max_iterations,
                                  _Releasing(watched, lease) if lease else watched, solver.stagnation_window)
        except SolverError as exc:
            if exc.partial is not None and exc.field is None:  # the fine grid's flat iterate
                problem = lease.restore() if lease else problem
                exc.field = complete_field(problem, exc.partial.x.reshape(problem.grid.shape))
            raise
        except _SlowMultigrid as slow:
            switch = {"from": "gmg", "to": "amg", "after_iterations": slow.iteration, "rate": slow.rate,
                      "reason": f"gmg reduced the residual only {slow.rate:.2f} per iteration over "
                                f"{slow.iteration} iterations (auto wants at most {GUARD_RATE})"}
            if hasattr(monitor, "switched"):  # the residual log and the progress display mark it
                monitor.switched(switch)  # type: ignore[attr-defined]
            u, result = solve_assembled(problem, solver, "amg", monitor, lease)
            result.notes = (f"auto chose gmg, which reduced the residual only {slow.rate:.2f} per "
                            f"iteration over {slow.iteration} iterations; solved with amg instead")
            result.switch = switch
            return u, result
        return complete_field(lease.restore() if lease else problem, u), result
    return solve_assembled(problem, solver, method, monitor, lease)
