"""``sevenfold report``: PNG figures and a one-page HTML summary of a finished result.

Everything is written into one folder (default ``<result stem>.report`` beside the result):
``residuals.png``, ``slices.png``, ``probes.png`` (when the job has line probes) and
``index.html``, which refers to the figures by relative name and needs no network.
"""

from __future__ import annotations

import html
import math
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from .errors import writing
from .export import StoredResult, open_result
from .report_slices import draw_planes, slice_figsize
from .store import not_converged_mark

if TYPE_CHECKING:
    from matplotlib.figure import Figure

DPI = 100
SIZES = {"residuals.png": (6.4, 4.0), "probes.png": (6.4, 4.0)}  # slices.png: slice_figsize


def _plt():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def _figure(figsize) -> Figure:
    return _plt().figure(figsize=figsize, dpi=DPI, layout="constrained")


def title_figure(fig: Figure, result: StoredResult, title: str) -> None:
    """The figure's title; a result that did not converge says so in it, in red, with why
    and the best residual reached."""
    mark = not_converged_mark(result.attrs)
    fig.suptitle(title if mark is None else f"{title}\n{mark}", color="black" if mark is None else "#b00000")


def _save(fig: Figure, target):
    try:
        fig.savefig(target)
    finally:
        _plt().close(fig)
    return target


def draw_residuals(result: StoredResult) -> Figure:
    """The relative residual per iteration on a log axis, with rtol."""
    history = np.asarray(result.group["residual_history"][...])
    solver = result.attrs.get("solver", {})
    fig = _figure(SIZES["residuals.png"])
    ax = fig.add_subplot()
    positive = history > 0
    its = np.arange(history.size)
    ax.semilogy(its[positive], history[positive], "o-", ms=3)
    if "rtol" in solver:
        ax.axhline(solver["rtol"], color="k", ls="--", lw=1, label=f"rtol {solver['rtol']:.0e}")
        ax.legend()
    ax.set_xlabel("iteration")
    ax.set_ylabel("relative residual ||b - Au|| / ||b||")
    ax.grid(True, which="both", alpha=0.3)
    title_figure(fig, result, f"{result.spec.name}: {solver.get('method', '')} residual history")
    return fig


def draw_slices(result: StoredResult) -> Figure:
    """The solution on the three mid-planes, true to scale (see report_slices)."""
    fig = _figure(slice_figsize([float(np.ptp(result.edges(a))) for a in range(3)]))
    draw_planes(result, fig)
    title_figure(fig, result, f"{result.spec.name}: {result.solution} on the mid-planes")
    return fig


def line_probes(result: StoredResult) -> list[str]:
    return [p.name for p in result.spec.probe if p.line is not None]


def draw_probes(result: StoredResult) -> Figure:
    """Each line probe's values against the distance along it."""
    fig = _figure(SIZES["probes.png"])
    ax = fig.add_subplot()
    for name in line_probes(result):
        values = np.asarray(result.group[f"probe_{name}"][...])
        distance = np.asarray(result.group[f"probe_{name}_distance"][...])
        ax.plot(distance, values, ".-", label=name)
    ax.set_xlabel("distance along the probe line (m)")
    ax.set_ylabel(f"{result.solution} ({result.units(result.solution)})")
    ax.grid(True, alpha=0.3)
    ax.legend()
    title_figure(fig, result, f"{result.spec.name}: probe lines")
    return fig


def residual_figure(result: StoredResult, target):
    """Write :func:`draw_residuals`'s figure to ``target`` (a path or a binary file); so the next two."""
    return _save(draw_residuals(result), target)


def slice_figure(result: StoredResult, target):
    return _save(draw_slices(result), target)


def probe_figure(result: StoredResult, target):
    return _save(draw_probes(result), target)


def _table(rows: list[tuple[str, str]], head: tuple[str, str] | None = None) -> str:
    out = ["<table>"]
    if head:
        out.append("<tr>" + "".join(f"<th>{html.escape(h)}</th>" for h in head) + "</tr>")
    for a, b in rows:
        out.append(f"<tr><td>{html.escape(a)}</td><td class='num'>{html.escape(b)}</td></tr>")
    out.append("</table>")
    return "\n".join(out)


def _fmt(v) -> str:
    if isinstance(v, bool) or v is None:
        return str(v)
    if isinstance(v, (int, float)):
        return f"{v:.6g}" if math.isfinite(v) else str(v)
    return str(v)


