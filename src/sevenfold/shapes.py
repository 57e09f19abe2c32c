"""Cell masks of shapes: a cell belongs to a shape when its centre is inside (boundary included)."""

from __future__ import annotations

import numpy as np

from .grid import Grid
from .spec import Box, Cylinder, Sphere


def mask(shape: Box | Sphere | Cylinder, grid: Grid) -> np.ndarray:
    """Boolean array of ``grid.shape``: True where the cell centre lies in ``shape``."""
    x, y, z = grid.mesh()
    if isinstance(shape, Box):
        inside = [(lo <= c) & (c <= hi) for c, lo, hi in zip((x, y, z), shape.min, shape.max)]
        return np.broadcast_to(inside[0] & inside[1] & inside[2], grid.shape).copy()
    if isinstance(shape, Sphere):
        cx, cy, cz = shape.center
        return np.broadcast_to(
            (x - cx) ** 2 + (y - cy) ** 2 + (z - cz) ** 2 <= shape.radius**2, grid.shape
        ).copy()
    if isinstance(shape, Cylinder):
        coords = (x, y, z)
        axis = "xyz".index(shape.axis)
        r2 = sum((coords[a] - shape.center[a]) ** 2 for a in range(3) if a != axis)
        along = np.abs(coords[axis] - shape.center[axis]) <= shape.length / 2
        return np.broadcast_to((r2 <= shape.radius**2) & along, grid.shape).copy()
    raise TypeError(f"not a shape: {shape!r}")
