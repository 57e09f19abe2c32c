"""The ``sevenfold`` command: a thin shell over :mod:`sevenfold.runner`.

Exit codes: 0 success, 1 solver failure, 2 bad input, 130 interrupted.
"""

from __future__ import annotations

import argparse
import gc
import math
import os
import sys
from pathlib import Path
from typing import NoReturn

from . import one_blas_thread, small_pages

one_blas_thread()  # before anything imports numpy

from rich.markup import escape  # noqa: E402
from rich.table import Table  # noqa: E402

from . import __version__  # noqa: E402
from .console import (ProgressMonitor, err, out, print_run_end, quiet_result,  # noqa: E402
                      run_progress, warn)
from .errors import Cancelled, JobError, SevenfoldError, SolverError  # noqa: E402

EXIT_OK, EXIT_SOLVER, EXIT_INPUT, EXIT_INTERRUPTED = 0, 1, 2, 130

def _check(args: argparse.Namespace) -> int:
    from .cautions import job_warnings
    from .memory import human
    from .conditions import placed_rows
    from .runner import plan_job, prepare_problem
    from .solvers.precision import coefficient_contrast, precision_note
    from .units import unit_notes

    plan = plan_job(args.job)
    plan, problem = prepare_problem(plan)  # settled: the method the built problem is solved with
    spec = plan.spec
    table = Table(show_header=False, box=None)
    grid = problem.grid
    nx, ny, nz = grid.cells

    method = plan.method + (" (chosen by auto)" if spec.solver.method == "auto" else "")
    if plan.method == "gmg" and (note := precision_note(coefficient_contrast(problem))):
        method += f"; {note}"

    def widths(a: int) -> str:
        lo, hi = grid.min_width()[a], grid.max_width()[a]
        return f"{lo:.4g}" if grid.is_uniform(a) else f"{lo:.3g}..{hi:.3g} (graded)"

    for key, value in (
        ("job", f"{spec.name} ({spec.physics})"),
        ("cells", f"{nx} x {ny} x {nz} = {plan.cells:,}"),
        ("box", " x ".join(f"[{o:.4g}, {o + e:.4g}]" for o, e in zip(grid.origin, grid.extent)) + " m"),
        ("cell widths", " x ".join(widths(a) for a in range(3)) + " m"),
        ("coefficient", "directional (kx, ky, kz)" if not problem.isotropic else "one value for every direction"),
        *placed_rows(problem),
        ("unknowns", f"{problem.unknowns:,}" + (" (pure Neumann: one cell pinned, mean(u) = 0)" if problem.gauge_mean_zero else "")),
        ("method", method),
        ("memory", f"about {human(plan.memory_bytes)} of {human(plan.available_bytes)} available"),
        ("output", str(plan.output)),
        *(("units", note) for note in unit_notes(spec)),
    ):
        table.add_row(key, escape(value))
    for w in problem.wells:  # where each well landed: its screened cells and Peaceman radius
        table.add_row(f"well {escape(w.name)}", f"{w.k.size} cell(s) of column ({w.i}, {w.j}), screened "
                      f"{float(w.length.sum()):.4g} m; Peaceman radius {float(w.r_e.min()):.3g} m")
    out.print(table)
    for w in job_warnings(spec, problem):
        warn(w)
    out.print("[green]valid[/green]: the job file, its regions, files and boundary data all check out")
    return EXIT_OK


def _run(args: argparse.Namespace) -> int:
    if not args.here:
        code = _run_on_worker(args)
        if code is not None:
            return code
    from .runner import plan_job, run_job

    plan = plan_job(args.job, args.output)
    with run_progress(disable=args.quiet or args.no_progress) as progress:
        task = progress.add_task(plan.spec.name, total=-math.log10(plan.spec.solver.rtol), info="building")
        monitor = ProgressMonitor(progress, task, plan.spec.solver.rtol)
        if args.quiet:  # stdout holds the result's path alone; warnings go to stderr
            monitor.switched = lambda info: None  # type: ignore[method-assign]
        result = run_job(args.job, args.output, monitor, plan.spec,
                         on_warning=lambda text: (err if args.quiet else progress.console).print(
                             f"[yellow]warning:[/yellow] {escape(text)}", soft_wrap=True))
    if args.quiet:
        return quiet_result(result.output)
    print_run_end({**result.solve.summary(), "seconds": result.seconds},
                  None if result.balance is None else result.balance.to_dict(), result.headline,
                  result.output, result.probes_csv)
    return EXIT_OK


