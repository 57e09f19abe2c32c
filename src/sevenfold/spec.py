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
class GridSpec(_Frozen):
    cells: tuple[int, int, int]
    size: Vector3 | None = None
    spacing: Vector3 | None = None
    origin: Vector3 = (0.0, 0.0, 0.0)

    @field_validator("cells", mode="before")
    @classmethod
    def _cells(cls, v: Any) -> Any:
        if not isinstance(v, (list, tuple)) or len(v) != 3:
            raise ValueError("must be a list of three whole numbers [nx, ny, nz]")
        for c in v:
            if isinstance(c, bool) or not isinstance(c, int):
                raise ValueError("must be a list of three whole numbers [nx, ny, nz]")
            if c < 1:
                raise ValueError(f"cell counts must be at least 1, got {c}")
        return tuple(v)

    _v = field_validator("size", "spacing", "origin", mode="before")(lambda cls, v: _vector(v))

    @model_validator(mode="after")
    def _extent(self) -> "GridSpec":
        if (self.size is None) == (self.spacing is None):
            raise ValueError("give exactly one of size or spacing")
        for name in ("size", "spacing"):
            value = getattr(self, name)
            if value is not None and any(not c > 0 for c in value):
                raise ValueError(f"{name} must be positive along every axis, got {list(value)}")
        return self

    @property
    def cell_spacing(self) -> tuple[float, float, float]:
        if self.spacing is not None:
            return self.spacing
        return tuple(s / n for s, n in zip(self.size, self.cells))  # type: ignore[return-value]


# ---------------------------------------------------------------- fields
class MaterialRegion(_Shaped):
    value: Scalar

    _s = field_validator("value", mode="before")(lambda cls, v: _scalar(v))


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
    region: tuple[MaterialRegion, ...] = ()

    @model_validator(mode="after")
    def _needs_base(self) -> "MaterialSpec":
        if self.value is None and self.expression is None and self.file is None:
            raise ValueError("give one of value, expression or file")
        if isinstance(self.value, float) and not self.value > 0:
            raise ValueError(f"value must be positive, got {self.value}")
        for i, r in enumerate(self.region):
            if isinstance(r.value, float) and not r.value > 0:
                raise ValueError(f"region {i}: value must be positive, got {r.value}")
        return self


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

    ``name`` labels the hold in the balance report and the capacitance matrix.
    """

    value: float
    name: str | None = None

    _v = field_validator("value", mode="before")(lambda cls, v: _number(v))


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
        lo = self.grid.origin
        hi = tuple(o + n * h for o, n, h in zip(lo, self.grid.cells, self.grid.cell_spacing))
        seen: set[str] = set()
        for i, probe in enumerate(self.probe):
            if probe.name in seen:
                raise ValueError(f"probe.{i}.name: {probe.name!r} is used by an earlier probe")
            seen.add(probe.name)
            key = "point" if probe.point is not None else "line"
            for p in probe.samples:
                for axis, c, a, b in zip("xyz", p, lo, hi):
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
    try:
        return JobSpec.model_validate(table)
    except ValidationError as exc:
        err = exc.errors()[0]
        raise JobError(_reason(err), _where(tuple(err["loc"])), source) from None


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
