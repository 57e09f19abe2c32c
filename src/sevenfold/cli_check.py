"""``sevenfold check``: validate a job file and show what its run will need."""

from __future__ import annotations

import argparse

from rich.markup import escape
from rich.table import Table

from .console import out, warn
from .errors import EXIT_OK


def check(args: argparse.Namespace) -> int:
    """``check``: the job's grid, regions, method, memory and output in a table; its warnings."""
    from .cautions import job_warnings
    from .memory import human
    from .conditions import placed_rows
    from .runner import plan_job, prepare_problem
    from .solvers.precision import coefficient_contrast, precision_note
    from .units import unit_notes
    from .volumes import domain, extent_text

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
        ("box", extent_text(*domain(grid))),
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
