"""What a shape selects on a grid, beside what it really is.

A cell belongs to a shape when its centre lies inside (:func:`sevenfold.shapes.mask`), so a
region's selected volume is a whole number of cells and can differ a lot from the shape's own
volume: a 0.12 mm layer on 0.2 mm cells becomes one 0.2 mm cell (or none). This module gives
both numbers:

* :func:`selection` - the cells a shape selects, found on the block of cells around its
  bounding box only (no full-grid temporaries), with their count and volume;
* :func:`true_volume` - the shape's volume inside the box: a box clipped to the domain
  exactly; a sphere or a cylinder clipped to the domain by quadrature (a few 1e-5 relative;
  4/3 pi r^3 and pi r^2 L when wholly inside).

Volumes in m^3, coordinates in m. Nothing here does I/O.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .grid import Grid, weighted_sum
from .shapes import box_slices, mask
from .spec import Box, Cylinder, Sphere

Shape = Box | Sphere | Cylinder

# Relative difference between the selected and the true volume above which a geometry change
# is reported (a warning, not a refusal).
GEOMETRY_TOLERANCE = 0.10
_QUADRATURE_POINTS = 600  # per axis of the clipped cross-section


@dataclass(frozen=True)
class Selection:
    """The cells a shape selects: ``block`` (index slices of the grid) and ``mask`` on it,
    None when every cell of the block is selected (a box)."""

    block: tuple[slice, slice, slice]
    mask: np.ndarray | None  # bool, shaped like the block
    cells: int
    volume: float  # m^3, the selected cells' volume

    def integral(self, field: np.ndarray, grid: Grid) -> float:
        """The sum of ``field`` times the cell volume over the selected cells (no copy of
        the selected values)."""
        return weighted_sum(field[self.block], _block_widths(grid, self.block), self.mask)

    def maximum(self, field: np.ndarray) -> float:
        """The largest value of ``field`` on the selected cells (at least one)."""
        where = True if self.mask is None else self.mask
        return float(np.max(field[self.block], where=where, initial=-np.inf))

    def full_mask(self, shape: tuple[int, int, int]) -> np.ndarray:
        out = np.zeros(shape, dtype=bool)
        out[self.block] = True if self.mask is None else self.mask
        return out


def bounds(shape: Shape) -> tuple[np.ndarray, np.ndarray]:
    """The shape's axis-aligned bounding box (lo, hi)."""
    if isinstance(shape, Box):
        return np.array(shape.min, float), np.array(shape.max, float)
    c = np.array(shape.center, float)
    if isinstance(shape, Sphere):
        return c - shape.radius, c + shape.radius
    half = np.full(3, shape.radius)
    half["xyz".index(shape.axis)] = shape.length / 2
    return c - half, c + half


def domain(grid: Grid) -> tuple[np.ndarray, np.ndarray]:
    """The grid's block: its lowest and highest corner (m)."""
    lo = np.array(grid.origin, float)
    return lo, lo + np.array(grid.extent, float)


def outside(shape: Shape, grid: Grid) -> bool:
    """The shape's bounding box shares no volume with the grid's block: no grid selects a
    cell of it (a shape that overlaps the block may still be too small for its cells)."""
    lo, hi = bounds(shape)
    dlo, dhi = domain(grid)
    return bool(np.any(np.minimum(hi, dhi) <= np.maximum(lo, dlo)))


def extent_text(lo, hi) -> str:
    """``[x0, x1] x [y0, y1] x [z0, z1] m``: a block's extent as ``check`` and messages show it."""
    return " x ".join(f"[{a:.4g}, {b:.4g}]" for a, b in zip(lo, hi)) + " m"


