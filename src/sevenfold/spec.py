"""The job file's schema: TOML validated into an immutable :class:`JobSpec`.

Units are SI throughout: lengths in metres, coefficients and sources in the units the
physics names (see :mod:`sevenfold.physics`). Boundary fluxes are positive INTO the domain.
"""

from __future__ import annotations

import math
import re
import tomllib
from pathlib import Path
from typing import Annotated, Any, Literal, Union

from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    PrivateAttr,
    ValidationError,
    field_validator,
    model_validator,
)

from .errors import JobError
from .expressions import ExpressionError, check_expression
from .physics import DERIVED

FACES = ("x_min", "x_max", "y_min", "y_max", "z_min", "z_max")
METHODS = ("auto", "gmg", "amg", "direct", "fft")


class _Frozen(BaseModel):
    model_config = ConfigDict(frozen=True, extra="forbid", strict=False)


def _finite(v: float) -> float:
    if not math.isfinite(v):
        raise ValueError("must be a finite number")
    return v


def _expression(v: str) -> str:
    try:
        return check_expression(v)
    except ExpressionError as exc:
        raise ValueError(str(exc)) from None


# A numeric value, or a string expression in x, y, z evaluated where the value is used.
Scalar = Union[float, str]
Vector3 = tuple[float, float, float]


def _scalar(v: Any) -> Any:
    if isinstance(v, bool):
        raise ValueError("must be a number or an expression string, not true/false")
    if isinstance(v, (int, float)):
        return _finite(float(v))
    if isinstance(v, str):
        return _expression(v)
    raise ValueError("must be a number or an expression string in x, y, z")


def _number(v: Any) -> float:
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        raise ValueError("must be a number")
    return _finite(float(v))


def _vector(v: Any) -> Any:
    if not isinstance(v, (list, tuple)) or len(v) != 3:
        raise ValueError("must be a list of three numbers [x, y, z]")
    out = []
    for c in v:
        if isinstance(c, bool) or not isinstance(c, (int, float)):
            raise ValueError("must be a list of three numbers [x, y, z]")
        out.append(_finite(float(c)))
    return tuple(out)


# ---------------------------------------------------------------- shapes
class Box(_Frozen):
    min: Vector3
    max: Vector3

    _v = field_validator("min", "max", mode="before")(lambda cls, v: _vector(v))

    @model_validator(mode="after")
    def _ordered(self) -> "Box":
        for axis, lo, hi in zip("xyz", self.min, self.max):
            if not lo < hi:
                raise ValueError(f"box is inverted or empty along {axis}: min {lo} >= max {hi}")
        return self


class Sphere(_Frozen):
    center: Vector3
    radius: float

    _v = field_validator("center", mode="before")(lambda cls, v: _vector(v))

    @field_validator("radius")
    @classmethod
    def _positive(cls, v: float) -> float:
        if not (math.isfinite(v) and v > 0):
            raise ValueError("radius must be a positive number")
        return v


class Cylinder(_Frozen):
    """Axis-aligned cylinder: ``length`` along ``axis``, centred on ``center``."""

    center: Vector3
    radius: float
    axis: Literal["x", "y", "z"]
    length: float

    _v = field_validator("center", mode="before")(lambda cls, v: _vector(v))

    @field_validator("radius", "length")
    @classmethod
    def _positive(cls, v: float) -> float:
        if not (math.isfinite(v) and v > 0):
            raise ValueError("must be a positive number")
        return v


class _Shaped(_Frozen):
    """Something placed by exactly one of ``box``, ``sphere`` or ``cylinder``."""

    box: Box | None = None
    sphere: Sphere | None = None
    cylinder: Cylinder | None = None

    @model_validator(mode="after")
    def _one_shape(self) -> "_Shaped":
        given = [s for s in (self.box, self.sphere, self.cylinder) if s is not None]
        if len(given) != 1:
            raise ValueError("give exactly one shape: box, sphere or cylinder")
        return self

    @property
    def shape(self) -> Box | Sphere | Cylinder:
        return self.box or self.sphere or self.cylinder  # type: ignore[return-value]