def _run_on_worker(args: argparse.Namespace) -> int | None:
    """``run`` by an idle queue worker on this machine (:mod:`sevenfold.queue.handoff`), shown
    as a run in this process would be; None when there is no such worker."""
    from .queue.home import has_queue

    if not has_queue(args.home):  # no queue, no worker: the queue's modules stay unloaded
        return None
    from .queue.handoff import follow, hand_off
    from .runner import probes_csv_path
    from .store import read_attrs

    handed = hand_off(args.job, args.output, args.home)
    if handed is None:
        return None
    job = handed.job
    say = err if args.quiet else out
    with run_progress(disable=args.quiet or args.no_progress) as progress:
        task = progress.add_task(job.name, total=None, info=f"job {job.id} on worker {handed.worker}")
        monitor: ProgressMonitor | None = None
        switches = 0

        def on_progress(j, p) -> None:  # the residual log grew
            nonlocal monitor, switches
            if monitor is None and p.rtol:  # the solve's start record gives rtol
                monitor = ProgressMonitor(progress, task, p.rtol)
                progress.update(task, total=monitor.goal)
            if monitor is None:
                return
            if p.history:
                monitor.iteration(p.iteration, p.history[-1], 0.0)
            for sw in p.switches[switches:] if not args.quiet else ():
                monitor.switched(sw)
            switches = len(p.switches)

        try:
            job = follow(handed, on_progress)
        except KeyboardInterrupt:
            handed.queue.cancel([job.id])
            err.print(f"interrupted; queue job {job.id} is cancelled (its worker stops it at the next "
                      "iteration); no result was written")
            return EXIT_INTERRUPTED
    if job is None:  # the worker went away before taking it
        say.print("the worker stopped before taking the job; running it here")
        return None
    attrs = read_attrs(Path(job.output)) if job.state != "cancelled" else {}
    for text in attrs.get("warnings") or []:
        say.print(f"[yellow]warning:[/yellow] {escape(text)}", soft_wrap=True)
    if job.state == "done":
        if args.quiet:
            return quiet_result(job.output)
        out.print(f"run by worker {escape(job.worker or handed.worker)} as queue job {job.id} "
                  "(--here runs it in this process)")
        print_run_end(job.summary or {}, attrs.get("balance"), attrs.get("headline"), Path(job.output),
                      probes_csv_path(Path(job.output)) if attrs.get("probes") else None)
        return EXIT_OK
    if job.state == "cancelled":
        err.print(f"cancelled: queue job {job.id}: {escape(job.error or '')}", soft_wrap=True)
        return EXIT_SOLVER
    kind = (job.summary or {}).get("failure")
    err.print(f"[red]error:[/red] {escape(job.error or 'failed')} (queue job {job.id})", soft_wrap=True)
    return EXIT_INPUT if kind in ("input", "os") else EXIT_SOLVER


