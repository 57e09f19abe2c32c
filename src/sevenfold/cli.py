"""The ``sevenfold`` command: a thin shell over :mod:`sevenfold.runner`.

Exit codes: 0 success, 1 solver failure, 2 bad input, 130 interrupted.
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from pathlib import Path

from rich.console import Console
from rich.markup import escape
from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn
from rich.table import Table

from . import __version__
from .errors import Cancelled, JobError, SevenfoldError, SolverError

EXIT_OK, EXIT_SOLVER, EXIT_INPUT, EXIT_INTERRUPTED = 0, 1, 2, 130

out = Console(highlight=False)
err = Console(stderr=True, highlight=False)


class ProgressMonitor:
    """Shows iteration and relative residual; the bar fills as log(residual) nears log(rtol)."""

    def __init__(self, progress: Progress, task, rtol: float) -> None:
        self.progress, self.task, self.goal = progress, task, -math.log10(rtol)

    def iteration(self, iteration: int, relative_residual: float, elapsed: float) -> None:
        done = -math.log10(relative_residual) if relative_residual > 0 else self.goal
        self.progress.update(
            self.task, completed=min(max(done, 0.0), self.goal),
            info=f"iteration {iteration:4d}  residual {relative_residual:.2e}",
        )

    def stop_requested(self) -> bool:
        return False


def balance_table(balance: dict, title: str = "balance") -> Table:
    """A result's balance (``attrs["balance"]``) as a table: amounts and the imbalance."""
    from .balance import balance_rows

    table = Table(title=title, box=None, title_justify="left")
    table.add_column("term")
    table.add_column(balance.get("units", ""), justify="right")
    for label, value in balance_rows(balance):
        table.add_row(escape(label), f"{value:.6g}")
    table.add_row("relative imbalance", f"{balance['relative_imbalance']:.2e}")
    return table


def _check(args: argparse.Namespace) -> int:
    from .memory import human
    from .runner import plan_job, prepare_problem

    plan = plan_job(args.job)
    problem = prepare_problem(plan)
    spec = plan.spec
    table = Table(show_header=False, box=None)
    nx, ny, nz = spec.grid.cells
    hx, hy, hz = spec.grid.cell_spacing
    for key, value in (
        ("job", f"{spec.name} ({spec.physics})"),
        ("cells", f"{nx} x {ny} x {nz} = {plan.cells:,}"),
        ("spacing", f"{hx:.4g} x {hy:.4g} x {hz:.4g} m"),
        ("unknowns", f"{problem.unknowns:,}" + (" (pure Neumann: one cell pinned, mean(u) = 0)" if problem.gauge_mean_zero else "")),
        ("method", f"{plan.method}" + (" (chosen by auto)" if spec.solver.method == "auto" else "")),
        ("memory", f"about {human(plan.memory_bytes)} of {human(plan.available_bytes)} available"),
        ("output", str(plan.output)),
    ):
        table.add_row(key, value)
    out.print(table)
    out.print("[green]valid[/green]: the job file, its regions, files and boundary data all check out")
    return EXIT_OK


def _run(args: argparse.Namespace) -> int:
    from .runner import plan_job, run_job

    plan = plan_job(args.job, args.output)
    with Progress(
        TextColumn("[bold]{task.description}"), BarColumn(), TextColumn("{task.fields[info]}"),
        TimeElapsedColumn(), console=out, transient=False, disable=args.quiet,
    ) as progress:
        task = progress.add_task(plan.spec.name, total=-math.log10(plan.spec.solver.rtol), info="building")
        result = run_job(args.job, args.output, ProgressMonitor(progress, task, plan.spec.solver.rtol), plan.spec)
    s = result.solve
    out.print(
        f"{'converged' if s.converged else 'stopped'}: {s.method}, {s.iterations} iterations, "
        f"relative residual {s.final_relative_residual:.2e}, job {result.seconds['job']:.2f} s "
        f"(assembly {result.seconds['assemble']:.2f} s, setup {s.setup_seconds:.2f} s, "
        f"solve {s.solve_seconds:.2f} s, write {result.seconds['write']:.2f} s)"
    )
    if result.balance is not None:
        out.print(balance_table(result.balance.to_dict()))
    out.print(f"result: {escape(str(result.output))}")
    out.print(f"residuals: {escape(str(result.residual_log))}")
    if result.probes_csv is not None:
        out.print(f"probes: {escape(str(result.probes_csv))}")
    return EXIT_OK


def _demo(args: argparse.Namespace) -> int:
    from .demo import run_demo

    return run_demo(Path(args.dir), out)


def parser() -> argparse.ArgumentParser:
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
    r.add_argument("--quiet", "-q", action="store_true", help="no progress bar")
    r.set_defaults(func=_run)

    d = sub.add_parser("demo", help="copy the example jobs into DIR and run them")
    d.add_argument("dir", nargs="?", default="sevenfold-demo", help="folder (default ./sevenfold-demo)")
    d.set_defaults(func=_demo)
    return p


def main(argv: list[str] | None = None) -> int:
    args = parser().parse_args(argv)
    try:
        return args.func(args)
    except JobError as exc:
        err.print(f"[red]error:[/red] {escape(str(exc))}", soft_wrap=True)
        return EXIT_INPUT
    except SolverError as exc:
        err.print(f"[red]solver failed:[/red] {escape(str(exc))}", soft_wrap=True)
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


if __name__ == "__main__":
    sys.exit(main())
