"""What each physics calls its quantities, their units, and how material values scale."""

from __future__ import annotations

from dataclasses import dataclass

from scipy.constants import epsilon_0  # vacuum permittivity, CODATA recommended value, F/m


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


PHYSICS = {
    "heat": Physics("temperature", "K", "conductivity", "W/(m K)", "W/m^3", "W/m^2", "W"),
    "electrostatics": Physics(
        "potential", "V", "permittivity", "F/m", "C/m^3", "C/m^2", "C",
        coefficient_scale=epsilon_0,  # material values are relative permittivities
    ),
    "groundwater": Physics("head", "m", "hydraulic_conductivity", "m/s", "1/s", "m/s", "m^3/s"),
    "generic": Physics("u", "1", "k", "1", "1", "1", "1"),
}