def _capacitance(args: argparse.Namespace) -> int:
    from .capacitance import capacitance_matrix
    from .runner import plan_job, prepare_problem

    plan = plan_job(args.job)
    spec = plan.spec
    if spec.physics != "electrostatics":
        raise JobError(f"capacitance needs physics = 'electrostatics', this job is {spec.physics!r}",
                       "physics", str(plan.job_file))
    names = [h.name or f"hold {i}" for i, h in enumerate(spec.hold)]
    try:
        _, problem = prepare_problem(plan)
        res = capacitance_matrix(problem, names, spec.solver)
    except JobError as exc:
        raise exc if exc.source else exc.located(str(plan.job_file))
    # a thin (2D) problem is reported per metre along its thin axis (capacitance.thin_axis)
    matrix, ground, unit = res.matrix, res.ground, "pF"
    if res.thin_axis is not None:
        matrix, ground, unit = res.per_length, res.ground / res.thickness, "pF/m"
        out.print(f"one cell ({res.thickness:g} m) along {res.thin_axis}, insulated across it: a 2D problem; "
                  f"capacitance per metre along {res.thin_axis}")
    title = "capacitance matrix" if len(names) > 1 else "self-capacitance"
    table = Table(title=f"{title} ({unit})", title_justify="left", box=None)
    table.add_column("at 1 V")
    for n in names:
        table.add_column(escape(n), justify="right")
    if res.grounded_faces:
        table.add_column("ground", justify="right")
    for i, n in enumerate(names):
        cells = [f"{1e12 * c:.6g}" for c in matrix[i]]
        if res.grounded_faces:
            cells.append(f"{1e12 * ground[i]:.6g}")
        table.add_row(escape(n), *cells)
    out.print(table)
    if len(names) == 1:
        out.print(f"self-capacitance of {escape(names[0])} to the grounded faces "
                  f"{', '.join(res.grounded_faces)}: {1e12 * matrix[0, 0]:.6g} {unit} (C = Q / V)")
    if len(names) > 1:
        out.print("row i: electrode i at 1 V, the others at 0 V; column j: the charge on electrode j")
    if res.grounded_faces:
        out.print(f"grounded: the faces {', '.join(res.grounded_faces)} act as one further conductor at 0 V "
                  "(their charge is the ground column)")
    else:
        out.print("no grounded face: each row sums to zero")
    if len(names) == 2:
        out.print(f"{'mutual ' if res.grounded_faces else ''}capacitance between {escape(names[0])} and "
                  f"{escape(names[1])}: {-1e12 * matrix[0, 1]:.6g} {unit} (minus the off-diagonal entry)")
    out.print(f"symmetry: max |C - C^T| / max |C| = {res.asymmetry:.1e}; {res.method}, "
              f"iterations per solve {res.iterations}")
    return EXIT_OK


def _converge(args: argparse.Namespace) -> int:
    from .study import plot_study, run_study

    def progress(level: int, cells) -> None:
        out.print(f"level {level}: {cells[0]} x {cells[1]} x {cells[2]} cells ...")

    study = run_study(args.job, args.levels, args.ratio, args.folder, progress=None if args.quiet else progress,
                      datum=args.datum)
    png = plot_study(study, Path(study.folder) / "convergence.png")
    if args.quiet:
        return quiet_result(study.folder)
    levels = Table(title="levels", title_justify="left", box=None)
    for col in ("level", "cells", "h (m)", "ratio per axis"):
        levels.add_column(col)
    for i, lv in enumerate(study.levels):
        levels.add_row(str(i), " x ".join(map(str, lv.cells)), f"{lv.h:.4g}",
                       "-" if i == 0 else ", ".join(f"{r:.4g}" for r in lv.ratios))
    out.print(levels)
    if study.levels and study.levels[0].selected:
        sel = Table(title="selected volume per level (m^3; cells whose centre lies in the shape)",
                    title_justify="left", box=None)
        sel.add_column("region")
        sel.add_column("shape", justify="right")
        for i in range(len(study.levels)):
            sel.add_column(f"level {i}", justify="right")
        for label, first in study.levels[0].selected.items():
            sel.add_row(escape(label), f"{first['shape_volume']:.4g}",
                        *(f"{lv.selected[label]['volume']:.4g}" if label in lv.selected else "-"
                          for lv in study.levels))
        out.print(sel)
    for change in study.geometry_changes:
        warn(change)
    table = Table(title="Grid Convergence Index on the finest level (Roache; Fs = 1.25)",
                  title_justify="left", box=None)
    for col in ("quantity", "finest", "order p", "extrapolated", "GCI", "GCI %", "% of", "convergence"):
        table.add_column(col, justify="left" if col in ("quantity", "convergence", "% of") else "right",
                         no_wrap=col == "quantity")
    for key, r in study.results.items():
        of = "range" if r.relative_to.startswith("range") else "datum" if "datum" in r.relative_to else "|f1|"
        table.add_row(escape(key), f"{r.f1:.6g}", f"{r.order:.3f}", f"{r.extrapolated:.6g}",
                      f"{r.gci:.3g}", f"{100 * r.gci_relative:.3g}", of, r.convergence)
    out.print(table)
    units = study.solution_units
    scale = (f"|f1 - {study.datum:g} {units}| (--datum)" if study.datum is not None else
             f"the range of the solution on the finest level, {study.levels[-1].solution_range:.4g} {units}")
    out.print(f"GCI % of values of the solution (maximum, probes) is relative to {scale}; of flows and "
              "charges, to |f1|", soft_wrap=True)
    out.print(f"study: {escape(study.folder)} (study.json, level-*.zarr); figure: {escape(str(png))}")
    return EXIT_OK


