"""Grid-convergence study: run one job on successively refined grids and apply Roache's GCI.

Level 0 is the job's own grid. On a uniform grid, level l has ``round(cells * ratio**l)``
cells along each axis with more than one cell (axes of one cell stay thin); on a graded grid
every cell is split into ``ratio**l`` equal parts (a whole-number ratio), keeping the grading. The box, materials, sources, holds,
boundaries and probes are unchanged. The cell size of a level is the representative
``h = (V / N)**(1/D)`` over the D refined axes, so the ratio between levels is the same on
every refined axis up to the rounding of the cell counts, which must stay within
``RATIO_SPREAD``. The three finest levels give the observed order, the Richardson-extrapolated
value and the GCI (see gci.py) of each quantity:

* ``<solution>_max``: the largest cell value of the solution,
* ``outflow_<face>``: each face's outflow (faces with no flow on any level are left out),
* ``outflow_patch_<name>``, ``outflow_exchange_<name>``: each patch's and exchange's outflow,
* ``inflow_<hold>`` or ``charge_<hold>``: each hold's inflow (an electrode's charge),
* ``potential_<hold>``: a floating electrode's solved potential,
* ``well_head_<name>`` (a rate well's bore head) or ``well_rate_<name>`` (a head well's rate),
* ``probe_<name>``: each point probe's value.

The solution maximum and the probes are values of the solution, which may carry an arbitrary
offset (a temperature in K, a head above a datum, an offset potential): their relative GCI is
measured against the solution's range over the domain on the finest level (max - min), or
against their distance from a ``datum`` the user names, never against their absolute value
(300 K would make any temperature look converged). Flows and charges have no offset and are
measured against their own magnitude. Each result says which (``relative_to``).

Each level also records what every region, source region and hold selects (cells and
volume, from the result's headline); a study whose selected volumes differ between levels by
more than 10 % of the shape's volume solves a different geometry on each level and is flagged
(``geometry_changes``): its GCI mixes discretisation error with the changing shape. A level
that fails is named in the error.

This module runs jobs and writes the study's files; the formulas live in gci.py, the figure in
report_study.py.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import JobError, SolverError, writing
from .gci import GCIResult, gci_three_grids
from .grid import Grid, grid_from_spec
from .runner import JobResult, job_grid, output_path, run_job
from .spec import JobSpec, load_job
from .volumes import GEOMETRY_TOLERANCE

RATIO_SPREAD = 0.02  # largest relative difference of the per-axis ratios between two levels


@dataclass(frozen=True)
class Level:
    cells: tuple[int, int, int]
    h: float  # representative cell size (m)
    ratios: tuple[float, float, float]  # actual per-axis ratio to the previous level (1 if thin)
    values: dict[str, float]
    output: str
    solution_range: float = float("nan")  # max - min of the solution on this level
    selected: dict[str, dict] = field(default_factory=dict)  # region label -> cells, volume, shape_volume


@dataclass(frozen=True)
class Study:
    name: str
    solution_units: str
    amount_units: str
    levels: list[Level]
    results: dict[str, GCIResult] = field(default_factory=dict)
    folder: str = ""
    geometry_changes: list[str] = field(default_factory=list)
    datum: float | None = None

    def to_dict(self) -> dict:
        return {
            "name": self.name,
            "method": "Roache's GCI on the three finest levels, Fs = 1.25",
            "levels": [vars(lv) | {"ratios": list(lv.ratios), "cells": list(lv.cells)} for lv in self.levels],
            "results": {k: v.to_dict() for k, v in self.results.items()},
            "datum": self.datum,
            "geometry_changes": self.geometry_changes,
        }


def level_cells(cells: tuple[int, int, int], ratio: float, level: int) -> tuple[int, int, int]:
    """Cells of level ``level``: each axis with more than one cell scaled by ratio**level."""
    return tuple(c if c == 1 else max(1, int(round(c * ratio**level))) for c in cells)  # type: ignore[return-value]


def split_axis(edges: np.ndarray, factor: int) -> np.ndarray:
    """Every cell of an axis split into ``factor`` equal parts (the grading is kept)."""
    t = np.arange(factor, dtype=np.float64) / factor
    inner = (edges[:-1, None] + np.diff(edges)[:, None] * t[None, :]).ravel()
    return np.append(inner, edges[-1])


def level_grid(base: Grid, ratio: float, level: int) -> Grid:
    """The grid of level ``level``. A uniform grid gets ``level_cells`` cells on its box; a
    graded one has every cell split into ratio**level parts (ratio a whole number), so the
    grading is the same on every level. Axes of one cell stay thin."""
    if base.uniform_axes:
        cells = level_cells(base.cells, ratio, level)
        return Grid.uniform(cells, [e / n for e, n in zip(base.extent, cells)], base.origin)
    factor = int(round(ratio)) ** level
    return Grid(tuple(e if e.size == 2 else split_axis(e, factor) for e in base.edges))  # type: ignore[arg-type]


def refined_spec(spec: JobSpec, grid: Grid) -> JobSpec:
    """The same job on ``grid`` (the same box): uniform grids by cells and size, graded ones by
    their edges."""
    table = spec.model_dump(mode="json", exclude_none=True)
    if grid.uniform_axes:
        table["grid"] = {"cells": list(grid.cells), "size": list(grid.extent), "origin": list(grid.origin)}
    else:
        table["grid"] = {"edges": {c: grid.edges[a].tolist() for a, c in enumerate("xyz")}}
    return JobSpec.model_validate(table)


def plan_levels(spec: JobSpec, levels: int, ratio: float, base: Grid | None = None,
                ) -> list[tuple[Grid, float, tuple[float, ...]]]:
    """(grid, h, per-axis ratios) of each level, refusing uneven refinement. ``base`` is the
    job's grid (built from the spec when not given; a graded axis from a file needs it)."""
    if levels < 3:
        raise JobError(f"a study needs at least 3 levels, got {levels}", "--levels")
    if not (math.isfinite(ratio) and ratio > 1.0):
        raise JobError(f"the refinement ratio must exceed 1, got {ratio}", "--ratio")
    base = base or grid_from_spec(spec.grid)
    if not base.uniform_axes and abs(ratio - round(ratio)) > 1e-9:
        raise JobError(f"a graded grid is refined by splitting every cell, so the ratio must be a "
                       f"whole number, got {ratio:g}", "--ratio")
    refined_axes = [a for a in range(3) if base.cells[a] > 1]
    if not refined_axes:
        raise JobError("the grid has one cell; there is nothing to refine", "grid.cells")
    out = []
    prev = None
    for lv in range(levels):
        grid = level_grid(base, ratio, lv)
        cells = grid.cells
        h = math.prod(grid.extent[a] / cells[a] for a in refined_axes) ** (1.0 / len(refined_axes))
        ratios = tuple(1.0 if prev is None or base.cells[a] == 1 else cells[a] / prev[a] for a in range(3))
        if prev is not None:
            used = [ratios[a] for a in refined_axes]
            if max(used) - min(used) > RATIO_SPREAD * min(used) or min(used) <= 1.0:
                raise JobError(
                    f"with ratio {ratio:g} level {lv} has cells {list(cells)}, refining the axes by "
                    f"{', '.join(f'{r:.4g}' for r in used)}; choose cell counts or a ratio that "
                    "refine every axis alike (within 2%)", "--ratio")
        out.append((grid, h, ratios))
        prev = cells
    return out


