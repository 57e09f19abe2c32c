"""Warnings about a job that is valid but probably not what was meant: one channel for all.

``check`` and ``run`` print these lines (``warning: ...``) and a result stores them in its
``warnings`` attribute; none of them refuses the job.

* Geometry: a region, source region or hold whose selected cells' volume differs from its
  shape's true volume (clipped to the box) by more than 10 % (volumes.GEOMETRY_TOLERANCE):
  a thin layer that became one thick cell, a small sphere that became one cell.
* Plausibility (values that are almost surely a unit slip): a relative permittivity below 1
  (electrostatics); a hydraulic conductivity above 1 m/s (groundwater; gravel is about
  1e-2 m/s); in heat, a Robin reference or Dirichlet value between 0 and 100 while a hold is
  above 250 (degrees Celsius next to kelvin).

Nothing here does I/O.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from .physics import EPSILON_0
from .problem import Problem
from .spec import FACES, JobSpec
from .volumes import GEOMETRY_TOLERANCE, geometry_changed

MAX_HYDRAULIC_CONDUCTIVITY = 1.0  # m/s
CELSIUS_LIKE = (0.0, 100.0)  # K: a reference temperature in this range looks like degrees Celsius
KELVIN_LIKE = 250.0  # K: a hold above this looks like kelvin


def geometry_warnings(regions: list[dict[str, Any]]) -> list[str]:
    """Regions (rows of :func:`sevenfold.headline.region_numbers`) whose selected volume differs
    from their shape's by more than the tolerance."""
    out = []
    for r in regions:
        if not geometry_changed(r["volume"], r["shape_volume"]):
            continue
        change = (r["volume"] / r["shape_volume"] - 1.0) if r["shape_volume"] > 0 else float("inf")
        out.append(
            f"{r['label']} selects {r['cells']} cell(s) of {r['volume']:.4g} m^3 but its shape has "
            f"{r['shape_volume']:.4g} m^3 in the box ({100 * change:+.0f} %, more than "
            f"{100 * GEOMETRY_TOLERANCE:.0f} %): the grid changes its geometry; refine the grid there "
            "or put cell edges on the shape's faces")
    return out


def plausibility_warnings(spec: JobSpec, problem: Problem) -> list[str]:
    """Values that look like a unit slip (see the module docstring)."""
    out = []
    if spec.physics == "electrostatics":
        low = problem.coefficient_range[0] / EPSILON_0
        if low < 1.0 - 1e-9:
            out.append(f"material: relative permittivity {low:.4g} is below 1 (vacuum); material values are "
                       "relative permittivities, not F/m")
    elif spec.physics == "groundwater":
        high = problem.coefficient_range[1]
        if high > MAX_HYDRAULIC_CONDUCTIVITY:
            out.append(f"material: hydraulic conductivity {high:.4g} m/s is above {MAX_HYDRAULIC_CONDUCTIVITY:g} "
                       "m/s (coarse gravel is about 1e-2 m/s); values are m/s: for m/day set "
                       "units.hydraulic_conductivity = \"m/day\"")
    elif spec.physics == "heat":
        hot = [h.value for h in spec.hold if h.value is not None and h.value > KELVIN_LIKE]
        if hot:
            lo, hi = CELSIUS_LIKE
            for face in FACES:
                t = problem.faces[face]
                if t.kind not in ("robin", "dirichlet"):
                    continue
                v = np.asarray(t.value)
                if float(v.min()) >= lo and float(v.max()) <= hi:
                    what = "reference" if t.kind == "robin" else "value"
                    out.append(f"boundary.{face}.{what}: {float(v.mean()):.4g} K next to holds at up to "
                               f"{max(hot):.4g} K looks like degrees Celsius; temperatures are kelvin unless "
                               "units.temperature = \"degC\"")
    return out


def job_warnings(spec: JobSpec, problem: Problem, regions: list[dict[str, Any]] | None = None) -> list[str]:
    """Every warning about a built job; ``regions`` as from ``region_numbers`` (computed when
    not given)."""
    if regions is None:
        from .headline import region_numbers

        regions = region_numbers(spec, problem.grid)
    return geometry_warnings(regions) + plausibility_warnings(spec, problem)
