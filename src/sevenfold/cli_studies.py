"""The commands that solve a job several times and print a table: ``capacitance`` (a solve
per electrode) and ``converge`` (the job on refined grids, with the GCI)."""

from __future__ import annotations

import argparse
from pathlib import Path

from rich.markup import escape
from rich.table import Table

from .console import out, quiet_result, warn
from .errors import EXIT_OK, JobError


def capacitance(args: argparse.Namespace) -> int:
    """``capacitance``: the electrodes' capacitance matrix (per metre for a thin 2D problem)."""
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


def converge(args: argparse.Namespace) -> int:
    """``converge``: the levels, the selected volumes and the GCI table; a figure."""
    from .report_study import plot_study
    from .study import run_study

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
