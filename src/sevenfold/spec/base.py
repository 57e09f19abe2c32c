"""Values, validators and shapes shared by the job file's tables."""

from __future__ import annotations

import difflib
import math
import re
import typing
from typing import Any, Literal, Union

from pydantic import BaseModel, ConfigDict, ValidationError, field_validator, model_validator

from ..expressions import ExpressionError, check_expression

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


# Names of probes and wells: they become file names and column headers
_PLAIN_NAME = re.compile(r"^[A-Za-z0-9_-]+$")


def _plain_name(v: str) -> str:
    if not _PLAIN_NAME.match(v):
        raise ValueError("name may use only letters, digits, '_' and '-'")
    return v


def _positive(v: Any, what: str) -> float:
    v = _number(v)
    if not v > 0:
        raise ValueError(f"{what} must be positive, got {v:g}")
    return v


def _unique_names(items: tuple[Any, ...], table: str) -> None:
    seen: set[str] = set()
    for i, item in enumerate(items):
        if item.name is None:
            continue
        if item.name in seen:
            raise ValueError(f"{table}.{i}.name: {item.name!r} is used by an earlier {table}")
        seen.add(item.name)


# ---------------------------------------------------------------- validation errors
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


def explain(exc: ValidationError, model: type[BaseModel], also: tuple[str, ...] = ()) -> tuple[str, str]:
    """(where, reason) of the error to show for ``exc``, raised validating ``model``.

    An unknown key comes first: a misspelt table or key is usually why a required one is
    missing too (``[materal]`` leaves ``material`` missing). It names the closest known key
    at its place (``also``: keys the top level takes besides the model's fields), and a key
    still missing beside it is named after it."""
    errors = exc.errors()
    unknown = [e for e in errors if e.get("type") == "extra_forbidden"]
    if not unknown:
        err = errors[0]
        return _where(tuple(err["loc"])), _reason(err)
    loc = tuple(unknown[0]["loc"])
    reason = _reason(unknown[0])
    known = sorted(_keys_at(model, loc[:-1]) | (set(also) if len(loc) == 1 else set()))
    close = difflib.get_close_matches(str(loc[-1]), known, n=1)
    if close:
        reason += f"; did you mean {close[0]!r}?"
    missing = [e for e in errors if e.get("type") == "missing"]
    if missing:
        reason += f" (and {_where(tuple(missing[0]['loc']))}: {_reason(missing[0])})"
    return _where(loc), reason


def _models(annotation: Any) -> list[type[BaseModel]]:
    """The models an annotation holds: itself, or those of its unions, tuples and options."""
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return [annotation]
    return [m for arg in typing.get_args(annotation) for m in _models(arg)]


def _keys_at(model: type[BaseModel], loc: tuple[Any, ...]) -> set[str]:
    """The keys a table at ``loc`` (a pydantic error location below ``model``) may hold."""
    models = [model]
    for item in loc:
        if isinstance(item, str) and any(item in m.model_fields for m in models):
            models = [n for m in models if item in m.model_fields
                      for n in _models(m.model_fields[item].annotation)]
        elif isinstance(item, str):  # a union's tag: the member whose literal it is, if one is
            tagged = [m for m in models if any(item in typing.get_args(f.annotation)
                                               for f in m.model_fields.values())]
            models = tagged or models
    return {key for m in models for key in m.model_fields}