def _report(args: argparse.Namespace) -> int:
    from .report import write_report

    index = write_report(args.result, args.folder)
    _warn_if_not_converged(args.result)
    if args.quiet:
        return quiet_result(index)
    out.print(f"report: {escape(str(index))}")
    return EXIT_OK


def _warn_if_not_converged(result_path: str) -> None:
    from .export import open_result

    warning = open_result(result_path, warn=False).warning
    if warning:
        err.print(f"[yellow]warning:[/yellow] {escape(warning)}", soft_wrap=True)


def _export(args: argparse.Namespace) -> int:
    from .export import open_result, write_vtk

    result = open_result(args.result, warn=False)
    if result.warning:
        err.print(f"[yellow]warning:[/yellow] {escape(result.warning)}", soft_wrap=True)
    fields = args.fields.split(",") if args.fields else None
    path = write_vtk(result, args.vti, fields)
    if args.quiet:
        return quiet_result(path)
    kind = "VTK image data" if path.suffix == ".vti" else "VTK rectilinear grid (graded axes)"
    out.print(f"{kind}: {escape(str(path))}")
    return EXIT_OK


def _demo(args: argparse.Namespace) -> int:
    from .demo import run_demo

    return run_demo(Path(args.dir), out)


# The commands parser() declares itself; the queue's (submit, list, worker, ...) come from
# sevenfold.queue.commands, which is imported only when the command line asks for one of them
# or for the whole list (``sevenfold --help``, a misspelt command): a `run` starts sooner.
CORE_COMMANDS = frozenset({"check", "run", "capacitance", "converge", "report", "export", "demo"})


def parser(queue: bool = True) -> argparse.ArgumentParser:
    """The command-line parser; ``queue`` False leaves out the queue's subcommands."""
    p = argparse.ArgumentParser(
        prog="sevenfold",
        description="Steady -div(k grad u) = f on 3D box grids: job file in, chunked zarr out.",
    )
    p.add_argument("--version", action="version", version=f"sevenfold {__version__}")
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")

    c = sub.add_parser("check", help="validate a job file and show what it will need")
    c.add_argument("job", help="job file (TOML)")
    c.set_defaults(func=_check)

    r = sub.add_parser("run", help="run a job in the foreground")
    r.add_argument("job", help="job file (TOML)")
    r.add_argument("--output", "-o", help="result path (overrides output.path)")
    r.add_argument("--quiet", "-q", action="store_true", help="print only the result path (and errors)")
    r.add_argument("--no-progress", action="store_true", help="no progress bar; the summary as usual")
    r.add_argument("--here", action="store_true",
                   help="solve in this process even when an idle queue worker on this machine could take "
                        "the job (it does by default: same result, kernels already loaded)")
    r.add_argument("--home", metavar="DIR", help="queue home whose worker may take the job (default "
                                                 "$SEVENFOLD_HOME, else the user data directory)")
    r.set_defaults(func=_run)

    cap = sub.add_parser("capacitance", help="capacitance matrix of an electrostatics job's electrodes")
    cap.add_argument("job", help="job file (TOML) with physics = 'electrostatics' and one or more [[hold]] "
                                 "(one: its self-capacitance to the grounded faces)")
    cap.set_defaults(func=_capacitance)

    cv = sub.add_parser("converge", help="grid-convergence study: observed order, extrapolation, GCI")
    cv.add_argument("job", help="job file (TOML)")
    cv.add_argument("--levels", type=int, default=3, help="number of grids, at least 3 (default 3)")
    cv.add_argument("--ratio", type=float, default=2.0, help="refinement ratio between levels (default 2)")
    cv.add_argument("--folder", help="where the levels go (default <output stem>.converge)")
    cv.add_argument("--quiet", "-q", action="store_true", help="print only the study folder (and errors)")
    cv.add_argument("--datum", type=float, metavar="VALUE",
                    help="measure the relative GCI of solution values (maximum, probes) against their "
                         "distance from VALUE (solution units, SI) instead of the solution's range")
    cv.set_defaults(func=_converge)

    rp = sub.add_parser("report", help="PNG figures and a one-page HTML summary of a result")
    rp.add_argument("result", help="result (zarr group written by run)")
    rp.add_argument("--folder", help="where the report goes (default <result stem>.report)")
    rp.add_argument("--quiet", "-q", action="store_true", help="print only the index.html path (and errors)")
    rp.set_defaults(func=_report)

    ex = sub.add_parser("export", help="write a result as VTK image data (.vti), or a rectilinear grid "
                                       "(.vtr) when an axis is graded")
    ex.add_argument("result", help="result (zarr group written by run)")
    ex.add_argument("--vti", "--vtk", dest="vti", required=True, metavar="FILE",
                    help="the VTK file to write (.vti; a graded result is written as .vtr beside it)")
    ex.add_argument("--fields", help="comma-separated arrays to include (default: all cell fields)")
    ex.add_argument("--quiet", "-q", action="store_true", help="print only the written file's path (and errors)")
    ex.set_defaults(func=_export)

    d = sub.add_parser("demo", help="copy the example jobs into DIR and run them")
    d.add_argument("dir", nargs="?", default="sevenfold-demo", help="folder (default ./sevenfold-demo)")
    d.set_defaults(func=_demo)
    if queue:
        __import__("sevenfold.queue.commands", fromlist=["register"]).register(sub)  # submit, list, worker, ...
    return p