# ---------------------------------------------------------------- grid
# Adjacent cells along a graded axis may differ in width by at most this factor; a larger
# jump is refused (the flux between two cells loses accuracy as their widths part, and a jump
# is almost always a slip: grade it with a segment's ``first``, ``last`` or ``growth``).
MAX_NEIGHBOUR_RATIO = 3.0
GRADED = "edges"  # the entry of cells, size, spacing and origin for an axis given by [grid.edges]


def _positive(v: Any, what: str) -> float:
    v = _number(v)
    if not v > 0:
        raise ValueError(f"{what} must be positive, got {v:g}")
    return v


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
            err = exc.errors()[0]
            raise ValueError(f"{_where(tuple(err['loc']))}: {_reason(err)}") from None
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


# ---------------------------------------------------------------- fields
# A coefficient: one value for every direction, or [kx, ky, kz] (a diagonal tensor).
Coefficient = Union[Scalar, tuple[Scalar, Scalar, Scalar]]


def _coefficient(v: Any) -> Any:
    if isinstance(v, (list, tuple)):
        if len(v) != 3:
            raise ValueError("a directional coefficient is a list of three values [kx, ky, kz]")
        return tuple(_scalar(c) for c in v)
    return _scalar(v)


def _per_axis_strings(v: Any, what: str) -> Any:
    if isinstance(v, (list, tuple)):
        if len(v) != 3 or not all(isinstance(c, str) for c in v):
            raise ValueError(f"a directional {what} is a list of three strings [x, y, z]")
        return tuple(v)
    return v


def components(value: Any) -> tuple[Any, Any, Any]:
    """The three directional components of a coefficient value (the same one thrice if scalar)."""
    return tuple(value) if isinstance(value, tuple) else (value, value, value)  # type: ignore[return-value]


def _check_positive(value: Any, where: str) -> None:
    for c in components(value):
        if isinstance(c, float) and not c > 0:
            raise ValueError(f"{where}must be positive, got {c}")


class MaterialRegion(_Shaped):
    value: Coefficient

    _s = field_validator("value", mode="before")(lambda cls, v: _coefficient(v))


class SourceRegion(_Shaped):
    """``value`` per unit volume, or ``total`` spread evenly over the region's cells."""

    value: Scalar | None = None
    total: float | None = None

    _s = field_validator("value", mode="before")(lambda cls, v: _scalar(v))
    _t = field_validator("total", mode="before")(lambda cls, v: _number(v))

    @model_validator(mode="after")
    def _one_amount(self) -> "SourceRegion":
        if (self.value is None) == (self.total is None):
            raise ValueError("give exactly one of value or total")
        return self


class _FieldSpec(_Frozen):
    value: Scalar | None = None
    expression: str | None = None
    file: str | None = None

    _s = field_validator("value", mode="before")(lambda cls, v: _scalar(v))
    _e = field_validator("expression", mode="before")(
        lambda cls, v: _expression(v) if isinstance(v, str) else v
    )

    @model_validator(mode="after")
    def _one_form(self) -> "_FieldSpec":
        given = [f for f in ("value", "expression", "file") if getattr(self, f) is not None]
        if len(given) > 1:
            raise ValueError("give only one of value, expression or file, got " + " and ".join(given))
        return self

    @property
    def base(self) -> float | str | None:
        """The base value: a number, an expression string, or None when given by ``file``."""
        return self.expression if self.expression is not None else self.value


