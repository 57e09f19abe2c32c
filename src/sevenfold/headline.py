"""Headline numbers of a solution: the values a practitioner decides on.

For every physics:

* the solution's maximum and minimum with the centre of the cell where each occurs;
* per ``[[material.region]]``, ``[[source.region]]`` and ``[[hold]]``: the cells its shape
  selects (cell centre inside), their volume beside the shape's true volume in the box (see
  :mod:`sevenfold.volumes`), and the volume-weighted mean and the maximum of the solution
  over those cells.

Per physics:

* heat: the thermal resistance (K/W) from the hottest source region (highest mean
  temperature) to each hold and to each Robin or Dirichlet face,
  ``R = (T_source_mean - T_reference) / Q``, where Q is the heat flowing into that hold or out
  through that face (the balance's numbers) and T_reference the hold's value or the face's
  area-weighted mean reference/value. With several sinks each R is the partial resistance
  to that sink (its own share of the heat);
* electrostatics: the peak field magnitude |E| over the cells outside electrodes, with its
  location, marked grid dependent when it sits next to an electrode's edge or corner (the
  field is singular there and grows as the grid is refined); and the stored energy
  ``W = 1/2 sum over faces of T (du)^2`` with the operator's face conductances T (from
  :func:`sevenfold.operator.conductances`), plus the half cells at the domain faces,
  ``1/2 A F^2 h / (2 k)`` with F the face's flux density: the discrete form of
  ``1/2 integral eps |E|^2`` (J);
* groundwater: the flow through each face (positive leaving) and into each hold (positive
  into it, a well's discharge), through each patch and into each exchange (positive
  leaving), and each ``[[well]]``'s rate into the aquifer, in m^3/s and m^3/day.

Everything is JSON-friendly (the result's ``headline`` attribute). Nothing here does I/O.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from .balance import Balance, _slabs  # x slabs bound the temporaries on large grids
from .derived import flux
from .grid import FACE_AXIS, Grid
from .helper import halves
from .operator import conductances
from .physics import PHYSICS
from .problem import Problem
from .spec import FACES, JobSpec
from .volumes import geometry_changed, selection, true_volume

SECONDS_PER_DAY = 86_400.0


def _at(grid: Grid, flat_index: int) -> list[float]:
    idx = np.unravel_index(flat_index, grid.shape)
    return [float(grid.centres(a)[idx[a]]) for a in range(3)]


def _arg_extreme(values: np.ndarray, which: str) -> int:
    """The flat index of the first largest (``which`` = "max") or smallest value, as numpy's
    argmax or argmin gives it (a NaN first of all): each half's on two cores, then the
    first of the two by numpy's own rule."""
    pick = np.argmax if which == "max" else np.argmin
    parts = halves(lambda part: (int(pick(part)), part.size), values)
    found = np.array([int(i) + sum(size for _, size in parts[:k]) for k, (i, _) in enumerate(parts)])
    return int(found[pick(values.flat[found])])


def _extreme(grid: Grid, values: np.ndarray, which: str, where: np.ndarray | None = None) -> dict[str, Any]:
    if where is not None:
        values = np.where(where, values, -np.inf if which == "max" else np.inf)
    i = _arg_extreme(values, which)
    return {"value": float(values.flat[i]), "at": _at(grid, i), "index": list(map(int, np.unravel_index(i, grid.shape)))}


def region_label(kind: str, index: int, name: str | None = None) -> str:
    if kind == "hold":
        return f"hold {name!r}" if name else f"hold {index}"
    return f"{kind}.{index}"


def region_numbers(spec: JobSpec, grid: Grid, u: np.ndarray | None = None) -> list[dict[str, Any]]:
    """Per material region, source region and hold: cells, volumes, and (given ``u``) the
    volume-weighted mean and the max of u over the selected cells."""
    out = []
    groups = (("material.region", spec.material.region), ("source.region", spec.source.region),
              ("hold", spec.hold))
    for kind, regions in groups:
        for i, region in enumerate(regions):
            sel = selection(region.shape, grid)
            row: dict[str, Any] = {
                "kind": kind, "index": i, "label": region_label(kind, i, getattr(region, "name", None)),
                "cells": sel.cells, "volume": sel.volume, "shape_volume": true_volume(region.shape, grid),
                "mean": float("nan"), "max": float("nan"),
            }
            if sel.cells and u is not None:
                row["mean"] = sel.integral(u, grid) / sel.volume
                row["max"] = sel.maximum(u)
            out.append(row)
    return out


