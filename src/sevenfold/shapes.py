"""Cell masks of shapes: a cell belongs to a shape when its centre is inside (boundary included)."""

from __future__ import annotations

import numpy as np

from .grid import Grid
from .spec import Box, Cylinder, Sphere


def mask(shape: Box | Sphere | Cylinder, grid: Grid) -> np.ndarray:
    """Boolean array of ``grid.shape``: True where the cell centre lies in ``shape``."""
    if isinstance(shape, Box):  # centres rise along each axis: the box's cells are one block
        m = np.zeros(grid.shape, dtype=bool)
        m[box_slices(shape, grid)] = True
        return m
    x, y, z = grid.mesh()
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


def box_slices(box: Box, grid: Grid) -> tuple[slice, slice, slice]:
    """The block of cells whose centres lie in ``box`` (boundary included), as index slices."""
    out = []
    for a, (lo, hi) in enumerate(zip(box.min, box.max)):
        c = grid.centres(a)
        out.append(slice(int(np.searchsorted(c, lo, side="left")), int(np.searchsorted(c, hi, side="right"))))
    return tuple(out)  # type: ignore[return-value]
