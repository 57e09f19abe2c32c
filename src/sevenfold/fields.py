"""Coefficient and source fields on the cells, from a validated spec.

No I/O here: a field given by ``file`` arrives as an already-loaded array.
"""

from __future__ import annotations

import math

import numpy as np

from .errors import JobError
from .expressions import evaluate
from .grid import Grid
from .helper import fill, halves
from .shapes import box_slices, mask
from .spec import Box, MaterialSpec, SourceSpec, components
from .volumes import bounds, domain, extent_text, outside


# the cells a region selects: a block of slices (a box) or a cell mask (other shapes)
Cells = tuple[slice, slice, slice] | np.ndarray


def _values(value: float | str, grid: Grid, where: Cells) -> np.ndarray | float:
    """A scalar, or the expression evaluated on the cell centres at ``where`` (a cell mask or
    a block of slices, :func:`region_cells`). An array may be a read-only view: the callers
    copy it into their own fields. The expression is evaluated on the block's cells alone, or
    on the smallest block holding the mask's cells."""
    if not isinstance(value, str):
        return float(value)
    x, y, z = grid.mesh()
    block = where if isinstance(where, tuple) else _bounding_block(where)
    sx, sy, sz = block
    values = evaluate(value, x[sx], y[:, sy], z[:, :, sz])
    return values if isinstance(where, tuple) else values[where[block]]


def _bounding_block(mask: np.ndarray) -> tuple[slice, slice, slice]:
    """The smallest block of slices holding every cell of a (non-empty) mask."""
    block = []
    for axis in range(3):
        hit = np.flatnonzero(mask.any(axis=tuple(a for a in range(3) if a != axis)))
        block.append(slice(int(hit[0]), int(hit[-1]) + 1))
    return tuple(block)  # type: ignore[return-value]


def _fill(field: np.ndarray, value: float | str | np.ndarray, grid: Grid) -> None:
    """``field[...] = value`` on every cell: a scalar, an array (a loaded file), or an
    expression evaluated on the cell centres straight into ``field`` (no grid-sized array of
    its values besides)."""
    if isinstance(value, str):
        evaluate(value, *grid.mesh(), out=field)
    elif isinstance(value, np.ndarray):
        field[...] = value
    else:
        fill(field, value)


def _check_finite(a: np.ndarray | float, where: str, positive: bool) -> None:
    """A JobError at ``where`` unless every value of ``a`` (an array or a number) is finite,
    and positive with ``positive``: read from the range alone (NaN carries through it)."""
    lo, hi = array_range(a) if isinstance(a, np.ndarray) else (float(a), float(a))
    if not (math.isfinite(lo) and math.isfinite(hi)):
        raise JobError("contains NaN or infinite values", where)
    if positive and not lo > 0:
        raise JobError(f"must be positive everywhere, minimum is {lo!r}", where)


def _checked(value: float | str | np.ndarray, field: np.ndarray) -> np.ndarray | float:
    """What to check after ``_fill(field, value)``: a number itself (every cell holds it),
    else the filled field."""
    return value if isinstance(value, (int, float)) else field


def _no_cell(region, grid: Grid, where: str) -> JobError:
    """Why ``region`` selects no cell: it lies outside the block, or it is smaller than a cell."""
    if outside(region.shape, grid):
        return JobError(f"lies outside the block {extent_text(*domain(grid))} (its bounding box is "
                        f"{extent_text(*bounds(region.shape))})", where)
    return JobError("selects no cell centre; enlarge it or refine the grid", where)


def region_masks(regions, grid: Grid, where: str, first: int = 0) -> list[np.ndarray]:
    """One cell mask per region; a region that selects no cell is an error (``first``: the
    index of the first region in its table, for the message)."""
    masks = []
    for i, region in enumerate(regions, start=first):
        m = mask(region.shape, grid)
        if not m.any():
            raise _no_cell(region, grid, f"{where}.{i}")
        masks.append(m)
    return masks


def region_cells(regions, grid: Grid, where: str) -> list[Cells]:
    """Each region's cells as an index: a box's block of slices, any other shape's cell mask.
    A box needs no grid-sized mask: 60 boxes' masks were 60 grid-sized arrays to fill and
    scan, most of a 256^3 job's build (benchmarks/ANALYSIS.md). A region that selects no cell
    is an error."""
    out: list[Cells] = []
    for i, region in enumerate(regions):
        if isinstance(region.shape, Box):
            cells = box_slices(region.shape, grid)
            if any(s.stop <= s.start for s in cells):
                raise _no_cell(region, grid, f"{where}.{i}")
            out.append(cells)
        else:
            out.extend(region_masks([region], grid, where, first=i))
    return out