def write_report(result_path: str | Path, folder: str | Path | None = None) -> Path:
    """Write the figures and ``index.html``; returns the HTML file's path."""
    from .balance import balance_rows

    result = open_result(result_path, warn=False)  # the page itself carries the warning
    path = result.path.resolve()
    folder = Path(folder) if folder is not None else path.with_name(path.stem + ".report")
    with writing(folder, "the report folder"):
        folder.mkdir(parents=True, exist_ok=True)
        figures = [("residual history", residual_figure(result, folder / "residuals.png")),
                   ("mid-plane slices" + (" (wells: triangles on the z plane, screens as bars on the others, dashed "
                                          "where projected onto the plane)" if result.spec.well else ""),
                    slice_figure(result, folder / "slices.png"))]
        if line_probes(result):
            figures.append(("probe lines", probe_figure(result, folder / "probes.png")))

    attrs = result.attrs
    spec = result.spec
    nx, ny, nz = (result.edges(a).size - 1 for a in range(3))
    graded = [c for a, c in enumerate("xyz") if np.ptp(np.diff(result.edges(a))) > 1e-9 * np.diff(result.edges(a)).max()]
    solver = attrs.get("solver", {})
    balance = attrs.get("balance")
    sections = [
        f"<h1>{html.escape(spec.name)}</h1>",
        f"<p>{html.escape(spec.physics)} job, {nx} x {ny} x {nz} = {nx * ny * nz:,} cells"
        f"{' (graded along ' + ', '.join(graded) + ')' if graded else ''}; "
        f"solution <b>{html.escape(result.solution)}</b> in {html.escape(result.units(result.solution))}; "
        f"result <code>{html.escape(path.name)}</code>, sevenfold {html.escape(str(attrs.get('sevenfold_version', '')))}</p>",
        *([f"<p style='color:#a00;font-weight:bold'>Warning: {html.escape(result.warning)}</p>"]
          if result.warning else []),
        "<h2>Solver</h2>",
        _table([(k, _fmt(solver[k])) for k in ("method", "iterations", "converged", "stop", "final_relative_residual",
                                                "best_relative_residual", "solution_iterate", "rtol", "unknowns",
                                                "setup_seconds", "solve_seconds") if k in solver]),
    ]
    if balance:
        sections += ["<h2>Balance</h2>",
                     f"<p>Amounts in {html.escape(balance['units'])}; outflows positive leaving the box, "
                     "hold inflows positive into the hold, an electrode's charge is minus its inflow.</p>",
                     _table([(a, f"{v:.6g}") for a, v in balance_rows(balance)]
                            + [("relative imbalance", f"{balance['relative_imbalance']:.2e}")],
                            ("term", balance["units"]))]
    headline = attrs.get("headline")
    if headline:
        from .headline import headline_rows

        sections += ["<h2>Headline numbers</h2>",
                     "<p>Regions: the cells whose centre lies in the shape, their volume beside the "
                     "shape's own volume in the box; mean volume-weighted. All values SI.</p>",
                     _table(headline_rows(headline), ("quantity", "value"))]
    warnings = attrs.get("warnings") or []
    if warnings:
        sections += ["<h2>Warnings</h2>", "<ul>" + "".join(f"<li>{html.escape(w)}</li>" for w in warnings) + "</ul>"]
    units = attrs.get("input_units") or []
    if units:
        sections += ["<p>Read from the job file in practitioner units, converted to SI: "
                     + "; ".join(html.escape(u) for u in units) + "</p>"]
    if solver.get("switch"):
        from .queue.watch import switch_text

        sections.insert(sections.index("<h2>Solver</h2>") + 1,
                        f"<p><b>{html.escape(switch_text(solver['switch']))}</b>; the residual history "
                        f"below is {html.escape(str(solver.get('method', '')))}'s.</p>")
    points = [p for p in spec.probe if p.point is not None]
    if points:
        sections += ["<h2>Probe points</h2>", _table(
            [(f"{p.name} at ({', '.join(f'{c:g}' for c in p.point)}) m",
              f"{float(result.group[f'probe_{p.name}'][0]):.6g}") for p in points],
            ("probe", f"{result.solution} ({result.units(result.solution)})"))]
    sections.append("<h2>Figures</h2>")
    for title, fig in figures:
        sections.append(f"<figure><img src='{html.escape(fig.name)}' alt='{html.escape(title)}'>"
                        f"<figcaption>{html.escape(title)}</figcaption></figure>")
    page = (
        "<!DOCTYPE html>\n<html lang='en'><head><meta charset='utf-8'>"
        f"<title>{html.escape(spec.name)}: sevenfold report</title><style>"
        "body{font-family:sans-serif;max-width:1400px;margin:1em auto;padding:0 1em}"
        "table{border-collapse:collapse;margin:.5em 0}td,th{border:1px solid #bbb;padding:2px 8px}"
        "td.num{text-align:right;font-family:monospace}img{max-width:100%}"
        "</style></head><body>\n" + "\n".join(sections) + "\n</body></html>\n"
    )
    index = folder / "index.html"
    with writing(index, "the report page"):
        index.write_text(page, encoding="utf-8")
    return index
