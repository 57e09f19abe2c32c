"""The report's slice figure: the solution on the x, y and z mid-planes, true to scale.

The three planes are laid out as in a third-angle drawing: the z plane (plan) above the y
plane (front view) on the same x axis, the x plane (side view) to the right of the front
view on the same z axis. Every panel keeps one scale on both its axes, so a sphere stays
round, except that an axis shorter than 1/:data:`MAX_SPAN` of the longest is stretched, by
the whole factor its label states: drawn to scale, a 5 mm plate under a 48 mm spreader is a
strip too thin to read its through-thickness field in. Patches and exchanges are outlined and
named in a legend below the panels, never over the field.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

MAX_SPAN = 4  # longest / shortest axis drawn to scale; beyond it the short axis is stretched
PLOT_AREA = (10.0, 7.5)  # inches the panels may fill at most (width, height)
MARGINS = (2.6, 2.0)  # inches around them: labels, colour bar, titles, legend
FREE_CORNER = 0.25  # the top right (beside the plan) holds the colour bar when this share of both sides
MIN_AREA = (5.0, 3.0)  # inches the panels fill at least
PATCH_COLOURS = ("magenta", "deeppink", "darkviolet", "orchid")
EXCHANGE_COLOURS = ("tab:red", "orangered", "darkred", "salmon")


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


def stretch(extent) -> tuple[int, int, int]:
    """Whole factors by which each axis is drawn longer than to scale: 1, except for an axis
    shorter than 1/:data:`MAX_SPAN` of the longest."""
    longest = max(extent)
    return tuple(max(1, math.ceil(longest / (MAX_SPAN * e))) for e in extent)  # type: ignore[return-value]


def slice_figsize(extent) -> tuple[float, float]:
    """Figure size (inches) of the slice figure for a box of ``extent`` (m per axis): the
    panels' width spans x + y and their height y + z, at one scale, within :data:`PLOT_AREA`."""
    s = stretch(extent)
    dx, dy, dz = (e * f for e, f in zip(extent, s))
    scale = min(PLOT_AREA[0] / (dx + dy), PLOT_AREA[1] / (dy + dz))
    width = max(MIN_AREA[0], scale * (dx + dy))
    height = max(MIN_AREA[1], scale * (dy + dz))
    return (round(width + MARGINS[0], 2), round(height + MARGINS[1], 2))


def _draw_outlines(ax, outlines: list[Outline], colours: dict[tuple[str, str], str], handles: dict) -> None:
    """Outline each patch and exchange (no text on the field); one legend entry per name."""
    for o in outlines:
        key = (o.source, o.label)
        if key not in colours:
            pool = PATCH_COLOURS if o.source == "patch" else EXCHANGE_COLOURS
            colours[key] = pool[sum(k[0] == o.source for k in colours) % len(pool)]
        style = dict(lw=4.0, solid_capstyle="butt", clip_on=False) if o.kind == "segment" else dict(
            lw=1.2, ls="--" if o.source == "patch" else "-")
        (line,) = ax.plot(o.points[0], o.points[1], color=colours[key], **style)
        handles.setdefault(key, line)


def draw_planes(result, fig) -> None:
    """Draw the mid-planes of ``result`` (a StoredResult) on ``fig``: one shared colour scale;
    patches (a bar on the box's edge where one crosses the slice, dashed where seen through
    it) and exchanges outlined, wells drawn (draw_wells)."""
    name = result.solution
    u = result.lazy(name)  # read plane by plane below: never the whole field
    edges = [result.edges(a) for a in range(3)]
    centres = [0.5 * (e[1:] + e[:-1]) for e in edges]
    mids = [int(np.argmin(np.abs(c - 0.5 * (e[0] + e[-1])))) for c, e in zip(centres, edges)]  # nearest the middle
    planes = {  # normal -> (data on (horizontal, vertical), horizontal axis, vertical axis)
        0: (np.asarray(u[mids[0], :, :]), 1, 2),
        1: (np.asarray(u[:, mids[1], :]), 0, 2),
        2: (np.asarray(u[:, :, mids[2]]), 0, 1),
    }
    lo = min(float(p[0].min()) for p in planes.values())
    hi = max(float(p[0].max()) for p in planes.values())
    if hi == lo:
        hi = lo + (abs(lo) * 1e-6 or 1e-12)
    bounds = [(float(e[0]), float(e[-1])) for e in edges]
    extent = [b[1] - b[0] for b in bounds]
    s = stretch(extent)
    d = [e * f for e, f in zip(extent, s)]
    fig.get_layout_engine().set(hspace=0.08, wspace=0.04)  # room between a panel's labels and the next title
    grid = fig.add_gridspec(2, 2, width_ratios=[d[0], d[1]], height_ratios=[d[1], d[2]])
    cells = {2: grid[0, 0], 1: grid[1, 0], 0: grid[1, 1]}  # plan, front view, side view
    colours: dict[tuple[str, str], str] = {}
    handles: dict[tuple[str, str], object] = {}
    axes, mesh = [], None
    for normal in (2, 1, 0):
        data, a, b = planes[normal]
        ax = fig.add_subplot(cells[normal])
        mesh = ax.pcolormesh(edges[a], edges[b], data.T, vmin=lo, vmax=hi, cmap="viridis", shading="flat")
        at = float(centres[normal][mids[normal]])
        _draw_outlines(ax, placed_outlines(result.spec, normal, at, bounds), colours, handles)
        draw_wells(ax, result.spec.well, normal, edges[normal][mids[normal]:mids[normal] + 2])
        ax.set_xlim(bounds[a])
        ax.set_ylim(bounds[b])
        ax.set_aspect(s[b] / s[a])  # one scale on both axes unless one is stretched
        ax.set_xlabel(_axis_label(a, s[a]))
        ax.set_ylabel(_axis_label(b, s[b]))
        ax.set_title(f"{'xyz'[normal]} = {at:.4g} m", fontsize=10, pad=9)  # clear of a patch bar on the top edge
        axes.append(ax)
    label = f"{name} ({result.units(name)})"
    names = [f"{src} {what}" for src, what in handles]
    if min(d[1] / (d[0] + d[1]), d[1] / (d[1] + d[2])) >= FREE_CORNER:  # the top right is free: there
        corner = fig.add_subplot(grid[0, 1])
        corner.set_axis_off()
        fig.colorbar(mesh, cax=corner.inset_axes((0.0, 0.1, 0.06, 0.8)), label=label)
        if handles:
            corner.legend(list(handles.values()), names, loc="center left", bbox_to_anchor=(0.4, 0.5),
                          fontsize=8, frameon=False)
        return
    fig.colorbar(mesh, ax=axes, label=label, shrink=0.8)
    if handles:
        fig.legend(list(handles.values()), names, loc="outside lower center", ncols=min(4, len(handles)),
                   fontsize=8, frameon=False)


def _axis_label(axis: int, factor: int) -> str:
    return f"{'xyz'[axis]} (m)" + (f", drawn \u00d7{factor}" if factor > 1 else "")


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


