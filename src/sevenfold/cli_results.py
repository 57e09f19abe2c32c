"""The commands that read a finished result: ``report`` (figures and an HTML page) and
``export`` (VTK); both warn when the result did not converge."""

from __future__ import annotations

import argparse

from rich.markup import escape

from .console import err, out, quiet_result
from .errors import EXIT_OK


def report(args: argparse.Namespace) -> int:
    """``report``: PNG figures and a one-page index.html (default folder <result stem>.report)."""
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


def export(args: argparse.Namespace) -> int:
    """``export``: the result as a VTK file (.vti, or .vtr when an axis is graded)."""
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