class MaterialSpec(_FieldSpec):
    """The coefficient k: ``value``, ``expression`` or ``file``, each either one for every
    direction or a list of three [x, y, z] (a diagonal tensor: each axis's faces use its own)."""

    value: Coefficient | None = None  # type: ignore[assignment]
    expression: str | tuple[str, str, str] | None = None  # type: ignore[assignment]
    file: str | tuple[str, str, str] | None = None  # type: ignore[assignment]
    region: tuple[MaterialRegion, ...] = ()

    # named as _FieldSpec's validators so that these replace them
    _s = field_validator("value", mode="before")(lambda cls, v: _coefficient(v))
    _e = field_validator("expression", mode="before")(
        lambda cls, v: tuple(_expression(c) for c in _per_axis_strings(v, "expression"))
        if isinstance(v, (list, tuple)) else (_expression(v) if isinstance(v, str) else v))
    _f3 = field_validator("file", mode="before")(lambda cls, v: _per_axis_strings(v, "file"))

    @model_validator(mode="after")
    def _needs_base(self) -> "MaterialSpec":
        if self.value is None and self.expression is None and self.file is None:
            raise ValueError("give one of value, expression or file")
        _check_positive(self.value, "value ")
        for i, r in enumerate(self.region):
            _check_positive(r.value, f"region {i}: value ")
        return self

    @property
    def anisotropic(self) -> bool:
        """Some value is given per direction."""
        return any(isinstance(v, tuple) for v in (self.value, self.expression, self.file,
                                                     *(r.value for r in self.region)))


class SourceSpec(_FieldSpec):
    region: tuple[SourceRegion, ...] = ()


# ---------------------------------------------------------------- boundary
class Dirichlet(_Frozen):
    """The face is held at ``value``."""

    type: Literal["dirichlet"]
    value: Scalar

    _s = field_validator("value", mode="before")(lambda cls, v: _scalar(v))


class Neumann(_Frozen):
    """``flux`` per unit area enters the domain through the face (negative leaves)."""

    type: Literal["neumann"]
    flux: Scalar = 0.0

    _s = field_validator("flux", mode="before")(lambda cls, v: _scalar(v))


class Robin(_Frozen):
    """Inward flux per unit area = ``coefficient`` * (``reference`` - u at the face)."""

    type: Literal["robin"]
    coefficient: Scalar
    reference: Scalar

    _s = field_validator("coefficient", "reference", mode="before")(lambda cls, v: _scalar(v))

    @field_validator("coefficient")
    @classmethod
    def _positive(cls, v: Any) -> Any:
        if isinstance(v, float) and not v > 0:
            raise ValueError(f"coefficient must be positive, got {v}")
        return v


FaceSpec = Annotated[Union[Dirichlet, Neumann, Robin], Field(discriminator="type")]


class BoundarySpec(_Frozen):
    x_min: FaceSpec | None = None
    x_max: FaceSpec | None = None
    y_min: FaceSpec | None = None
    y_max: FaceSpec | None = None
    z_min: FaceSpec | None = None
    z_max: FaceSpec | None = None

    def face(self, name: str) -> Dirichlet | Neumann | Robin:
        """The condition on face ``name``; unlisted faces are insulated (zero flux)."""
        return getattr(self, name) or Neumann(type="neumann", flux=0.0)


class HoldSpec(_Shaped):
    """Cells whose centres fall inside the shape are held at ``value``.

    ``name`` labels the hold in the balance report and the capacitance matrix. In
    electrostatics a hold may give ``charge`` (C) instead of ``value``: a floating electrode,
    whose potential is solved for (see electrodes.py).
    """

    value: float | None = None
    charge: float | None = None
    name: str | None = None

    _v = field_validator("value", "charge", mode="before")(lambda cls, v: _number(v))

    @model_validator(mode="after")
    def _value_or_charge(self) -> "HoldSpec":
        if (self.value is None) == (self.charge is None):
            raise ValueError("give exactly one of value (held) or charge (a floating electrode)")
        return self