def _face_mean(grid: Grid, face: str, values: np.ndarray) -> float:
    areas = grid.face_areas(FACE_AXIS[face][0])
    return float((np.broadcast_to(values, areas.shape) * areas).sum() / areas.sum())


def thermal_resistances(spec: JobSpec, problem: Problem, regions: list[dict[str, Any]],
                        balance: Balance) -> list[dict[str, Any]]:
    """R (K/W) from the hottest source region to each hold and each Robin or Dirichlet face."""
    sources = [r for r in regions if r["kind"] == "source.region" and r["cells"]]
    if not sources:
        return []
    hot = max(sources, key=lambda r: r["mean"])
    sinks: list[tuple[str, float, float]] = []  # (label, reference, heat flow out of the domain there)
    for h in balance.holds:
        if h.index < len(spec.hold):
            sinks.append((region_label("hold", h.index, spec.hold[h.index].name), h.value, h.inflow))
    for face in FACES:
        t = problem.faces[face]
        if t.kind in ("robin", "dirichlet"):
            sinks.append((f"{t.kind} face {face}", _face_mean(problem.grid, face, t.value), balance.faces[face]))
    scale = max(balance.scale, 1e-300)
    out = []
    for label, reference, q in sinks:
        flows = q > 1e-9 * scale
        out.append({
            "source": hot["label"], "source_mean": hot["mean"], "sink": label, "reference": reference,
            "heat_flow": q,
            "resistance": (hot["mean"] - reference) / q if flows else None,
        })
    return out


def stored_energy(problem: Problem, u: np.ndarray) -> float:
    """1/2 sum over interior faces of T (u_N - u_P)^2, plus 1/2 A F^2 h/(2 k) for the half
    cell at each domain face (F its flux density): the discrete 1/2 integral k |grad u|^2."""
    grid = problem.grid
    nx = grid.cells[0]
    total = 0.0
    for i0, i1 in _slabs(nx, grid.cells[1] * grid.cells[2]):
        t = conductances(problem, i0, i1)
        top = min(i1, nx - 1)
        if top > i0:
            d = u[i0 + 1:top + 1] - u[i0:top]
            total += float(np.einsum("ijk,ijk,ijk->", t[0][:top - i0], d, d))
        for axis in (1, 2):
            if grid.cells[axis] < 2:
                continue
            d = np.diff(u[i0:i1], axis=axis)
            sl = [slice(None)] * 3
            sl[axis] = slice(0, -1)
            total += float(np.einsum("ijk,ijk,ijk->", t[axis][tuple(sl)], d, d))
    for face in FACES:
        axis, side = FACE_AXIS[face]
        terms = problem.faces[face]
        index = 0 if side == 0 else grid.cells[axis] - 1
        up = np.take(u, index, axis=axis)
        kp = np.take(problem.coefficient[axis], index, axis=axis)
        F = terms.conductance * (terms.value - up) + terms.flux
        h = grid.widths(axis)[index]
        total += float((grid.face_areas(axis) * F * F * (h / 2) / kp).sum())
    return 0.5 * total


def _electrode_cells(problem: Problem) -> np.ndarray:
    if problem.hold_index is not None:
        return problem.hold_index >= 0
    return problem.held


def near_electrode_edge(electrode: np.ndarray, cell: tuple[int, ...]) -> bool:
    """Whether an electrode cell within one cell (26 neighbours) of ``cell`` lies on an edge or
    corner of its electrode: it has free face neighbours along two or more axes."""
    shape = electrode.shape
    for d in np.ndindex(3, 3, 3):
        q = tuple(c + o - 1 for c, o in zip(cell, d))
        if not all(0 <= q[a] < shape[a] for a in range(3)) or not electrode[q]:
            continue
        axes = set()
        for a in range(3):
            for step in (-1, 1):
                n = list(q)
                n[a] += step
                if 0 <= n[a] < shape[a] and not electrode[tuple(n)]:
                    axes.add(a)
        if len(axes) >= 2:
            return True
    return False


def peak_field(problem: Problem, u: np.ndarray) -> dict[str, Any] | None:
    """The largest |E| = |grad u| (V/m) on the cells outside electrodes, where, and whether it is
    grid dependent (next to an electrode edge)."""
    electrode = _electrode_cells(problem)
    if electrode.all():
        return None
    F = flux(problem, u)
    kx, ky, kz = problem.coefficient
    e = np.sqrt((F[0] / kx) ** 2 + (F[1] / ky) ** 2 + (F[2] / kz) ** 2)
    peak = _extreme(problem.grid, e, "max", ~electrode)
    edge = bool(electrode.any()) and near_electrode_edge(electrode, tuple(peak["index"]))
    return {**peak, "grid_dependent": edge,
            "note": ("next to an electrode's edge or corner, where the field is singular: it grows as "
                     "the grid is refined" if edge else "")}


