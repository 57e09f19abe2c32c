"""The [material] and [source] tables: values, expressions, files and regions."""

from __future__ import annotations

from typing import Any, Union

from pydantic import field_validator, model_validator

from .base import Scalar, _expression, _Frozen, _number, _scalar, _Shaped


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