class WellSpec(_Frozen):
    """A vertical well at (``x``, ``y``) screened from ``bottom`` to ``top`` (z, metres), with
    bore ``radius`` (m), pumped at ``rate`` (m^3/s INTO the aquifer: negative extracts) or
    held at a well-bore ``head`` (m). Groundwater only; see wells.py."""

    name: str
    x: float
    y: float
    top: float
    bottom: float
    radius: float
    rate: float | None = None
    head: float | None = None

    _n = field_validator("x", "y", "top", "bottom", "radius", "rate", "head", mode="before")(
        lambda cls, v: _number(v))

    @field_validator("name")
    @classmethod
    def _name(cls, v: str) -> str:
        if not _PROBE_NAME.match(v):
            raise ValueError("name may use only letters, digits, '_' and '-'")
        return v

    @field_validator("radius")
    @classmethod
    def _radius(cls, v: float) -> float:
        if not v > 0:
            raise ValueError(f"radius must be positive, got {v:g} m")
        return v

    @model_validator(mode="after")
    def _screen(self) -> "WellSpec":
        if not self.top > self.bottom:
            raise ValueError(f"top ({self.top:g} m) must be above bottom ({self.bottom:g} m)")
        if (self.rate is None) == (self.head is None):
            raise ValueError("give exactly one of rate (m^3/s, negative extracts) or head (m)")
        return self


def check_wells_and_electrodes(job: "JobSpec") -> None:
    """Model-level checks of ``[[well]]`` and floating ``[[hold]]`` tables (messages start with
    the key: a model-level error has no location of its own)."""
    for i, hold in enumerate(job.hold):
        if hold.charge is not None and job.physics != "electrostatics":
            raise ValueError(f"hold.{i}.charge: a floating electrode (charge instead of value) needs "
                             f"physics = 'electrostatics', this job is {job.physics!r}; give value")
    if job.well and job.physics != "groundwater":
        raise ValueError(f"well: wells need physics = 'groundwater', this job is {job.physics!r}")
    seen: set[str] = set()
    for i, well in enumerate(job.well):
        if well.name in seen:
            raise ValueError(f"well.{i}.name: {well.name!r} is used by an earlier well")
        seen.add(well.name)
        for axis, key, values in ((0, "x", (well.x,)), (1, "y", (well.y,)), (2, "top", (well.bottom, well.top))):
            ab = job.grid.bounds(axis)
            if ab is None:
                continue  # an axis read from a file: checked when the wells are placed
            a, b = ab
            slack = 1e-9 * (b - a)
            if any(not (a - slack <= c <= b + slack) for c in values):
                what = f"{key} = {values[0]:g}" if axis < 2 else f"screen [{well.bottom:g}, {well.top:g}]"
                raise ValueError(f"well.{i}: {well.name!r} has {what} m outside the box "
                                 f"[{a:g}, {b:g}] along {'xyz'[axis]}; wells must lie inside the grid")


# ---------------------------------------------------------------- patches, exchanges, contacts
def _not_negative(v: Any, what: str) -> Any:
    if isinstance(v, float) and v < 0:
        raise ValueError(f"{what} must not be negative, got {v}")
    return v


def _unique_names(items: tuple[Any, ...], table: str) -> None:
    seen: set[str] = set()
    for i, item in enumerate(items):
        if item.name is None:
            continue
        if item.name in seen:
            raise ValueError(f"{table}.{i}.name: {item.name!r} is used by an earlier {table}")
        seen.add(item.name)


class FaceBox(Box):
    """A box selecting face centres: it may be flat (min = max) along an axis, e.g. on the
    plane of a face; not inverted."""

    @model_validator(mode="after")
    def _ordered(self) -> "FaceBox":  # replaces Box's check, which refuses flat boxes
        for axis, lo, hi in zip("xyz", self.min, self.max):
            if lo > hi:
                raise ValueError(f"box is inverted along {axis}: min {lo} > max {hi}")
        return self


# The keys each condition type takes, on a face or a patch.
CONDITION_KEYS = {"dirichlet": ("value",), "neumann": ("flux", "total"), "robin": ("coefficient", "reference")}


