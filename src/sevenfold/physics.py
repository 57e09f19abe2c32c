"""What each physics calls its quantities, their units, and how material values scale."""

from __future__ import annotations

from dataclasses import dataclass

# Vacuum permittivity, F/m: the CODATA 2022 recommended value (a literal: importing
# scipy.constants costs a tenth of a second at every start; a test compares the two).
EPSILON_0 = 8.8541878188e-12


@dataclass(frozen=True)
class Physics:
    solution: str
    solution_units: str
    coefficient: str
    coefficient_units: str
    source_units: str
    flux_units: str
    amount_units: str  # what a source total or a face flux integrates to
    coefficient_scale: float = 1.0  # material values are multiplied by this


# Solution names results written by earlier versions use: old name -> current name. The
# groundwater solution was ``head``, which xarray's Dataset.head() hides from attribute access.
RENAMED = {"head": "hydraulic_head"}


PHYSICS = {
    "heat": Physics("temperature", "K", "conductivity", "W/(m K)", "W/m^3", "W/m^2", "W"),
    "electrostatics": Physics(
        "potential", "V", "permittivity", "F/m", "C/m^3", "C/m^2", "C",
        coefficient_scale=EPSILON_0,  # material values are relative permittivities
    ),
    "groundwater": Physics("hydraulic_head", "m", "hydraulic_conductivity", "m/s", "1/s", "m/s", "m^3/s"),
    "generic": Physics("u", "1", "k", "1", "1", "1", "1"),
}


@dataclass(frozen=True)
class DerivedField:
    """A field a job may ask for in ``output.fields``, computed from the solution.

    ``kind`` is one of ``flux`` (-k grad u, three arrays ``<name>_x/_y/_z``),
    ``negative_gradient`` (-grad u, three arrays), ``gradient_magnitude`` (|grad u|),
    ``coefficient`` (k as used, after regions and scaling) and ``source`` (f as used).
    """

    kind: str
    units: str
    long_name: str

    @property
    def vector(self) -> bool:
        return self.kind in ("flux", "negative_gradient")


DERIVED = {
    "heat": {
        "heat_flux": DerivedField("flux", "W/m^2", "heat flux -k grad T"),
        "temperature_gradient_magnitude": DerivedField("gradient_magnitude", "K/m", "|grad T|"),
        "conductivity": DerivedField("coefficient", "W/(m K)", "thermal conductivity as used"),
        "heat_source": DerivedField("source", "W/m^3", "heat source per unit volume as used"),
    },
    "electrostatics": {
        "electric_displacement": DerivedField("flux", "C/m^2", "electric displacement D = -eps grad phi"),
        "electric_field": DerivedField("negative_gradient", "V/m", "electric field E = -grad phi"),
        "electric_field_magnitude": DerivedField("gradient_magnitude", "V/m", "|E|"),
        "permittivity": DerivedField("coefficient", "F/m", "absolute permittivity as used"),
        "charge_density": DerivedField("source", "C/m^3", "free charge density as used"),
    },
    "groundwater": {
        "darcy_flux": DerivedField("flux", "m/s", "Darcy flux (specific discharge) -K grad h"),
        "hydraulic_gradient_magnitude": DerivedField("gradient_magnitude", "1", "|grad h|"),
        "hydraulic_conductivity": DerivedField("coefficient", "m/s", "hydraulic conductivity as used"),
        "source": DerivedField("source", "1/s", "volumetric source per unit volume as used"),
    },
    "generic": {
        "flux": DerivedField("flux", "1", "flux -k grad u"),
        "gradient_magnitude": DerivedField("gradient_magnitude", "1", "|grad u|"),
        "k": DerivedField("coefficient", "1", "coefficient k as used"),
        "source": DerivedField("source", "1", "source f as used"),
    },
}
