"""The [grid] table: uniform axes, segmented (graded) axes and edge lists."""

from __future__ import annotations

import math
from typing import Any, Literal, Union

from pydantic import ValidationError, field_validator, model_validator

from .base import _finite, _Frozen, _number, _positive, explain


# Adjacent cells along a graded axis may differ in width by at most this factor; a larger
# jump is refused (the flux between two cells loses accuracy as their widths part, and a jump
# is almost always a slip: grade it with a segment's ``first``, ``last`` or ``growth``).
MAX_NEIGHBOUR_RATIO = 3.0
GRADED = "edges"  # the entry of cells, size, spacing and origin for an axis given by [grid.edges]


class Segment(_Frozen):
    """``cells`` cells over ``length`` metres; widths grow by ``growth`` from cell to cell, or
    are graded from a ``first`` (or to a ``last``) cell width; equal widths when none is given."""

    length: float
    cells: int
    growth: float | None = None
    first: float | None = None
    last: float | None = None

    @field_validator("length", "first", "last", mode="before")
    @classmethod
    def _widths(cls, v: Any) -> Any:
        return _positive(v, "a length or width")

    @field_validator("growth", mode="before")
    @classmethod
    def _growth(cls, v: Any) -> Any:
        return _positive(v, "growth ratio")

    @field_validator("cells", mode="before")
    @classmethod
    def _cells(cls, v: Any) -> Any:
        if isinstance(v, bool) or not isinstance(v, int):
            raise ValueError("cells must be a whole number")
        if v < 1:
            raise ValueError(f"a segment needs at least one cell, got {v}")
        return v

    @model_validator(mode="after")
    def _one_grading(self) -> "Segment":
        given = [k for k in ("growth", "first", "last") if getattr(self, k) is not None]
        if len(given) > 1:
            raise ValueError("give at most one of growth, first or last, got " + " and ".join(given))
        for key in ("first", "last"):
            w = getattr(self, key)
            if w is None:
                continue
            if self.cells == 1 and not math.isclose(w, self.length, rel_tol=1e-9):
                raise ValueError(f"{key} = {w:g} differs from the length {self.length:g} of a one-cell segment")
            if self.cells > 1 and not w < self.length:
                raise ValueError(f"{key} = {w:g} must be smaller than the segment length {self.length:g}")
        return self


class SegmentedAxis(_Frozen):
    """An axis built from ``segments`` laid end to end from ``start``."""

    start: float = 0.0
    segments: tuple[Segment, ...]

    _s = field_validator("start", mode="before")(lambda cls, v: _number(v))

    @field_validator("segments")
    @classmethod
    def _some(cls, v: tuple[Segment, ...]) -> tuple[Segment, ...]:
        if not v:
            raise ValueError("give at least one segment")
        return v


def _edge_list(v: Any) -> Any:
    """An explicit axis: a list of strictly increasing edges, or the path of a .npy file."""
    if isinstance(v, str):
        if not v.strip():
            raise ValueError("must be a list of edges, a .npy path or a table of segments")
        return v
    if isinstance(v, dict):
        try:  # validated here so that errors name the segment's own keys
            return SegmentedAxis.model_validate(v)
        except ValidationError as exc:
            where, reason = explain(exc, SegmentedAxis)
            raise ValueError(f"{where}: {reason}") from None
    if not isinstance(v, (list, tuple)) or len(v) < 2:
        raise ValueError("must be a list of at least two edge coordinates, a .npy path or a table of segments")
    out = []
    for i, c in enumerate(v):
        if isinstance(c, bool) or not isinstance(c, (int, float)) or not math.isfinite(c):
            raise ValueError(f"edge {i} is not a finite number")
        if out and not c > out[-1]:
            raise ValueError(f"edges must be strictly increasing: edge {i} ({c:g}) follows {out[-1]:g}")
        out.append(float(c))
    return tuple(out)


AxisEdges = Union[tuple[float, ...], SegmentedAxis, str]


class GridEdges(_Frozen):
    """Graded axes: each an explicit edge list, a .npy file of edges, or segments."""

    x: AxisEdges | None = None
    y: AxisEdges | None = None
    z: AxisEdges | None = None

    _e = field_validator("x", "y", "z", mode="before")(lambda cls, v: _edge_list(v))

    def axis(self, a: int) -> AxisEdges | None:
        return (self.x, self.y, self.z)[a]