def selection(shape: Shape, grid: Grid) -> Selection:
    """The cells whose centre lies in ``shape`` (the same test as :func:`shapes.mask`)."""
    if isinstance(shape, Box):  # one block of cells, no mask (shapes.box_slices)
        block = box_slices(shape, grid)
        cells = math.prod(max(0, s.stop - s.start) for s in block)
        return Selection(block, None, cells, grid.block_volume(block))
    lo, hi = bounds(shape)
    block = []
    for a in range(3):
        c = grid.centres(a)
        slack = 1e-9 * max(grid.extent[a], hi[a] - lo[a])
        i0 = int(np.searchsorted(c, lo[a] - slack, side="left"))
        i1 = int(np.searchsorted(c, hi[a] + slack, side="right"))
        block.append(slice(i0, max(i0, i1)))
    if any(s.stop <= s.start for s in block):
        return Selection(tuple(block), np.zeros([0, 0, 0], bool), 0, 0.0)  # type: ignore[arg-type]
    sub = Grid(tuple(grid.edges[a][block[a].start:block[a].stop + 1] for a in range(3)))  # type: ignore[arg-type]
    m = mask(shape, sub)
    cells = int(np.count_nonzero(m))
    volume = sub.volume(m) if cells else 0.0
    return Selection(tuple(block), m, cells, volume)  # type: ignore[arg-type]


def _block_widths(grid: Grid, block: tuple[slice, slice, slice]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    return tuple(grid.widths(a)[block[a]] for a in range(3))  # type: ignore[return-value]


def _interval(a: float, b: float, lo: float, hi: float) -> float:
    return max(0.0, min(b, hi) - max(a, lo))


def _disc_area(cu: float, cv: float, r: float, u: tuple[float, float], v: tuple[float, float],
               n: int = _QUADRATURE_POINTS) -> float:
    """Area of the disc (centre (cu, cv), radius r) inside the rectangle u x v, by the midpoint
    rule over u of the clipped chord length along v."""
    a, b = max(cu - r, u[0]), min(cu + r, u[1])
    if b <= a:
        return 0.0
    t = a + (np.arange(n) + 0.5) * (b - a) / n
    half = np.sqrt(np.maximum(r * r - (t - cu) ** 2, 0.0))
    chord = np.clip(np.minimum(cv + half, v[1]) - np.maximum(cv - half, v[0]), 0.0, None)
    return float(chord.sum() * (b - a) / n)


def true_volume(shape: Shape, grid: Grid) -> float:
    """The shape's volume inside the grid's box (m^3)."""
    dlo, dhi = domain(grid)
    if isinstance(shape, Box):
        return math.prod(_interval(shape.min[a], shape.max[a], dlo[a], dhi[a]) for a in range(3))
    if isinstance(shape, Cylinder):
        ax = "xyz".index(shape.axis)
        u, v = (a for a in range(3) if a != ax)
        c = shape.center
        length = _interval(c[ax] - shape.length / 2, c[ax] + shape.length / 2, dlo[ax], dhi[ax])
        if length == 0.0:
            return 0.0
        if all(c[a] - shape.radius >= dlo[a] and c[a] + shape.radius <= dhi[a] for a in (u, v)):
            return math.pi * shape.radius**2 * length
        return length * _disc_area(c[u], c[v], shape.radius, (dlo[u], dhi[u]), (dlo[v], dhi[v]))
    # sphere: slices along z, each a disc of radius sqrt(r^2 - dz^2) clipped to the x-y rectangle
    c, r = shape.center, shape.radius
    if all(c[a] - r >= dlo[a] and c[a] + r <= dhi[a] for a in range(3)):
        return 4.0 / 3.0 * math.pi * r**3
    a, b = max(c[2] - r, dlo[2]), min(c[2] + r, dhi[2])
    if b <= a:
        return 0.0
    n = _QUADRATURE_POINTS // 2
    zs = a + (np.arange(n) + 0.5) * (b - a) / n
    areas = [_disc_area(c[0], c[1], math.sqrt(max(r * r - (z - c[2]) ** 2, 0.0)),
                        (dlo[0], dhi[0]), (dlo[1], dhi[1]), n) for z in zs]
    return float(sum(areas) * (b - a) / n)


def geometry_changed(selected: float, true: float, tolerance: float = GEOMETRY_TOLERANCE) -> bool:
    """The selected volume differs from the true one by more than ``tolerance`` of it."""
    if true <= 0.0:
        return selected > 0.0
    return abs(selected - true) > tolerance * true