def quantities(result: JobResult) -> dict[str, float]:
    """The study's quantities of one finished level (see the module docstring)."""
    import zarr

    group = zarr.open_group(store=str(result.output), mode="r")
    solution = group.attrs["solution"]
    values = {f"{solution}_max": float(np.max(group[solution][...]))}
    bal = result.balance
    assert bal is not None
    for face, v in bal.faces.items():
        values[f"outflow_{face}"] = v
    for p in bal.patches:
        values[f"outflow_patch_{p.name.replace(' ', '_')}"] = p.outflow
    for e in bal.exchanges:
        values[f"outflow_exchange_{e.name.replace(' ', '_')}"] = e.outflow
    for h in bal.holds:
        if h.floating:  # its charge is given; its potential is what the grid decides
            values[f"potential_{h.name.replace(' ', '_')}"] = h.value
            continue
        key = "charge" if h.charge is not None else "inflow"
        values[f"{key}_{h.name.replace(' ', '_')}"] = h.charge if h.charge is not None else h.inflow
    for w in bal.wells:  # what the job does not give: a rate well's bore head, a head well's rate
        values[f"well_{'head' if w.given == 'rate' else 'rate'}_{w.name}"] = w.head if w.given == "rate" else w.rate
    for p in result.probes:
        if p.kind == "point":
            values[f"probe_{p.name}"] = float(p.values[0])
    return values


def offset_quantity(key: str, solution: str) -> bool:
    """Whether a study quantity is a value of the solution (and so may carry an offset)."""
    return key == f"{solution}_max" or key.startswith("probe_")