class PatchSpec(_Frozen):
    """A condition on part of one face: the boundary faces of ``face`` whose centres lie in
    ``box``. The keys are those of ``boundary.<face>``; a neumann patch may give ``total`` (an
    amount per unit time into the domain over the whole patch) instead of ``flux``. A robin
    ``coefficient`` of 0 is accepted (insulated there)."""

    face: str
    box: FaceBox
    type: Literal["dirichlet", "neumann", "robin"]
    name: str | None = None
    value: Scalar | None = None
    flux: Scalar | None = None
    total: float | None = None
    coefficient: Scalar | None = None
    reference: Scalar | None = None

    _s = field_validator("value", "flux", "coefficient", "reference", mode="before")(
        lambda cls, v: _scalar(v))
    _t = field_validator("total", mode="before")(lambda cls, v: _number(v))

    @field_validator("face")
    @classmethod
    def _face(cls, v: str) -> str:
        if v not in FACES:
            raise ValueError(f"unknown face {v!r}; expected one of {', '.join(FACES)}")
        return v

    @model_validator(mode="after")
    def _keys(self) -> "PatchSpec":
        own = CONDITION_KEYS[self.type]
        for key in ("value", "flux", "total", "coefficient", "reference"):
            if getattr(self, key) is not None and key not in own:
                raise ValueError(f"a {self.type} patch takes {' and '.join(own)}, not {key}")
        if self.type == "dirichlet" and self.value is None:
            raise ValueError("a dirichlet patch needs value")
        if self.type == "robin" and (self.coefficient is None or self.reference is None):
            raise ValueError("a robin patch needs coefficient and reference")
        if self.flux is not None and self.total is not None:
            raise ValueError("give flux (per unit area) or total (over the patch), not both")
        _not_negative(self.coefficient, "coefficient")
        return self


class ExchangeSpec(_Shaped):
    """Cells inside the shape exchange with a ``reference``: each gains
    coefficient * V * (reference - u) per unit time. ``coefficient`` is per unit volume;
    ``conductance`` instead gives the whole region's, spread over its cells by volume.
    ``only = "outflow"`` (a drain) acts only where u > reference (solved by iteration)."""

    coefficient: Scalar | None = None
    conductance: float | None = None
    reference: Scalar
    name: str | None = None
    only: Literal["outflow"] | None = None  # "outflow": acts only in cells where u > reference

    _s = field_validator("coefficient", "reference", mode="before")(lambda cls, v: _scalar(v))
    _g = field_validator("conductance", mode="before")(lambda cls, v: _positive(v, "conductance"))

    @model_validator(mode="after")
    def _one_amount(self) -> "ExchangeSpec":
        given = [k for k in ("coefficient", "conductance") if getattr(self, k) is not None]
        if len(given) != 1:
            raise ValueError("give exactly one of coefficient (per unit volume) or conductance "
                             "(for the whole region)" + (", not both" if given else ""))
        if isinstance(self.coefficient, float) and not self.coefficient > 0:
            raise ValueError(f"coefficient must be positive, got {self.coefficient}")
        return self


class ContactSpec(_Frozen):
    """A resistance per unit area on the interior cell faces lying on the plane ``axis`` =
    ``at`` (a cell edge), optionally only those whose centres lie in ``box``; it acts in
    series with the conductance between the two cells."""

    axis: Literal["x", "y", "z"]
    at: float
    resistance: float
    box: FaceBox | None = None
    name: str | None = None

    _a = field_validator("at", mode="before")(lambda cls, v: _number(v))

    @field_validator("resistance", mode="before")
    @classmethod
    def _resistance(cls, v: Any) -> Any:
        return _not_negative(_number(v), "resistance")


# ---------------------------------------------------------------- solver, output
class SolverSpec(_Frozen):
    method: Literal["auto", "gmg", "amg", "direct", "fft"] = "auto"
    rtol: float = 1e-8
    max_iterations: int = 500
    amg: Literal["smoothed_aggregation", "classical"] = "smoothed_aggregation"
    stagnation_window: int = 50

    @field_validator("rtol")
    @classmethod
    def _rtol(cls, v: float) -> float:
        if not (0 < v < 1):
            raise ValueError(f"rtol must be between 0 and 1, got {v}")
        return v

    @field_validator("max_iterations", "stagnation_window")
    @classmethod
    def _count(cls, v: int) -> int:
        if v < 1:
            raise ValueError(f"must be at least 1, got {v}")
        return v


