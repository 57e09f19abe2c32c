"""The job pipeline: job file -> spec -> problem -> system -> solution -> zarr result.

This is the one place that joins the numerical core with files; the CLI and (later) the
queue call :func:`run_job` and nothing below it.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any, Callable

import numpy as np

from .balance import Balance, compute_balance
from .cautions import job_warnings
from .conditions import settle_drains
from .derived import derived_fields
from .errors import JobError, SolverError, file_in_the_way, writing
from .grid import Grid, grid_from_spec
from .headline import compute_headline
from .inputs import load_array
from .memory import LEAN_FROM_CELLS, available_bytes, estimate_bytes, human
from .physics import DERIVED, PHYSICS
from .probes import ProbeValues, sample
from .problem import Problem, build_problem
from .residual_log import ResidualLog, log_path
from .solvers import choose_method, method_for, solve_problem
from .solvers.cg import Monitor, QuietMonitor, SolveResult
from .solvers.select import FieldLease
from .spec import JobSpec, load_job
from .store import Variable, write_probe_csv, write_result
from .units import unit_notes


@dataclass(frozen=True)
class Plan:
    """What a job will do, known before anything large is allocated."""

    spec: JobSpec
    job_file: Path
    output: Path
    cells: int
    method: str
    memory_bytes: int
    available_bytes: int
    gmg_levels: str = "float32"  # gmg's preconditioner float type, settled on the built problem

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
    balance: Balance | None = None
    probes: tuple[ProbeValues, ...] = ()
    probes_csv: Path | None = None
    headline: dict[str, Any] | None = None  # headline.compute_headline
    warnings: tuple[str, ...] = ()  # cautions.job_warnings: valid, but probably not meant


def probes_csv_path(output: Path) -> Path:
    """The probe table beside an output: ``results/a.zarr`` -> ``results/a.probes.csv``."""
    return output.with_name(output.stem + ".probes.csv")


def job_balance(spec: JobSpec, problem: Problem, u: np.ndarray) -> Balance:
    """The balance of a solution, with the holds labelled as in the job file."""
    physics = PHYSICS[spec.physics]
    return compute_balance(
        problem, u, physics.amount_units,
        names=[h.name or f"hold {i}" for i, h in enumerate(spec.hold)],
        values=[h.value for h in spec.hold],
        charges=spec.physics == "electrostatics",
    )


def _output_variables(spec: JobSpec, problem: Problem, u: np.ndarray,
                      probes: list[ProbeValues]) -> dict[str, Variable]:
    """Derived fields and probe samples as result variables (same dims as the solution)."""
    physics = PHYSICS[spec.physics]
    catalogue = DERIVED[spec.physics]
    variables: dict[str, Variable] = {}
    for name, data in derived_fields(problem, u, spec.physics, spec.output.fields).items():
        base = name if name in catalogue else name[:-2]
        info = catalogue[base]
        long_name = info.long_name + (f", {name[-1]} component" if name != base else "")
        variables[name] = Variable(data, ("x", "y", "z"), {"units": info.units, "long_name": long_name})
    for p in probes:
        dim = f"probe_{p.name}_distance"
        where = ({"point": list(map(float, p.points[0]))} if p.kind == "point" else
                 {"start": list(map(float, p.points[0])), "end": list(map(float, p.points[-1]))})
        variables[f"probe_{p.name}"] = Variable(p.values, (dim,), {
            "units": physics.solution_units, "long_name": f"{physics.solution} at probe {p.name}",
            "kind": p.kind, **where})
        variables[dim] = Variable(p.distance, (dim,), {
            "units": "m", "long_name": f"distance along probe {p.name} from its first sample"})
    return variables


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
    try:
        cells = job_grid(spec, job_file).size
    except JobError as exc:
        raise exc.located(str(job_file)) if not exc.source else exc
    method = choose_method(spec.solver)
    try:
        out = output_path(spec, job_file, output)
    except JobError as exc:
        raise exc.located(str(job_file)) from None
    blocker = file_in_the_way(out.parent)
    if blocker is not None:  # known before anything runs; other write errors surface at the write
        raise JobError(f"{str(out)!r} cannot be written: {blocker} is a file, not a folder",
                       "output.path" if output is None else "--output", str(job_file))
    return Plan(
        spec, job_file, out, cells, method,
        estimate_bytes(cells, cells, method, derived_arrays(spec)), available_bytes()
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


def prepare_problem(plan: Plan) -> tuple[Plan, Problem]:
    """Load the files a job names and discretise it; every input error surfaces here,
    including a method the problem does not allow (``fft`` on an ineligible problem).

    Returns the plan settled on the built problem (the method it is really solved with, and
    that method's memory) together with the problem.
    """
    refuse_if_too_large(plan)
    try:
        edges = load_edge_files(plan.spec, plan.job_file)
        arrays = _load_files(plan.spec, plan.job_file, job_grid(plan.spec, plan.job_file, edges).shape)
        problem = build_problem(plan.spec, arrays["material"], arrays["source"], edges)
        method = method_for(plan.spec.solver, problem)
    except JobError as exc:
        raise exc.located(str(plan.job_file)) if not exc.source else exc
    levels = gmg_precision(problem) if method == "gmg" else "float32"
    memory = estimate_bytes(plan.cells, problem.unknowns, method, derived_arrays(plan.spec),
                            levels == "float64")
    settled = replace(plan, method=method, memory_bytes=memory, gmg_levels=levels)
    refuse_if_too_large(settled)  # (float64 levels weigh more than the plan assumed)
    return settled, problem


def kernel_signatures(method: str, cells: tuple[int, int, int],
                      precision: str = "float32") -> frozenset[str]:
    """The compiled kernel signatures a run of ``method`` on ``cells`` needs, where they depend
    on the grid (gmg: its levels, the finest level's precision, serial or threaded vectors)
    and, for gmg, on the levels' float type ``precision`` (:func:`gmg_precision`)."""
    if method != "gmg":
        return frozenset()
    from .kernels.warmup import signatures

    return signatures(cells, precision)


def gmg_precision(problem: Problem) -> str:
    """The float type of gmg's levels for this problem (its coefficient's contrast)."""
    from .solvers.precision import coefficient_contrast, preconditioner_precision

    return preconditioner_precision(coefficient_contrast(problem))


def derived_arrays(spec: JobSpec) -> int:
    """How many (x, y, z) arrays the requested derived fields add to the result."""
    catalogue = DERIVED[spec.physics]
    return sum(3 if catalogue[name].vector else 1 for name in spec.output.fields)


def _resolve(job_file: Path, name: str) -> Path:
    path = Path(name)
    return path if path.is_absolute() else job_file.parent / path


def load_edge_files(spec: JobSpec, job_file: Path) -> dict[int, np.ndarray]:
    """The edges of grid axes given by a .npy path, by axis."""
    out = {}
    for a in spec.grid.graded_axes:
        given = spec.grid.edges.axis(a)  # type: ignore[union-attr]
        if isinstance(given, str):
            out[a] = load_array(_resolve(job_file, given), None, f"grid.edges.{'xyz'[a]}")
    return out


def job_grid(spec: JobSpec, job_file: Path, edges: dict[int, np.ndarray] | None = None) -> Grid:
    """The job's grid (its edges only: cheap), loading edge files when not given."""
    return grid_from_spec(spec.grid, load_edge_files(spec, job_file) if edges is None else edges)


def _load_files(spec: JobSpec, job_file: Path, shape: tuple[int, int, int]) -> dict[str, Any]:
    out: dict[str, Any] = {"material": None, "source": None}
    for key, fspec in (("material", spec.material), ("source", spec.source)):
        if isinstance(fspec.file, tuple):
            out[key] = tuple(load_array(_resolve(job_file, name), shape, f"{key}.file.{a}")
                             for a, name in enumerate(fspec.file))
        elif fspec.file is not None:
            out[key] = load_array(_resolve(job_file, fspec.file), shape, f"{key}.file")
    return out


class _Logged:
    """Forwards progress to the residual log and to the caller's monitor."""

    def __init__(self, log: ResidualLog, inner: Monitor, method: str | None = None) -> None:
        self.log, self.inner, self.method = log, inner, method

    def iteration(self, iteration: int, relative_residual: float, elapsed: float) -> None:
        self.log.iteration(iteration, relative_residual, elapsed, self.method)
        self.inner.iteration(iteration, relative_residual, elapsed)

    def switched(self, info: dict[str, Any]) -> None:
        """``auto`` left one method for another: mark it in the log and tell the caller."""
        self.log.switch(**info)
        self.method = info.get("to", self.method)
        if hasattr(self.inner, "switched"):
            self.inner.switched(info)  # type: ignore[attr-defined]

    def stop_requested(self) -> bool:
        return self.inner.stop_requested()


def run_job(
    job_file: str | Path,
    output: str | Path | None = None,
    monitor: Monitor | None = None,
    spec: JobSpec | None = None,
    extra_attrs: dict[str, Any] | None = None,
    on_warning: Callable[[str], None] | None = None,
) -> JobResult:
    """Run one job to a finished result, or raise JobError / SolverError / Cancelled.

    A solve that stops short with a usable iterate (maximum iterations, stagnation, the
    accuracy floor) still writes its result, complete and marked ``converged = false``, then
    raises its SolverError with ``output`` set to that result. Any other failed or interrupted
    job leaves no result at ``output``, only its residual log. ``extra_attrs`` are added to
    the result's attributes (the queue records its run there).
    ``on_warning`` receives each warning about the job (cautions.py) before the solve starts.
    """
    t0 = time.perf_counter()
    job_file = Path(job_file)
    plan = plan_job(job_file, output, spec)
    spec = plan.spec
    plan, problem = prepare_problem(plan)
    warnings = job_warnings(spec, problem)
    for w in warnings:
        (on_warning or (lambda _: None))(w)
    t_build = time.perf_counter()

    with writing(plan.output, "the result"):  # an unusable folder fails before the solve
        plan.output.parent.mkdir(parents=True, exist_ok=True)
    from .kernels.cache import cold_notice, mark_warm, missing

    needs = kernel_signatures(plan.method, problem.grid.cells, plan.gmg_levels)
    compiling = cold_notice(plan.method, needs)  # said before the kernels compile, on a first run
    if compiling and hasattr(monitor, "note"):
        monitor.note(compiling)
    # the seconds of compiling ahead of the solve: gmg's alone (the other methods compile
    # inside their own phases)
    compiled: dict[str, float] = {}
    if compiling:  # compiled on both cores before the solve (kernels/warmup.py)
        from .kernels.warmup import warm_up

        t_compile = time.perf_counter()
        warm_up(plan.method, problem.grid.cells, compiled=needs - missing(plan.method, needs),
                precision=plan.gmg_levels)
        if plan.method == "gmg":
            compiled["compile"] = time.perf_counter() - t_compile
    log = ResidualLog(log_path(plan.output))
    physics = PHYSICS[spec.physics]
    stopped: SolverError | None = None  # a solve that stopped short; its last iterate is written
    drain_rounds = 0  # (a solve stopped short inside the drains' rounds reports none)
    try:
        log.start(job=spec.name, method=plan.method, rtol=spec.solver.rtol, unknowns=problem.unknowns)
        logged = _Logged(log, monitor or QuietMonitor(), plan.method)

        def solve_once(p: Problem):
            logged.method = plan.method  # each drain round starts with the planned method again
            # on large grids k, f and the held values are dropped while each solve runs and
            # rebuilt after it (drains change only the exchanges, which the rebuild does not
            # touch); below LEAN_FROM_CELLS they stay (the rebuild costs more than they weigh)
            lease = (FieldLease(p, lambda: prepare_problem(plan)[1])
                     if plan.cells >= LEAN_FROM_CELLS else None)
            return solve_problem(p, spec.solver, plan.method, logged, lease)

        problem, u, result, drain_rounds = settle_drains(problem, solve_once)
        log.end(converged=True, iterations=result.iterations,
                final_relative_residual=result.final_relative_residual)
    except SolverError as exc:
        if exc.partial is None or exc.field is None:
            log.end(converged=False, error=str(exc))
            raise
        stopped, u, result = exc, exc.field, exc.partial
        log.end(converged=False, error=str(exc), stop=result.stop, iterations=result.iterations,
                final_relative_residual=result.final_relative_residual,
                best_relative_residual=result.best_relative_residual, result=str(plan.output))
    except BaseException as exc:
        log.end(converged=False, error=f"{type(exc).__name__}: {exc}")
        raise
    finally:
        log.close()
    grid = problem.grid
    balance = job_balance(spec, problem, u)
    headline = compute_headline(spec, problem, u, balance)
    probes = sample(grid, u, spec.probe)
    seconds = {
        "build": t_build - t0,
        **compiled,
        "assemble": result.assembly_seconds,
        "setup": result.setup_seconds,
        "solve": result.solve_seconds,
    }
    variables = {
        physics.solution: Variable(u, ("x", "y", "z"), {
            "units": physics.solution_units, "long_name": physics.solution}),
        "x": Variable(grid.centres(0), ("x",), {"units": "m", "long_name": "cell centre x"}),
        "y": Variable(grid.centres(1), ("y",), {"units": "m", "long_name": "cell centre y"}),
        "z": Variable(grid.centres(2), ("z",), {"units": "m", "long_name": "cell centre z"}),
        **{f"{c}_edges": Variable(grid.edges[a], (f"{c}_edge",), {
            "units": "m", "long_name": f"cell edges along {c}"}) for a, c in enumerate("xyz")},
        "residual_history": Variable(np.asarray(result.history), ("iteration",), {
            "units": "1", "long_name": "relative residual ||b - A u|| / ||b||"}),
        "residual_seconds": Variable(np.asarray(result.times), ("iteration",), {
            "units": "s", "long_name": "seconds since the solve began"}),
        **_output_variables(spec, problem, u, probes),
    }
    seconds["job"] = time.perf_counter() - t0  # up to the write; the write adds its own below
    attrs = {
        "converged": bool(result.converged),
        "solution": physics.solution,
        "physics": spec.physics,
        "units": {"solution": physics.solution_units, "coefficient": physics.coefficient_units,
                  "source": physics.source_units, "length": "m"},
        "gauge": "mean zero (pure Neumann problem)" if problem.gauge_mean_zero else "none",
        "job": spec.model_dump(mode="json"),
        "solver": {**result.summary(), "rtol": spec.solver.rtol, "unknowns": problem.unknowns,
                   **({"drain_solves": drain_rounds} if drain_rounds else {})},
        "seconds": seconds,
        **(extra_attrs or {}),
        "balance": balance.to_dict(),
        "floating": {h.name: h.value for h in balance.holds if h.floating},  # solved potentials (V)
        "headline": headline,
        "warnings": list(warnings),
        "input_units": list(unit_notes(spec)),
        "probes": [{"name": p.name, "kind": p.kind, "samples": len(p.values),
                    "min": float(p.values.min()), "max": float(p.values.max())} for p in probes],
    }
    t_write = time.perf_counter()
    write_result(plan.output, variables, attrs, spec.output.chunks)
    csv = None
    if probes:
        csv = write_probe_csv(probes_csv_path(plan.output), probes, physics.solution, physics.solution_units)
    seconds["write"] = time.perf_counter() - t_write
    seconds["job"] = time.perf_counter() - t0
    if compiling:
        mark_warm(plan.method, needs)
    if compiling and result.method.startswith("amg"):  # auto switched: amg compiled as it ran
        mark_warm("amg")
    if stopped is not None:
        stopped.output = plan.output
        raise stopped
    return JobResult(plan, result, plan.output, log_path(plan.output), seconds, balance, tuple(probes), csv,
                     headline, tuple(warnings))