def selected_volume(grid: Grid, cells: Cells) -> float:
    """Total volume of the cells that ``cells`` (:func:`region_cells`) selects."""
    return grid.block_volume(cells) if isinstance(cells, tuple) else grid.volume(cells)


Coefficient = tuple[np.ndarray, np.ndarray, np.ndarray]


def _component(spec: MaterialSpec, grid: Grid, a: int, selections: list[Cells], scale: float,
               base: np.ndarray | None) -> np.ndarray:
    where = "material" + ("" if not spec.anisotropic else f" ({'xyz'[a]} component)")
    k = np.empty(grid.shape, dtype=np.float64)
    value = base if base is not None else components(spec.base)[a]
    _fill(k, value, grid)  # type: ignore[arg-type]
    _check_finite(_checked(value, k), "material.file" if base is not None else where, positive=True)
    for i, (region, cells) in enumerate(zip(spec.region, selections)):
        v = _values(components(region.value)[a], grid, cells)
        if isinstance(v, np.ndarray):
            _check_finite(v, f"material.region.{i}.value", positive=True)
        k[cells] = v
    if scale != 1.0:
        k *= scale
    return k


def coefficient(spec: MaterialSpec, grid: Grid, scale: float = 1.0,
                base: np.ndarray | tuple[np.ndarray, ...] | None = None) -> Coefficient:
    """The coefficient on the cells as (kx, ky, kz), material values times ``scale``; positive
    and finite. Isotropic materials give the same array three times. ``base`` is the array
    loaded from ``file`` (one, or one per axis)."""
    selections = region_cells(spec.region, grid, "material.region")
    if not spec.anisotropic:
        k = _component(spec, grid, 0, selections, scale, base)  # type: ignore[arg-type]
        return k, k, k
    bases = base if isinstance(base, tuple) else (base, base, base)
    return tuple(_component(spec, grid, a, selections, scale, bases[a]) for a in range(3))  # type: ignore[return-value]


def is_isotropic(k: Coefficient) -> bool:
    return k[0] is k[1] and k[1] is k[2]


# cells per slab of a range: the slab's second read (max after min) comes from the cache
RANGE_SLAB = 1 << 18


def _slab_range(a: np.ndarray) -> tuple[float, float]:
    lo, hi = np.inf, -np.inf
    flat = a.reshape(-1)
    for i in range(0, flat.size, RANGE_SLAB):
        part = flat[i:i + RANGE_SLAB]
        lo, hi = np.minimum(lo, part.min()), np.maximum(hi, part.max())  # (NaN carries through)
    return float(lo), float(hi)


def array_range(a: np.ndarray) -> tuple[float, float]:
    """(min, max) of ``a``, slab by slab, the halves on two cores; NaN when ``a`` has one."""
    parts = halves(_slab_range, a)
    return (float(np.min([p[0] for p in parts])), float(np.max([p[1] for p in parts])))


def value_range(k: Coefficient) -> tuple[float, float]:
    """(min, max) over every cell of every distinct array of ``k``."""
    ranges = [array_range(a) for a in {id(a): a for a in k}.values()]
    return min(r[0] for r in ranges), max(r[1] for r in ranges)


def source(spec: SourceSpec, grid: Grid, base: np.ndarray | None = None) -> np.ndarray:
    """The source f per unit volume on the cells; finite. A region's ``total`` is spread evenly
    per unit volume over the cells it selects (cells take shares by their volume)."""
    f = np.empty(grid.shape, dtype=np.float64)
    value = base if base is not None else spec.base if spec.base is not None else 0.0
    _fill(f, value, grid)
    _check_finite(_checked(value, f), "source.file" if base is not None else "source", positive=False)
    for i, (region, cells) in enumerate(zip(spec.region, region_cells(spec.region, grid, "source.region"))):
        if region.total is not None:
            f[cells] = region.total / selected_volume(grid, cells)
        else:
            v = _values(region.value, grid, cells)
            if isinstance(v, np.ndarray):
                _check_finite(v, f"source.region.{i}.value", positive=False)
            f[cells] = v
    return f
