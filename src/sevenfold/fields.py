"""Coefficient and source fields on the cells, from a validated spec.

No I/O here: a field given by ``file`` arrives as an already-loaded array.
"""

from __future__ import annotations

import numpy as np

from .errors import JobError
from .expressions import evaluate
from .grid import Grid
from .shapes import mask
from .spec import MaterialSpec, SourceSpec


def _values(value: float | str, grid: Grid, where: np.ndarray | None = None) -> np.ndarray | float:
    """A scalar, or the expression evaluated on the cell centres (only where ``where``)."""
    if isinstance(value, str):
        x, y, z = grid.mesh()
        full = evaluate(value, x, y, z)
        return full[where] if where is not None else np.array(full, dtype=np.float64)
    return float(value)


def _check_finite(a: np.ndarray, where: str, positive: bool) -> None:
    if not np.all(np.isfinite(a)):
        raise JobError("contains NaN or infinite values", where)
    if positive and not np.all(a > 0):
        raise JobError(f"must be positive everywhere, minimum is {float(a.min())!r}", where)


def region_masks(regions, grid: Grid, where: str) -> list[np.ndarray]:
    """One cell mask per region; a region that selects no cell is an error."""
    masks = []
    for i, region in enumerate(regions):
        m = mask(region.shape, grid)
        if not m.any():
            raise JobError("selects no cell centre; enlarge it or refine the grid", f"{where}.{i}")
        masks.append(m)
    return masks


def coefficient(spec: MaterialSpec, grid: Grid, scale: float = 1.0, base: np.ndarray | None = None) -> np.ndarray:
    """The coefficient k on the cells (material values times ``scale``); positive and finite."""
    k = np.empty(grid.shape, dtype=np.float64)
    if base is not None:
        k[...] = base
    else:
        k[...] = _values(spec.base, grid)  # type: ignore[arg-type]
    _check_finite(k, "material.file" if base is not None else "material", positive=True)
    for i, (region, m) in enumerate(zip(spec.region, region_masks(spec.region, grid, "material.region"))):
        v = _values(region.value, grid, m)
        if isinstance(v, np.ndarray):
            _check_finite(v, f"material.region.{i}.value", positive=True)
        k[m] = v
    if scale != 1.0:
        k *= scale
    return k


def source(spec: SourceSpec, grid: Grid, base: np.ndarray | None = None) -> np.ndarray:
    """The source f per unit volume on the cells; finite."""
    f = np.empty(grid.shape, dtype=np.float64)
    f[...] = base if base is not None else _values(spec.base if spec.base is not None else 0.0, grid)
    _check_finite(f, "source.file" if base is not None else "source", positive=False)
    for i, (region, m) in enumerate(zip(spec.region, region_masks(spec.region, grid, "source.region"))):
        if region.total is not None:
            f[m] = region.total / (np.count_nonzero(m) * grid.cell_volume)
        else:
            v = _values(region.value, grid, m)
            if isinstance(v, np.ndarray):
                _check_finite(v, f"source.region.{i}.value", positive=False)
            f[m] = v
    return f