def level_selection(result: JobResult) -> dict[str, dict]:
    """What each region, source region and hold selects on a level (from its headline)."""
    regions = (result.headline or {}).get("regions", [])
    return {r["label"]: {"cells": r["cells"], "volume": r["volume"], "shape_volume": r["shape_volume"]}
            for r in regions}


def geometry_changes(levels: list[Level], tolerance: float = GEOMETRY_TOLERANCE) -> list[str]:
    """A line per region whose selected volume differs between levels by more than
    ``tolerance`` of its shape's volume."""
    out = []
    for label in levels[0].selected if levels else ():
        vols = [lv.selected[label]["volume"] for lv in levels if label in lv.selected]
        shape = levels[0].selected[label]["shape_volume"]
        ref = shape if shape > 0 else max(vols)
        if ref > 0 and max(vols) - min(vols) > tolerance * ref:
            out.append(f"{label}: the selected volume changes between levels ("
                       + ", ".join(f"{v:.4g}" for v in vols) + f" m^3; shape {shape:.4g} m^3): each level "
                       "solves a different geometry, so the GCI of quantities it affects is not a "
                       "discretisation error alone; align the shape with cell edges of every level")
    return out


def run_study(job_file: str | Path, levels: int = 3, ratio: float = 2.0,
              folder: str | Path | None = None, spec: JobSpec | None = None,
              progress=None, datum: float | None = None) -> Study:
    """Run every level in this process and compute the GCI of every quantity.

    Results go to ``folder`` (default ``<output stem>.converge`` beside the job's output):
    ``level-<l>.zarr`` per level and ``study.json``. ``progress(level, cells)`` is called
    before each level when given. ``datum`` (solution units): the solution maximum and the
    probes are measured against their distance from it instead of the solution's range.
    """
    from .physics import PHYSICS

    job_file = Path(job_file)
    spec = spec or load_job(job_file)
    for key, fspec in (("material", spec.material), ("source", spec.source)):
        if fspec.file is not None:
            raise JobError("a study refines the grid, so the field cannot come from a file; "
                           "give it by value or expression", f"{key}.file", str(job_file))
    try:
        plans = plan_levels(spec, levels, ratio, job_grid(spec, job_file))
    except JobError as exc:
        raise exc.located(str(job_file)) from None
    if folder is None:
        out = output_path(spec, job_file)
        folder = out.with_name(out.stem + ".converge")
    folder = Path(folder).resolve()
    with writing(folder, "the study folder"):
        folder.mkdir(parents=True, exist_ok=True)
    done: list[Level] = []
    for lv, (grid, h, ratios) in enumerate(plans):
        if progress is not None:
            progress(lv, grid.cells)
        target = folder / f"level-{lv}.zarr"
        name = f"level {lv} ({' x '.join(map(str, grid.cells))} cells)"
        try:
            result = run_job(job_file, target, None, refined_spec(spec, grid))
        except JobError as exc:
            where = f"{exc.where}: " if exc.where else ""
            raise JobError(f"{where}{exc.reason}", name, exc.source or str(job_file)) from None
        except SolverError as exc:
            raise SolverError(f"{name}: {exc}", exc.history) from None
        headline = result.headline or {}
        span = (headline["max"]["value"] - headline["min"]["value"]) if headline else float("nan")
        done.append(Level(grid.cells, h, ratios, quantities(result), str(target), span, level_selection(result)))
    physics = PHYSICS[spec.physics]
    study = Study(spec.name, physics.solution_units, physics.amount_units, done, {}, str(folder),
                  geometry_changes(done), datum)
    fine, mid, coarse = done[-1], done[-2], done[-3]
    units = physics.solution_units
    for key in fine.values:
        trio = [lv.values.get(key) for lv in (fine, mid, coarse)]
        if any(v is None for v in trio):
            continue
        if key.startswith("outflow_") and all(v == 0.0 for v in trio):
            continue  # an insulated face: nothing to converge
        scale, relative_to = None, "|f1|"
        if offset_quantity(key, physics.solution):
            if datum is not None:
                scale, relative_to = trio[0] - datum, f"|f1 - datum {datum:g} {units}|"
            else:
                scale, relative_to = fine.solution_range, f"range {fine.solution_range:.4g} {units}"
        study.results[key] = gci_three_grids(trio[0], trio[1], trio[2], mid.h / fine.h, coarse.h / mid.h,
                                             scale=scale, relative_to=relative_to)
    with writing(folder / "study.json", "the study"):
        (folder / "study.json").write_text(json.dumps(study.to_dict(), indent=2, default=float))
    return study
