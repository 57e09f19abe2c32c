"""What the shells print: the consoles, the run's progress bar and closing summary, and
the balance and headline tables (``sevenfold run`` in this process or handed to a queue
worker, ``sevenfold show``)."""

from __future__ import annotations

import math
from pathlib import Path
from typing import TYPE_CHECKING, Any

from rich.console import Console, ConsoleDimensions
from rich.markup import escape
from rich.table import Table

if TYPE_CHECKING:  # rich.progress loads only when a run shows progress
    from rich.progress import Progress


# The width of a console that does not write to a terminal (a pipe, a file, a captured log):
# lines are not broken where a terminal would have ended; only COLUMNS sets another width.
UNWRAPPED = 10_000


class _Console(Console):
    """rich's Console, except that

    * off a terminal it does not wrap: it is :data:`UNWRAPPED` wide, unless COLUMNS is set
      (rich's own default there is 80 columns, breaking sentences in a log mid-line);
    * a closed stdout (``| head``) raises BrokenPipeError for :func:`main` to end quietly,
      instead of rich's own exit with status 1."""

    @property
    def size(self) -> ConsoleDimensions:
        size = super().size
        if self._width is None and not self.is_terminal:
            return ConsoleDimensions(UNWRAPPED, size.height)
        return size

    @size.setter
    def size(self, new_size: tuple[int, int]) -> None:
        Console.size.fset(self, new_size)  # type: ignore[attr-defined]

    def on_broken_pipe(self) -> None:
        self.quiet = True
        raise BrokenPipeError


out = _Console(highlight=False)
err = _Console(stderr=True, highlight=False)


def quiet_result(path: Path | str) -> int:
    """``--quiet``: the result's path alone on stdout, unwrapped."""
    print(str(path), flush=True)
    return 0


def run_progress(disable: bool) -> Progress:
    """The bar a run shows: name, bar, iteration and residual, elapsed time."""
    from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

    return Progress(TextColumn("[bold]{task.description}"), BarColumn(), TextColumn("{task.fields[info]}"),
                    TimeElapsedColumn(), console=out, transient=False, disable=disable)


class ProgressMonitor:
    """Shows iteration and relative residual; the bar fills as log(residual) nears log(rtol).
    ``quiet`` (``--quiet``: stdout holds the result's path alone): no switch lines, and notes
    go to stderr."""

    def __init__(self, progress: Progress, task, rtol: float, quiet: bool = False) -> None:
        self.progress, self.task, self.goal = progress, task, -math.log10(rtol)
        self.quiet = quiet

    def iteration(self, iteration: int, relative_residual: float, elapsed: float) -> None:
        done = -math.log10(relative_residual) if relative_residual > 0 else self.goal
        self.progress.update(
            self.task, completed=min(max(done, 0.0), self.goal),
            info=f"iteration {iteration:4d}  residual {relative_residual:.2e}",
        )

    def switched(self, info: dict) -> None:
        """``auto`` changed method mid-solve: a marked line above the bar."""
        if self.quiet:
            return
        from .queue.watch import switch_text

        self.progress.console.print(f"[yellow]***[/yellow] {escape(switch_text(info))}", soft_wrap=True)

    def stop_requested(self) -> bool:
        return False

    def note(self, text: str) -> None:
        """A line above the bar (the first run's compile notice); on stderr with --quiet."""
        (err if self.quiet else self.progress.console).print(f"[yellow]{escape(text)}[/yellow]")


def balance_table(balance: dict, title: str = "balance") -> Table:
    """A result's balance (``attrs["balance"]``) as a table: amounts and the imbalance."""
    from .balance import balance_rows

    table = Table(title=title, box=None, title_justify="left")
    table.add_column("term")
    units = balance.get("units", "")
    table.add_column("" if units == "1" else units, justify="right")  # (dimensionless: no header)
    for label, value in balance_rows(balance):
        table.add_row(escape(label), f"{value:.6g}")
    table.add_row("relative imbalance", f"{balance['relative_imbalance']:.2e}")
    return table


def headline_table(headline: dict, title: str = "headline numbers") -> Table:
    """A result's headline numbers (``attrs["headline"]``) as a two-column table."""
    from .headline import headline_rows

    table = Table(title=title, box=None, title_justify="left", show_header=False)
    table.add_column("quantity", no_wrap=True)
    table.add_column("value", overflow="fold")
    for label, text in headline_rows(headline):
        table.add_row(escape(label), escape(text))
    return table


def warn(text: str) -> None:
    """One warning line (the cautions channel): printed, never a refusal."""
    out.print(f"[yellow]warning:[/yellow] {escape(text)}", soft_wrap=True)


def run_summary(summary: dict[str, Any]) -> str:
    """The line that ends a run: how the solve stopped, its iterations and residual, and
    where the time went. ``summary``: :meth:`SolveResult.summary` with the run's
    ``seconds`` (build, compile on a first run, assemble, setup, solve, write, job) added, as
    a queue job keeps it."""
    secs = summary.get("seconds") or {}
    compiled = f"compile {secs['compile']:.2f} s, " if "compile" in secs else ""
    sw = summary.get("switch")  # the marked line above gave its reason
    switched = f" (auto switched from {sw['from']} after {sw['after_iterations']} {sw['from']} iterations)" if sw else ""
    return (f"{'converged' if summary.get('converged') else 'stopped'}: {summary.get('method')}{switched}, "
            f"{summary.get('iterations')} iterations, relative residual "
            f"{summary.get('final_relative_residual', math.nan):.2e}, job {secs.get('job', math.nan):.2f} s "
            f"({compiled}assembly {secs.get('assemble', math.nan):.2f} s, setup {summary.get('setup_seconds', math.nan):.2f} s, "
            f"solve {summary.get('solve_seconds', math.nan):.2f} s, write {secs.get('write', math.nan):.2f} s)")


def print_run_end(summary: dict[str, Any], balance: dict | None, headline: dict | None,
                  output: Path, probes_csv: Path | None) -> None:
    """What a run prints at its end: :func:`run_summary`, the balance and headline tables,
    and the paths of the result, its residual log and its probe table."""
    from .residual_log import log_path

    out.print(escape(run_summary(summary)), soft_wrap=True)
    if balance:
        out.print(balance_table(balance))
    if headline:
        out.print(headline_table(headline))
    out.print(f"result: {escape(str(output))}")
    out.print(f"residuals: {escape(str(log_path(output)))}")
    if probes_csv is not None:
        out.print(f"probes: {escape(str(probes_csv))}")
