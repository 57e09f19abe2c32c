"""The whole job ([solver], [output], [probe] and the top level) and its loading."""

from __future__ import annotations

import tomllib
from pathlib import Path
from typing import Any, Literal

from pydantic import PrivateAttr, ValidationError, field_validator, model_validator

from ..errors import JobError
from ..physics import DERIVED
from .base import Vector3, _Frozen, _plain_name, _unique_names, _vector, explain
from .conditions import (BoundarySpec, ContactSpec, ExchangeSpec, HoldSpec, PatchSpec, WellSpec,
                         check_wells_and_electrodes)
from .fields import MaterialSpec, SourceSpec
from .grid import GridSpec


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

    _nm = field_validator("name")(lambda cls, v: _plain_name(v))

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


def parse_job(table: dict[str, Any], source: str = "") -> JobSpec:
    """Validate a job table (as read from TOML) into a :class:`JobSpec`."""
    if isinstance(table, dict) and "sweep" in table:
        raise JobError("a [sweep] table stands for one job per combination; queue them with "
                       "`sevenfold submit`", "sweep", source)
    from ..units import convert_units

    try:
        table, notes = convert_units(table)
    except JobError as exc:
        raise exc.located(source) from None
    try:
        spec = JobSpec.model_validate(table)
    except ValidationError as exc:
        where, reason = explain(exc, JobSpec, also=("units", "sweep"))
        raise JobError(reason, where, source) from None
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
