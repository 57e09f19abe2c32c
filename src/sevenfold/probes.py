"""Probe values: trilinear interpolation of a cell-centred field at points in the box.

Between cell centres the value is trilinear in the eight surrounding centres. In the half
cell between the outermost centres and a box face, the outermost interval's linear formula
is extended (linear extrapolation, not clamping), so a field linear in x, y, z is reproduced
exactly everywhere in the box. Along an axis with a single cell the field is taken as
constant. Points outside the box are refused when the job is read (sevenfold.spec). Held cells
take part with their held values. Nothing here does I/O.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .grid import Grid
from .spec import ProbeSpec


def _axis_weights(grid: Grid, axis: int, c: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Lower index and weight of the upper neighbour along ``axis`` for coordinates ``c``."""
    n = grid.cells[axis]
    if n == 1:
        return np.zeros(c.shape, dtype=np.int64), np.zeros(c.shape)
    centres = grid.centres(axis)
    # the interval of centres holding c (the outermost one beyond the outer centres)
    i0 = np.clip(np.searchsorted(centres, c, side="right") - 1, 0, n - 2)
    return i0, (c - centres[i0]) / (centres[i0 + 1] - centres[i0])


def interpolate(grid: Grid, u: np.ndarray, points: np.ndarray) -> np.ndarray:
    """Values of the cell-centred field ``u`` at ``points`` (shape (m, 3), metres)."""
    points = np.atleast_2d(np.asarray(points, dtype=np.float64))
    idx, wts = zip(*(_axis_weights(grid, a, points[:, a]) for a in range(3)))
    out = np.zeros(points.shape[0])
    for dx in (0, 1):
        wx = wts[0] if dx else 1.0 - wts[0]
        ix = np.minimum(idx[0] + dx, grid.cells[0] - 1)
        for dy in (0, 1):
            wy = wts[1] if dy else 1.0 - wts[1]
            iy = np.minimum(idx[1] + dy, grid.cells[1] - 1)
            for dz in (0, 1):
                wz = wts[2] if dz else 1.0 - wts[2]
                iz = np.minimum(idx[2] + dz, grid.cells[2] - 1)
                out += wx * wy * wz * u[ix, iy, iz]
    return out


@dataclass(frozen=True)
class ProbeValues:
    """One probe's samples: coordinates (m), distance from the first sample (m), values."""

    name: str
    kind: str  # "point" or "line"
    points: np.ndarray  # (m, 3)
    distance: np.ndarray  # (m,)
    values: np.ndarray  # (m,)


def sample(grid: Grid, u: np.ndarray, probes: tuple[ProbeSpec, ...]) -> list[ProbeValues]:
    """Every probe of a job evaluated on ``u``."""
    out = []
    for probe in probes:
        pts = np.array(probe.samples, dtype=np.float64)
        distance = np.linalg.norm(pts - pts[0], axis=1)
        kind = "point" if probe.point is not None else "line"
        out.append(ProbeValues(probe.name, kind, pts, distance, interpolate(grid, u, pts)))
    return out