class OutputSpec(_Frozen):
    """Where the result goes; ``fields`` names derived fields to store (see physics.DERIVED)."""

    path: str = "results/{name}.zarr"
    chunks: tuple[int, int, int] = (64, 64, 64)
    fields: tuple[str, ...] = ()

    @field_validator("chunks")
    @classmethod
    def _chunks(cls, v: tuple[int, int, int]) -> tuple[int, int, int]:
        if any(c < 1 for c in v):
            raise ValueError(f"chunk sizes must be at least 1, got {list(v)}")
        return v

    @field_validator("path")
    @classmethod
    def _path(cls, v: str) -> str:
        if not v.strip():
            raise ValueError("path must not be empty")
        return v


# ---------------------------------------------------------------- probes
_PROBE_NAME = re.compile(r"^[A-Za-z0-9_-]+$")


class ProbeLine(_Frozen):
    """``points`` equally spaced samples from ``start`` to ``end``, both included."""

    start: Vector3
    end: Vector3
    points: int

    _v = field_validator("start", "end", mode="before")(lambda cls, v: _vector(v))

    @field_validator("points", mode="before")
    @classmethod
    def _points(cls, v: Any) -> Any:
        if isinstance(v, bool) or not isinstance(v, int) or v < 2:
            raise ValueError("points must be a whole number of at least 2")
        return v

    @model_validator(mode="after")
    def _length(self) -> "ProbeLine":
        if self.start == self.end:
            raise ValueError("start and end are the same point")
        return self


class ProbeSpec(_Frozen):
    """A named sensor: one ``point = [x, y, z]`` or a ``line`` of samples (metres)."""

    name: str
    point: Vector3 | None = None
    line: ProbeLine | None = None

    _v = field_validator("point", mode="before")(lambda cls, v: _vector(v))

    @field_validator("name")
    @classmethod
    def _name(cls, v: str) -> str:
        if not _PROBE_NAME.match(v):
            raise ValueError("name may use only letters, digits, '_' and '-'")
        return v

    @model_validator(mode="after")
    def _one_kind(self) -> "ProbeSpec":
        if (self.point is None) == (self.line is None):
            raise ValueError("give exactly one of point or line")
        return self

    @property
    def samples(self) -> list[tuple[float, float, float]]:
        """The probe's sample points, in metres."""
        if self.point is not None:
            return [self.point]
        line = self.line
        assert line is not None
        n = line.points
        return [
            tuple(a + (b - a) * i / (n - 1) for a, b in zip(line.start, line.end))  # type: ignore[misc]
            for i in range(n)
        ]