def _graded_vector(v: Any, what: str) -> Any:
    """Three entries, each a number or the marker "edges"."""
    if not isinstance(v, (list, tuple)) or len(v) != 3:
        raise ValueError(f"must be a list of three {what} [x, y, z]")
    out = []
    for c in v:
        if c == GRADED:
            out.append(GRADED)
        elif isinstance(c, bool) or not isinstance(c, (int, float)):
            raise ValueError(f"must be a list of three {what} [x, y, z] (or \"{GRADED}\" for an axis in [grid.edges])")
        else:
            out.append(c if what == "whole numbers" else _finite(float(c)))
    return tuple(out)


class GridSpec(_Frozen):
    """Uniform axes by ``cells`` and ``size`` (or ``spacing``) from ``origin``; graded axes by
    ``edges``. An axis given in ``edges`` reads "edges" in cells, size, spacing and origin."""

    cells: tuple[int | Literal["edges"], ...] | None = None
    size: tuple[float | Literal["edges"], ...] | None = None
    spacing: tuple[float | Literal["edges"], ...] | None = None
    origin: tuple[float | Literal["edges"], ...] | None = None
    edges: GridEdges | None = None

    @field_validator("cells", mode="before")
    @classmethod
    def _cells(cls, v: Any) -> Any:
        v = _graded_vector(v, "whole numbers")
        for c in v:
            if c == GRADED:
                continue
            if not isinstance(c, int):
                raise ValueError("must be a list of three whole numbers [nx, ny, nz]")
            if c < 1:
                raise ValueError(f"cell counts must be at least 1, got {c}")
        return v

    _v = field_validator("size", "spacing", "origin", mode="before")(
        lambda cls, v: _graded_vector(v, "numbers"))

    @model_validator(mode="after")
    def _extent(self) -> "GridSpec":
        graded = self.graded_axes
        if len(graded) == 3:
            given = [k for k in ("cells", "size", "spacing", "origin") if getattr(self, k) is not None]
            if given:
                raise ValueError(f"{given[0]}: [grid.edges] gives all three axes; leave out "
                                 + ", ".join(given))
            return self
        if self.cells is None:
            raise ValueError("cells: required key is missing")
        if (self.size is None) == (self.spacing is None):
            raise ValueError("give exactly one of size or spacing")
        for name in ("cells", "size", "spacing", "origin"):
            value = getattr(self, name)
            if value is None:
                continue
            for a, c in enumerate(value):
                axis = "xyz"[a]
                if a in graded and c != GRADED:
                    raise ValueError(f"{name}.{a}: axis {axis} is given by grid.edges.{axis}; "
                                     f"write \"{GRADED}\" here")
                if a not in graded and c == GRADED:
                    raise ValueError(f"{name}.{a}: \"{GRADED}\" needs grid.edges.{axis}")
                if name in ("size", "spacing") and a not in graded and not c > 0:
                    raise ValueError(f"{name} must be positive along every axis, got {list(value)}")
        return self

    @property
    def graded_axes(self) -> tuple[int, ...]:
        if self.edges is None:
            return ()
        return tuple(a for a in range(3) if self.edges.axis(a) is not None)

    def uniform_axis(self, a: int) -> tuple[int, float, float]:
        """(cells, width, origin) of a uniform axis."""
        n = int(self.cells[a])  # type: ignore[index, arg-type]
        h = float(self.spacing[a]) if self.spacing is not None else float(self.size[a]) / n  # type: ignore[index, arg-type]
        o = float(self.origin[a]) if self.origin is not None else 0.0  # type: ignore[arg-type]
        return n, h, o

    def bounds(self, a: int) -> tuple[float, float] | None:
        """The box's extent along axis ``a``, or None when it comes from a file."""
        if a not in self.graded_axes:
            n, h, o = self.uniform_axis(a)
            return o, o + n * h
        e = self.edges.axis(a)  # type: ignore[union-attr]
        if isinstance(e, str):
            return None
        if isinstance(e, SegmentedAxis):
            return e.start, e.start + sum(s.length for s in e.segments)
        return e[0], e[-1]


