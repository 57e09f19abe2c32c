"""``sevenfold report``: PNG figures and a one-page HTML summary of a finished result.

Everything is written into one folder (default ``<result stem>.report`` beside the result):
``residuals.png``, ``slices.png``, ``probes.png`` (when the job has line probes) and
``index.html``, which refers to the figures by relative name and needs no network.
"""

from __future__ import annotations

import html
import math
from pathlib import Path

import numpy as np

from .errors import writing
from .export import StoredResult, open_result

DPI = 100
SIZES = {"residuals.png": (6.4, 4.0), "slices.png": (13.5, 4.2), "probes.png": (6.4, 4.0)}


def _plt():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def residual_figure(result: StoredResult, target: Path) -> Path:
    plt = _plt()
    history = np.asarray(result.group["residual_history"][...])
    solver = result.attrs.get("solver", {})
    fig, ax = plt.subplots(figsize=SIZES["residuals.png"], dpi=DPI)
    positive = history > 0
    its = np.arange(history.size)
    ax.semilogy(its[positive], history[positive], "o-", ms=3)
    if "rtol" in solver:
        ax.axhline(solver["rtol"], color="k", ls="--", lw=1, label=f"rtol {solver['rtol']:.0e}")
        ax.legend()
    ax.set_xlabel("iteration")
    ax.set_ylabel("relative residual ||b - Au|| / ||b||")
    ax.set_title(f"{result.spec.name}: {solver.get('method', '')} residual history")
    ax.grid(True, which="both", alpha=0.3)
    fig.tight_layout()
    fig.savefig(target)
    plt.close(fig)
    return target


def slice_figure(result: StoredResult, target: Path) -> Path:
    """The solution on the three mid-planes (x, y and z), one shared colour scale."""
    plt = _plt()
    name = result.solution
    u = result.lazy(name)  # read plane by plane below: never the whole field
    units = result.units(name)
    edges = [result.edges(a) for a in range(3)]
    centres = [0.5 * (e[1:] + e[:-1]) for e in edges]
    mids = [int(np.argmin(np.abs(c - 0.5 * (e[0] + e[-1])))) for c, e in zip(centres, edges)]  # nearest the middle
    planes = [
        (np.asarray(u[mids[0], :, :]), 1, 2, f"x = {centres[0][mids[0]]:.4g} m"),
        (np.asarray(u[:, mids[1], :]), 0, 2, f"y = {centres[1][mids[1]]:.4g} m"),
        (np.asarray(u[:, :, mids[2]]), 0, 1, f"z = {centres[2][mids[2]]:.4g} m"),
    ]
    lo = min(float(p[0].min()) for p in planes)
    hi = max(float(p[0].max()) for p in planes)
    if hi == lo:
        hi = lo + (abs(lo) * 1e-6 or 1e-12)
    fig, axes = plt.subplots(1, 3, figsize=SIZES["slices.png"], dpi=DPI, layout="constrained")
    mesh = None
    for ax, (data, a, b, title) in zip(axes, planes):
        mesh = ax.pcolormesh(edges[a], edges[b], data.T, vmin=lo, vmax=hi, cmap="viridis", shading="flat")
        extent = (edges[a][-1] - edges[a][0], edges[b][-1] - edges[b][0])
        ratio = extent[1] / extent[0]
        ax.set_aspect("equal" if 0.25 <= ratio <= 4 else "auto")
        ax.set_xlabel(f"{'xyz'[a]} (m)")
        ax.set_ylabel(f"{'xyz'[b]} (m)")
        ax.set_title(title)
    fig.colorbar(mesh, ax=list(axes), label=f"{name} ({units})", shrink=0.8)
    fig.suptitle(f"{result.spec.name}: {name} on the mid-planes")
    fig.savefig(target)
    plt.close(fig)
    return target


def line_probes(result: StoredResult) -> list[str]:
    return [p.name for p in result.spec.probe if p.line is not None]


def probe_figure(result: StoredResult, target: Path) -> Path:
    plt = _plt()
    fig, ax = plt.subplots(figsize=SIZES["probes.png"], dpi=DPI)
    for name in line_probes(result):
        values = np.asarray(result.group[f"probe_{name}"][...])
        distance = np.asarray(result.group[f"probe_{name}_distance"][...])
        ax.plot(distance, values, ".-", label=name)
    ax.set_xlabel("distance along the probe line (m)")
    ax.set_ylabel(f"{result.solution} ({result.units(result.solution)})")
    ax.set_title(f"{result.spec.name}: probe lines")
    ax.grid(True, alpha=0.3)
    ax.legend()
    fig.tight_layout()
    fig.savefig(target)
    plt.close(fig)
    return target


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

    result = open_result(result_path)
    path = result.path.resolve()
    folder = Path(folder) if folder is not None else path.with_name(path.stem + ".report")
    with writing(folder, "the report folder"):
        folder.mkdir(parents=True, exist_ok=True)
        figures = [("residual history", residual_figure(result, folder / "residuals.png")),
                   ("mid-plane slices", slice_figure(result, folder / "slices.png"))]
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
        "<h2>Solver</h2>",
        _table([(k, _fmt(solver[k])) for k in ("method", "iterations", "converged", "final_relative_residual",
                                                "rtol", "unknowns", "setup_seconds", "solve_seconds") if k in solver]),
    ]
    if balance:
        sections += ["<h2>Balance</h2>",
                     f"<p>Amounts in {html.escape(balance['units'])}; outflows positive leaving the box, "
                     "hold inflows positive into the hold, an electrode's charge is minus its inflow.</p>",
                     _table([(a, f"{v:.6g}") for a, v in balance_rows(balance)]
                            + [("relative imbalance", f"{balance['relative_imbalance']:.2e}")],
                            ("term", balance["units"]))]
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
