"""The job file's schema: TOML validated into an immutable :class:`JobSpec`.

Units are SI throughout: lengths in metres, coefficients and sources in the units the
physics names (see :mod:`sevenfold.physics`). Boundary fluxes are positive INTO the domain.

One module per part of the file: :mod:`.base` (values, validators, shapes), :mod:`.grid`,
:mod:`.fields` (material and source), :mod:`.conditions` (faces, holds, wells, patches,
exchanges, contacts) and :mod:`.job` (solver, output, probes, the whole job and its loading).
"""

from .base import FACES, METHODS, Box, Cylinder, Scalar, Sphere, Vector3
from .conditions import (CONDITION_KEYS, BoundarySpec, ContactSpec, Dirichlet, ExchangeSpec,
                         FaceBox, HoldSpec, Neumann, PatchSpec, Robin, WellSpec)
from .fields import MaterialRegion, MaterialSpec, SourceRegion, SourceSpec, components
from .grid import GRADED, MAX_NEIGHBOUR_RATIO, GridEdges, GridSpec, Segment, SegmentedAxis
from .job import (JobSpec, OutputSpec, ProbeLine, ProbeSpec, SolverSpec, load_job, parse_job,
                  read_job_table)

__all__ = [
    "FACES", "METHODS", "Box", "Cylinder", "Scalar", "Sphere", "Vector3",
    "CONDITION_KEYS", "BoundarySpec", "ContactSpec", "Dirichlet", "ExchangeSpec", "FaceBox",
    "HoldSpec", "Neumann", "PatchSpec", "Robin", "WellSpec",
    "MaterialRegion", "MaterialSpec", "SourceRegion", "SourceSpec", "components",
    "GRADED", "MAX_NEIGHBOUR_RATIO", "GridEdges", "GridSpec", "Segment", "SegmentedAxis",
    "JobSpec", "OutputSpec", "ProbeLine", "ProbeSpec", "SolverSpec", "load_job", "parse_job",
    "read_job_table",
]
