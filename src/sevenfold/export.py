"""Reading a finished result back, and exporting it to VTK (.vti image data, or a .vtr
rectilinear grid when an axis is graded).

The files are written by pyevtk (a small, maintained writer of VTK's XML formats). Each
sevenfold cell is one VTK cell: an image's origin is the box's minimum corner and its spacing
the cell spacing; a rectilinear grid carries the cell edges of each axis. The solution and
every derived field on (x, y, z) are cell data. VTK arrays carry no units; they are those of the result (``units`` attribute of each
array in the zarr group).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from .errors import JobError, writing
from .physics import RENAMED
from .spec import JobSpec


class NotConvergedWarning(UserWarning):
    """The result opened holds the last iterate of a solve that stopped short of rtol."""


@dataclass(frozen=True)
class StoredResult:
    """A result's group attributes, its job and its arrays on (x, y, z), lazily read.

    Arrays are named as this version names them: a result written under an older name
    (``head``, now ``hydraulic_head``) is read through ``stored``, current name -> name in
    the group, and ``attrs["solution"]`` holds the current name.
    """

    path: Path
    attrs: dict[str, Any]
    spec: JobSpec
    group: Any  # zarr.Group
    stored: dict[str, str] = field(default_factory=dict)

    @property
    def solution(self) -> str:
        return self.attrs["solution"]

    @property
    def converged(self) -> bool:
        """False when the solve stopped short of rtol (results before the flag: True)."""
        return bool(self.attrs.get("converged", True))

    @property
    def warning(self) -> str | None:
        """One line saying the result did not converge, and how far it got; else None."""
        from .store import not_converged_warning

        return not_converged_warning(self.attrs)

    def cell_fields(self) -> list[str]:
        """Names of the arrays on (x, y, z): the solution first, then derived fields."""
        current = {v: k for k, v in self.stored.items()}
        names = []
        for name, arr in self.group.arrays():
            if tuple(arr.metadata.dimension_names or ()) == ("x", "y", "z"):
                names.append(current.get(name, name))
        names.sort(key=lambda n: (n != self.solution, n))
        return names

    def edges(self, axis: int) -> np.ndarray:
        """Cell-edge coordinates along ``axis`` (stored as ``x_edges`` etc.; results written
        before graded grids existed are uniform and rebuilt from their job)."""
        name = "xyz"[axis] + "_edges"
        if name in self.group:
            return np.asarray(self.group[name][...])
        g = self.spec.grid
        n, h, o = g.uniform_axis(axis)
        return o + h * np.arange(n + 1)

    def _in_group(self, name: str) -> str:
        return self.stored.get(RENAMED.get(name, name), name)

    def lazy(self, name: str) -> Any:
        """The zarr array ``name`` (current name), read only as far as it is indexed."""
        return self.group[self._in_group(name)]

    def array(self, name: str) -> np.ndarray:
        return np.asarray(self.lazy(name)[...])

    def units(self, name: str) -> str:
        return str(self.lazy(name).attrs.get("units", ""))


def open_result(path: str | Path, warn: bool = True) -> StoredResult:
    """Open a finished sevenfold result, or raise JobError with one clear reason.

    A result marked ``converged = false`` opens too, with a :class:`NotConvergedWarning`
    (unless ``warn`` is False: the CLI prints the same line itself).
    """
    import zarr

    path = Path(path)
    if not path.exists():
        raise JobError("no such result", source=str(path))
    try:
        group = zarr.open_group(store=str(path), mode="r")
        attrs = dict(group.attrs)
    except Exception as exc:  # zarr raises many types for things that are not groups
        raise JobError(f"not a zarr result group: {exc}", source=str(path)) from None
    if not attrs.get("complete") or "job" not in attrs:
        raise JobError("not a complete sevenfold result (no 'complete' or 'job' attribute)", source=str(path))
    spec = JobSpec.model_validate(_without_none(attrs["job"]))
    stored = {}
    old = attrs.get("solution")
    if old in RENAMED:  # written before the solution's rename; read under the current name
        attrs["solution"] = RENAMED[old]
        stored[RENAMED[old]] = old
    result = StoredResult(path, attrs, spec, group, stored)
    if warn and result.warning:
        warnings.warn(f"{path}: {result.warning}", NotConvergedWarning, stacklevel=2)
    return result


def _without_none(value: Any) -> Any:
    """The stored job table without null entries (they stand for keys the file left out)."""
    if isinstance(value, dict):
        return {k: _without_none(v) for k, v in value.items() if v is not None}
    if isinstance(value, list):
        return [_without_none(v) for v in value]
    return value


def write_vtk(result: StoredResult, target: str | Path, fields: list[str] | None = None) -> Path:
    """Write ``fields`` (default: every array on (x, y, z)) as cell data: a .vti image when
    every axis is uniform, else a .vtr rectilinear grid (``target``'s suffix is set to match)."""
    from pyevtk.hl import gridToVTK, imageToVTK

    target = Path(target)
    if target.suffix not in (".vti", ".vtr"):
        raise JobError("the VTK file must end in .vti (or .vtr for a graded grid)", source=str(target))
    available = result.cell_fields()
    names = [RENAMED.get(n, n) for n in fields] if fields else available
    unknown = [n for n in names if n not in available]
    if unknown:
        raise JobError(f"no cell field {unknown[0]!r} in the result; it has {', '.join(available)}",
                       source=str(result.path))
    edges = [result.edges(a) for a in range(3)]
    data = {n: np.ascontiguousarray(result.array(n), dtype=np.float64) for n in names}
    widths = [np.diff(e) for e in edges]
    with writing(target, "the VTK file"):
        target.parent.mkdir(parents=True, exist_ok=True)
        if all(np.ptp(w) <= 1e-9 * w.max() for w in widths):
            spacing = tuple(float(w.mean()) for w in widths)
            origin = tuple(float(e[0]) for e in edges)
            written = imageToVTK(str(target.with_suffix("")), origin=origin, spacing=spacing, cellData=data)
        else:
            written = gridToVTK(str(target.with_suffix("")), *(np.ascontiguousarray(e) for e in edges),
                                cellData=data)
    return Path(written)


write_vti = write_vtk  # the name before graded grids