def main(argv: list[str] | None = None) -> int:
    """The ``sevenfold`` entry point: a command's exit code. A reader that closes stdout
    early (``sevenfold list --json | head``) ends the command quietly with exit 0."""
    try:
        try:
            return _dispatch(argv)
        finally:
            sys.stdout.flush()  # a pipe closed early fails here, not at interpreter exit
    except BrokenPipeError:
        try:  # nothing more reaches the reader; stop Python's own flush at exit from failing
            os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        except (OSError, ValueError):
            pass
        return EXIT_OK


def _dispatch(argv: list[str] | None) -> int:
    words = sys.argv[1:] if argv is None else argv
    if words[:1] != ["worker"]:  # (a worker's slots run job after job: huge pages pay there)
        small_pages()  # before anything imports numpy
    args = parser(queue=not words or words[0] not in CORE_COMMANDS).parse_args(argv)
    try:
        return args.func(args)
    except JobError as exc:
        err.print(f"[red]error:[/red] {escape(str(exc))}", soft_wrap=True)
        return EXIT_INPUT
    except SolverError as exc:
        err.print(f"[red]solver failed:[/red] {escape(str(exc))}", soft_wrap=True)
        if exc.output is not None:
            p = exc.partial
            err.print(f"[yellow]result kept, NOT converged[/yellow] (converged = false, best relative "
                      f"residual {p.best_relative_residual:.2e}, the last iterate's "
                      f"{p.final_relative_residual:.2e}): {escape(str(exc.output))}", soft_wrap=True)
        return EXIT_SOLVER
    except Cancelled as exc:
        err.print(f"cancelled: {escape(str(exc))}")
        return EXIT_SOLVER
    except SevenfoldError as exc:
        err.print(f"[red]error:[/red] {escape(str(exc))}", soft_wrap=True)
        return EXIT_INPUT
    except KeyboardInterrupt:
        err.print("interrupted; no result was written")
        return EXIT_INTERRUPTED
    except BrokenPipeError:
        raise
    except OSError as exc:  # a file the code did not expect to fail: still one line, not a traceback
        where = f"{exc.filename}: " if exc.filename else ""
        err.print(f"[red]error:[/red] {escape(where + (exc.strerror or str(exc)))}", soft_wrap=True)
        return EXIT_INPUT


def program() -> NoReturn:
    """The ``sevenfold`` console command: :func:`main`, then exit with its code. What the
    command allocated is frozen out of the garbage collector first: the interpreter's shutdown
    would otherwise walk every object that numba, pydantic, scipy and zarr keep, several
    times over (0.18-0.22 s of a whole 32^3 or 128^3 run, benchmarks/RESULTS_LOAD.md), only to
    free memory the ending process gives back anyway."""
    code = main()
    gc.freeze()
    sys.exit(code)


if __name__ == "__main__":
    program()