class JobSpec(_Frozen):
    name: str
    physics: Literal["heat", "electrostatics", "groundwater", "generic"] = "generic"
    grid: GridSpec
    material: MaterialSpec
    source: SourceSpec = SourceSpec(value=0.0)
    boundary: BoundarySpec = BoundarySpec()
    hold: tuple[HoldSpec, ...] = ()
    solver: SolverSpec = SolverSpec()
    output: OutputSpec = OutputSpec()
    probe: tuple[ProbeSpec, ...] = ()
    patch: tuple[PatchSpec, ...] = ()
    exchange: tuple[ExchangeSpec, ...] = ()
    contact: tuple[ContactSpec, ...] = ()
    well: tuple[WellSpec, ...] = ()
    # The [units] conversions the job was read with (units.py); not part of the dumped job.
    _unit_notes: tuple[str, ...] = PrivateAttr(default=())

    @model_validator(mode="after")
    def _wells_and_electrodes(self) -> "JobSpec":
        check_wells_and_electrodes(self)
        return self

    @field_validator("name")
    @classmethod
    def _name(cls, v: str) -> str:
        if not v.strip() or any(c in v for c in "/\\\0") or v.startswith("."):
            raise ValueError("name must be non-empty, not start with '.', and contain no path separators")
        return v

    @model_validator(mode="after")
    def _outputs(self) -> "JobSpec":
        # Messages start with the key: a model-level error has no location of its own.
        allowed = DERIVED[self.physics]
        for i, name in enumerate(self.output.fields):
            if name not in allowed:
                raise ValueError(
                    f"output.fields.{i}: {name!r} is not a field of physics {self.physics!r}; "
                    f"choose from {', '.join(allowed)}"
                )
        if len(set(self.output.fields)) != len(self.output.fields):
            raise ValueError("output.fields: a field is listed twice")
        _unique_names(self.patch, "patch")
        _unique_names(self.exchange, "exchange")
        _unique_names(self.contact, "contact")
        bounds = [self.grid.bounds(a) for a in range(3)]
        seen: set[str] = set()
        for i, probe in enumerate(self.probe):
            if probe.name in seen:
                raise ValueError(f"probe.{i}.name: {probe.name!r} is used by an earlier probe")
            seen.add(probe.name)
            key = "point" if probe.point is not None else "line"
            for p in probe.samples:
                for axis, c, ab in zip("xyz", p, bounds):
                    if ab is None:
                        continue  # an axis read from a file: checked when the grid is built
                    a, b = ab
                    slack = 1e-9 * (b - a)  # rounding of coordinates given on a face
                    if not (a - slack <= c <= b + slack):
                        raise ValueError(
                            f"probe.{i}.{key}: {probe.name!r} reaches {axis} = {c:g}, outside the box "
                            f"[{a:g}, {b:g}]; probes must lie inside the grid"
                        )
        return self


# ---------------------------------------------------------------- loading
def _where(loc: tuple[Any, ...]) -> str:
    parts: list[str] = []
    for item in loc:
        if isinstance(item, int):
            parts.append(str(item))
        elif item in ("dirichlet", "neumann", "robin", "function-after", "function-before"):
            continue  # discriminator tags and validator names are not keys of the file
        elif isinstance(item, str) and item.startswith(("function-", "tagged-union")):
            continue
        else:
            parts.append(str(item))
    return ".".join(parts)


def _reason(err: dict[str, Any]) -> str:
    kind = err.get("type", "")
    if kind == "extra_forbidden":
        return "unknown key"
    if kind == "missing":
        return "required key is missing"
    if kind == "union_tag_invalid":
        tag = err.get("ctx", {}).get("tag")
        return f"unknown boundary type {tag!r}; expected 'dirichlet', 'neumann' or 'robin'"
    if kind == "union_tag_not_found":
        return "missing 'type'; expected 'dirichlet', 'neumann' or 'robin'"
    msg = str(err.get("msg", "invalid"))
    for prefix in ("Value error, ", "Assertion failed, "):
        if msg.startswith(prefix):
            msg = msg[len(prefix):]
    return msg


def parse_job(table: dict[str, Any], source: str = "") -> JobSpec:
    """Validate a job table (as read from TOML) into a :class:`JobSpec`."""
    if isinstance(table, dict) and "sweep" in table:
        raise JobError("a [sweep] table stands for one job per combination; queue them with "
                       "`sevenfold submit`", "sweep", source)
    from .units import convert_units

    try:
        table, notes = convert_units(table)
    except JobError as exc:
        raise exc.located(source) from None
    try:
        spec = JobSpec.model_validate(table)
    except ValidationError as exc:
        err = exc.errors()[0]
        raise JobError(_reason(err), _where(tuple(err["loc"])), source) from None
    spec._unit_notes = notes
    return spec


def read_job_table(path: Path) -> dict[str, Any]:
    """Read a job file's TOML table, refusing unreadable or malformed files."""
    try:
        text = path.read_bytes().decode("utf-8")
    except FileNotFoundError:
        raise JobError("job file not found", source=str(path)) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise JobError(f"cannot read job file: {exc}", source=str(path)) from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise JobError(f"not valid TOML: {exc}", source=str(path)) from None


def load_job(path: str | Path) -> JobSpec:
    """Read and validate a job file."""
    path = Path(path)
    return parse_job(read_job_table(path), str(path))
