"""The job pipeline: job file -> spec -> problem -> system -> solution -> zarr result.

This is the one place that joins the numerical core with files; the CLI and (later) the
queue call :func:`run_job` and nothing below it.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .errors import JobError, SolverError
from .grid import Grid
from .inputs import load_array
from .memory import available_bytes, estimate_bytes, human
from .operator import assemble, scatter
from .physics import PHYSICS
from .problem import Problem, build_problem
from .residual_log import ResidualLog, log_path
from .solvers import choose_method, solve
from .solvers.cg import Monitor, QuietMonitor, SolveResult
from .spec import JobSpec, load_job
from .store import Variable, write_result


@dataclass(frozen=True)
class Plan:
    """What a job will do, known before anything large is allocated."""

    spec: JobSpec
    job_file: Path
    output: Path
    cells: int
    unknowns_at_most: int
    method: str
    memory_bytes: int
    available_bytes: int

    @property
    def fits(self) -> bool:
        return self.memory_bytes <= self.available_bytes


@dataclass(frozen=True)
class JobResult:
    plan: Plan
    solve: SolveResult
    output: Path
    residual_log: Path
    seconds: dict[str, float]


def output_path(spec: JobSpec, job_file: Path, override: str | Path | None = None) -> Path:
    """Where the result goes: ``override``, else ``output.path`` relative to the job file."""
    if override is not None:
        return Path(override).resolve()
    try:
        name = spec.output.path.format(name=spec.name)
    except (KeyError, IndexError, ValueError) as exc:
        raise JobError(f"path may use only {{name}}: {exc}", "output.path") from None
    path = Path(name)
    return (path if path.is_absolute() else job_file.parent / path).resolve()


def plan_job(job_file: str | Path, output: str | Path | None = None, spec: JobSpec | None = None) -> Plan:
    """Validate a job file and say what it will need, without building the grid's arrays."""
    job_file = Path(job_file)
    spec = spec or load_job(job_file)
    cells = Grid.from_spec(spec.grid).size
    method = choose_method(spec.solver, cells)
    try:
        out = output_path(spec, job_file, output)
    except JobError as exc:
        raise exc.located(str(job_file)) from None
    return Plan(
        spec, job_file, out, cells, cells, method, estimate_bytes(cells, cells, method), available_bytes()
    )


def refuse_if_too_large(plan: Plan) -> None:
    if not plan.fits:
        raise JobError(
            f"{plan.cells:,} cells need about {human(plan.memory_bytes)} with method "
            f"{plan.method!r}, more than the {human(plan.available_bytes)} available; "
            "use fewer cells or a machine with more memory",
            "grid.cells",
            str(plan.job_file),
        )


def prepare_problem(plan: Plan) -> Problem:
    """Load the files a job names and discretise it; every input error surfaces here."""
    refuse_if_too_large(plan)
    try:
        arrays = _load_files(plan.spec, plan.job_file)
        return build_problem(plan.spec, arrays["material"], arrays["source"])
    except JobError as exc:
        raise exc.located(str(plan.job_file)) if not exc.source else exc


def _load_files(spec: JobSpec, job_file: Path) -> dict[str, np.ndarray | None]:
    shape = tuple(spec.grid.cells)
    out: dict[str, np.ndarray | None] = {"material": None, "source": None}
    for key, fspec in (("material", spec.material), ("source", spec.source)):
        if fspec.file is not None:
            path = Path(fspec.file)
            path = path if path.is_absolute() else job_file.parent / path
            out[key] = load_array(path, shape, f"{key}.file")  # type: ignore[arg-type]
    return out


class _Logged:
    """Forwards progress to the residual log and to the caller's monitor."""

    def __init__(self, log: ResidualLog, inner: Monitor) -> None:
        self.log, self.inner = log, inner

    def iteration(self, iteration: int, relative_residual: float, elapsed: float) -> None:
        self.log.iteration(iteration, relative_residual, elapsed)
        self.inner.iteration(iteration, relative_residual, elapsed)

    def stop_requested(self) -> bool:
        return self.inner.stop_requested()


def run_job(
    job_file: str | Path,
    output: str | Path | None = None,
    monitor: Monitor | None = None,
    spec: JobSpec | None = None,
) -> JobResult:
    """Run one job to a finished result, or raise JobError / SolverError / Cancelled.

    A failed or interrupted job leaves no result at ``output``, only its residual log.
    """
    t0 = time.perf_counter()
    job_file = Path(job_file)
    plan = plan_job(job_file, output, spec)
    spec = plan.spec
    problem = prepare_problem(plan)
    t_build = time.perf_counter()
    system = assemble(problem)
    t_assemble = time.perf_counter()

    log = ResidualLog(log_path(plan.output))
    physics = PHYSICS[spec.physics]
    try:
        log.start(job=spec.name, method=choose_method(spec.solver, problem.unknowns),
                  rtol=spec.solver.rtol, unknowns=problem.unknowns)
        result = solve(system.matrix, system.rhs, spec.solver, _Logged(log, monitor or QuietMonitor()))
        log.end(converged=True, iterations=result.iterations,
                final_relative_residual=result.final_relative_residual)
    except SolverError as exc:
        log.end(converged=False, error=str(exc))
        raise
    except BaseException as exc:
        log.end(converged=False, error=f"{type(exc).__name__}: {exc}")
        raise
    finally:
        log.close()
    t_solve = time.perf_counter()
    u = scatter(system, problem, result.x)
    del system
    grid = problem.grid
    seconds = {
        "build": t_build - t0,
        "assemble": t_assemble - t_build,
        "setup": result.setup_seconds,
        "solve": result.solve_seconds,
    }
    variables = {
        physics.solution: Variable(u, ("x", "y", "z"), {
            "units": physics.solution_units, "long_name": physics.solution}),
        "x": Variable(grid.centres(0), ("x",), {"units": "m", "long_name": "cell centre x"}),
        "y": Variable(grid.centres(1), ("y",), {"units": "m", "long_name": "cell centre y"}),
        "z": Variable(grid.centres(2), ("z",), {"units": "m", "long_name": "cell centre z"}),
        "residual_history": Variable(np.asarray(result.history), ("iteration",), {
            "units": "1", "long_name": "relative residual ||b - A u|| / ||b||"}),
        "residual_seconds": Variable(np.asarray(result.times), ("iteration",), {
            "units": "s", "long_name": "seconds since the solve began"}),
    }
    seconds["job"] = time.perf_counter() - t0  # up to the write; the write adds its own below
    attrs = {
        "solution": physics.solution,
        "physics": spec.physics,
        "units": {"solution": physics.solution_units, "coefficient": physics.coefficient_units,
                  "source": physics.source_units, "length": "m"},
        "gauge": "mean zero (pure Neumann problem)" if problem.gauge_mean_zero else "none",
        "job": spec.model_dump(mode="json"),
        "solver": {**result.summary(), "rtol": spec.solver.rtol, "unknowns": problem.unknowns},
        "seconds": seconds,
    }
    t_write = time.perf_counter()
    write_result(plan.output, variables, attrs, spec.output.chunks)
    seconds["write"] = time.perf_counter() - t_write
    seconds["job"] = time.perf_counter() - t0
    return JobResult(plan, result, plan.output, log_path(plan.output), seconds)
