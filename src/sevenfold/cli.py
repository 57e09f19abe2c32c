"""The ``sevenfold`` command: a thin shell over :mod:`sevenfold.runner`.

Exit codes (:mod:`sevenfold.errors`): 0 success, 1 solver failure, 2 bad input, 130 interrupted.

This module is the parser and the entry point, where errors become exit codes; the core
commands are :mod:`.cli_check`, :mod:`.cli_run`, :mod:`.cli_studies` (capacitance,
converge) and :mod:`.cli_results` (report, export); the queue's are
:mod:`sevenfold.queue.commands`.
"""

from __future__ import annotations

import argparse
import gc
import os
import sys
from pathlib import Path
from typing import NoReturn

from . import one_blas_thread, small_pages

one_blas_thread()  # before anything imports numpy

from rich.markup import escape  # noqa: E402

from . import __version__, cli_check, cli_results, cli_run, cli_studies  # noqa: E402
from .console import err, out  # noqa: E402
from .errors import (EXIT_INPUT, EXIT_INTERRUPTED, EXIT_OK, EXIT_SOLVER, Cancelled, JobError,  # noqa: E402
                     SevenfoldError, SolverError)

__all__ = ["EXIT_INPUT", "EXIT_INTERRUPTED", "EXIT_OK", "EXIT_SOLVER", "main", "parser", "program"]


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
    c.set_defaults(func=cli_check.check)

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
    r.set_defaults(func=cli_run.run)

    cap = sub.add_parser("capacitance", help="capacitance matrix of an electrostatics job's electrodes")
    cap.add_argument("job", help="job file (TOML) with physics = 'electrostatics' and one or more [[hold]] "
                                 "(one: its self-capacitance to the grounded faces)")
    cap.set_defaults(func=cli_studies.capacitance)

    cv = sub.add_parser("converge", help="grid-convergence study: observed order, extrapolation, GCI")
    cv.add_argument("job", help="job file (TOML)")
    cv.add_argument("--levels", type=int, default=3, help="number of grids, at least 3 (default 3)")
    cv.add_argument("--ratio", type=float, default=2.0, help="refinement ratio between levels (default 2)")
    cv.add_argument("--folder", help="where the levels go (default <output stem>.converge)")
    cv.add_argument("--quiet", "-q", action="store_true", help="print only the study folder (and errors)")
    cv.add_argument("--datum", type=float, metavar="VALUE",
                    help="measure the relative GCI of solution values (maximum, probes) against their "
                         "distance from VALUE (solution units, SI) instead of the solution's range")
    cv.set_defaults(func=cli_studies.converge)

    rp = sub.add_parser("report", help="PNG figures and a one-page HTML summary of a result")
    rp.add_argument("result", help="result (zarr group written by run)")
    rp.add_argument("--folder", help="where the report goes (default <result stem>.report)")
    rp.add_argument("--quiet", "-q", action="store_true", help="print only the index.html path (and errors)")
    rp.set_defaults(func=cli_results.report)

    ex = sub.add_parser("export", help="write a result as VTK image data (.vti), or a rectilinear grid "
                                       "(.vtr) when an axis is graded")
    ex.add_argument("result", help="result (zarr group written by run)")
    ex.add_argument("--vti", "--vtk", dest="vti", required=True, metavar="FILE",
                    help="the VTK file to write (.vti; a graded result is written as .vtr beside it)")
    ex.add_argument("--fields", help="comma-separated arrays to include (default: all cell fields)")
    ex.add_argument("--quiet", "-q", action="store_true", help="print only the written file's path (and errors)")
    ex.set_defaults(func=cli_results.export)

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
