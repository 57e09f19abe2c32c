"""Conditions: faces ([boundary]), held regions, wells, patches, exchanges and contacts."""

from __future__ import annotations

from typing import TYPE_CHECKING, Annotated, Any, Literal, Union

from pydantic import Field, field_validator, model_validator

from .base import FACES, Box, Scalar, _Frozen, _number, _plain_name, _positive, _scalar, _Shaped

if TYPE_CHECKING:
    from .job import JobSpec


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

    _nm = field_validator("name")(lambda cls, v: _plain_name(v))

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


