"""``sevenfold report``: PNG figures and a one-page HTML summary of a finished result.

Everything is written into one folder (default ``<result stem>.report`` beside the result):
``residuals.png``, ``slices.png``, ``probes.png`` (when the job has line probes) and
``index.html``, which refers to the figures by relative name and needs no network.
"""

from __future__ import annotations

import html
import math
from dataclasses import dataclass
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
    ax.set_title(f"{result.spec.name}: {solver.get('method', '')} residual history"
                 + ("" if result.converged else " (NOT converged)"))
    ax.grid(True, which="both", alpha=0.3)
    fig.tight_layout()
    fig.savefig(target)
    plt.close(fig)
    return target


@dataclass(frozen=True)
class Outline:
    """Where a ``[[patch]]`` or ``[[exchange]]`` meets a slice: ``points`` (2, n) in the
    slice's two axes (metres); ``kind`` is "segment" (a patch across the slice, on the box's
    face), "rectangle" or "circle"; ``source`` is "patch" or "exchange"."""

    label: str
    source: str
    kind: str
    points: np.ndarray


def _rectangle(lo, hi) -> np.ndarray:
    return np.array([[lo[0], hi[0], hi[0], lo[0], lo[0]], [lo[1], lo[1], hi[1], hi[1], lo[1]]])


def _circle(centre, radius: float) -> np.ndarray:
    t = np.linspace(0.0, 2.0 * np.pi, 73)
    return np.array([centre[0] + radius * np.cos(t), centre[1] + radius * np.sin(t)])


def placed_outlines(spec, normal: int, at: float, bounds) -> list[Outline]:
    """The patches and exchanges of ``spec`` on the slice ``axis normal = at`` of the box
    ``bounds`` ((lo, hi) per axis): patches on the slice's own plane direction are drawn as
    their footprint seen through the slice, the others where they cross it."""
    from .grid import FACE_AXIS

    a, b = (x for x in range(3) if x != normal)
    clip = lambda v, ax: min(max(v, bounds[ax][0]), bounds[ax][1])  # noqa: E731
    out: list[Outline] = []
    for i, p in enumerate(spec.patch):
        label = p.name or f"patch {i}"
        axis, side = FACE_AXIS[p.face]
        plane = bounds[axis][side]
        if axis == normal:
            lo = (clip(p.box.min[a], a), clip(p.box.min[b], b))
            hi = (clip(p.box.max[a], a), clip(p.box.max[b], b))
            out.append(Outline(label, "patch", "rectangle", _rectangle(lo, hi)))
        elif p.box.min[normal] <= at <= p.box.max[normal]:
            other = b if axis == a else a
            span = [clip(p.box.min[other], other), clip(p.box.max[other], other)]
            pts = np.array([[plane, plane], span]) if axis == a else np.array([span, [plane, plane]])
            out.append(Outline(label, "patch", "segment", pts))
    for i, e in enumerate(spec.exchange):
        label = e.name or f"exchange {i}"
        shape = e.shape
        if e.box is not None:
            if shape.min[normal] <= at <= shape.max[normal]:
                out.append(Outline(label, "exchange", "rectangle", _rectangle(
                    (shape.min[a], shape.min[b]), (shape.max[a], shape.max[b]))))
        elif e.sphere is not None:
            d = at - shape.center[normal]
            if abs(d) < shape.radius:
                out.append(Outline(label, "exchange", "circle", _circle(
                    (shape.center[a], shape.center[b]), math.sqrt(shape.radius**2 - d * d))))
        else:
            ax = "xyz".index(shape.axis)
            if ax == normal:
                if abs(at - shape.center[ax]) <= shape.length / 2:
                    out.append(Outline(label, "exchange", "circle", _circle(
                        (shape.center[a], shape.center[b]), shape.radius)))
                continue
            d = at - shape.center[normal]
            if abs(d) < shape.radius:
                w = math.sqrt(shape.radius**2 - d * d)
                lo, hi = {}, {}
                for x in (a, b):
                    half = shape.length / 2 if x == ax else w
                    lo[x], hi[x] = shape.center[x] - half, shape.center[x] + half
                out.append(Outline(label, "exchange", "rectangle", _rectangle((lo[a], lo[b]), (hi[a], hi[b]))))
    return out


def _draw_outlines(ax, outlines: list[Outline]) -> None:
    for o in outlines:
        colour = "magenta" if o.source == "patch" else "tab:red"
        style = dict(lw=4.0, solid_capstyle="butt", clip_on=False) if o.kind == "segment" else dict(
            lw=1.2, ls="--" if o.source == "patch" else "-")
        ax.plot(o.points[0], o.points[1], color=colour, **style)
        ax.annotate(o.label, (float(o.points[0][0]), float(o.points[1][0])), color=colour, fontsize=7,
                    xytext=(2, -10 if o.kind == "segment" else 2), textcoords="offset points",
                    annotation_clip=False)


def slice_figure(result: StoredResult, target: Path) -> Path:
    """The solution on the three mid-planes (x, y and z), one shared colour scale; patches
    (magenta: a bar on the box's edge where one crosses the slice, dashed where seen through
    it) and exchanges (red) are outlined, and wells drawn (draw_wells)."""
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
    bounds = [(float(e[0]), float(e[-1])) for e in edges]
    for normal, (ax, (data, a, b, title)) in enumerate(zip(axes, planes)):
        mesh = ax.pcolormesh(edges[a], edges[b], data.T, vmin=lo, vmax=hi, cmap="viridis", shading="flat")
        _draw_outlines(ax, placed_outlines(result.spec, normal, float(centres[normal][mids[normal]]), bounds))
        draw_wells(ax, result.spec.well, normal, edges[normal][mids[normal]:mids[normal] + 2])
        ax.set_xlim(bounds[a])
        ax.set_ylim(bounds[b])
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


def draw_wells(ax, wells, normal: int, cell: np.ndarray) -> None:
    """Each [[well]] on a mid-plane slice whose normal is axis ``normal``: on the z plane a
    marker at (x, y); on the x and y planes its screen, a vertical bar from bottom to top. A
    well whose column the plane cuts is drawn solid, one projected onto the plane dashed."""
    for w in wells:
        if normal == 2:
            ax.plot([w.x], [w.y], marker="v", ms=8, mfc="white", mec="black", ls="none")
            ax.annotate(w.name, (w.x, w.y), xytext=(4, 4), textcoords="offset points", fontsize=8,
                        color="white")
            continue
        across = w.x if normal == 0 else w.y  # its coordinate along the plane's normal
        along = w.y if normal == 0 else w.x  # and along the plane's horizontal axis
        cut = cell[0] <= across <= cell[1]
        ax.plot([along, along], [w.bottom, w.top], color="white", lw=2.5, ls="-" if cut else "--")
        ax.plot([along, along], [w.bottom, w.top], color="black", lw=0.8, ls="-" if cut else "--")
        ax.annotate(w.name, (along, w.top), xytext=(3, 3), textcoords="offset points", fontsize=8,
                    color="white")


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