def flows(balance: Balance, spec: JobSpec) -> list[dict[str, Any]]:
    """Groundwater: each face's outflow and each hold's inflow as rates."""
    out = []
    for face, q in balance.faces.items():
        if q != 0.0:
            out.append({"where": f"out through {face}", "m3_per_s": q, "m3_per_day": q * SECONDS_PER_DAY})
    for h in balance.holds:
        name = spec.hold[h.index].name if h.index < len(spec.hold) else None
        out.append({"where": f"into {region_label('hold', h.index, name)}", "m3_per_s": h.inflow,
                    "m3_per_day": h.inflow * SECONDS_PER_DAY})
    for label, q in ([(f"of which out through patch {p.name!r}", p.outflow) for p in balance.patches]
                     + [(f"out into exchange {e.name!r}", e.outflow) for e in balance.exchanges]
                     + [(f"into the aquifer from well {w.name!r}", w.rate) for w in balance.wells]):
        out.append({"where": label, "m3_per_s": q, "m3_per_day": q * SECONDS_PER_DAY})
    return out


def compute_headline(spec: JobSpec, problem: Problem, u: np.ndarray, balance: Balance) -> dict[str, Any]:
    """The headline numbers of solution ``u`` (full field) of ``problem`` (see module docstring)."""
    physics = PHYSICS[spec.physics]
    grid = problem.grid
    regions = region_numbers(spec, grid, u)
    out: dict[str, Any] = {
        "solution": physics.solution, "units": physics.solution_units,
        "max": _extreme(grid, u, "max"), "min": _extreme(grid, u, "min"),
        "regions": regions,
    }
    if spec.physics == "heat":
        out["thermal_resistances"] = thermal_resistances(spec, problem, regions, balance)
    elif spec.physics == "electrostatics":
        out["peak_field"] = peak_field(problem, u)
        out["stored_energy"] = stored_energy(problem, u)
    elif spec.physics == "groundwater":
        out["flows"] = flows(balance, spec)
    return out


# ---------------------------------------------------------------- presentation
def _xyz(at: list[float]) -> str:
    return "(" + ", ".join(f"{c:.4g}" for c in at) + ") m"


def _num(v: float | None, digits: int = 6) -> str:
    if v is None or not math.isfinite(v):
        return "-"
    return f"{v:.{digits}g}"


def headline_rows(h: dict[str, Any]) -> list[tuple[str, str]]:
    """(label, text) rows of a stored headline, for printed and HTML tables."""
    u = h["solution"]
    units = "" if h["units"] in ("", "1") else f" {h['units']}"  # (no "1" after a pure number)
    rows = [(f"{u} max", f"{_num(h['max']['value'])}{units} at {_xyz(h['max']['at'])}"),
            (f"{u} min", f"{_num(h['min']['value'])}{units} at {_xyz(h['min']['at'])}")]
    for r in h.get("regions", []):
        off = ""
        if geometry_changed(r["volume"], r["shape_volume"]):
            off = " [differs by more than 10%]"
        rows.append((r["label"], f"{r['cells']} cells, {r['volume']:.4g} m^3 selected (shape "
                                 f"{r['shape_volume']:.4g} m^3){off}; {u} mean {_num(r['mean'])}, "
                                 f"max {_num(r['max'])}{units}"))
    for t in h.get("thermal_resistances", []):
        r = t["resistance"]
        text = (f"{_num(r, 4)} K/W" if r is not None else "- (no heat leaves there)")
        rows.append((f"R to {t['sink']}",
                     f"{text} from {t['source']}: ({_num(t['source_mean'])} - {_num(t['reference'])}) K / "
                     f"{_num(t['heat_flow'], 4)} W"))
    pf = h.get("peak_field")
    if pf:
        mark = " [grid dependent: next to an electrode edge]" if pf["grid_dependent"] else ""
        rows.append(("peak |E|", f"{_num(pf['value'], 4)} V/m at {_xyz(pf['at'])}{mark}"))
    if "stored_energy" in h:
        rows.append(("stored energy", f"{_num(h['stored_energy'])} J"))
    for f in h.get("flows", []):
        rows.append((f["where"], f"{_num(f['m3_per_s'], 4)} m^3/s = {_num(f['m3_per_day'], 4)} m^3/day"))
    return rows
