"""A discrete problem: grid, coefficient, source, face terms and held cells, from a spec.

Pure-Neumann problems (no Dirichlet or Robin face and no hold) determine u only up to a
constant and have a solution only when sources and boundary fluxes balance. They are
refused when the imbalance exceeds ``BALANCE_RTOL`` of the total inflow; otherwise the
rounding-level remainder is removed from f, one cell is pinned to make the system definite,
and the solution is reported in the gauge where its volume-weighted mean is 0.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from . import fields
from .boundary import FaceTerms, face_terms
from .conditions import (ContactTerms, ExchangeTerms, PatchTerms, apply_patches, build_contacts,
                         build_exchanges)
from .electrodes import floating_charges
from .errors import JobError
from .grid import FACE_AXIS, Grid, grid_from_spec
from .helper import fill
from .physics import PHYSICS
from .spec import JobSpec
from .wells import Well, place_wells, total_rate

BALANCE_RTOL = 1e-6


@dataclass(frozen=True)
class Problem:
    """Everything the operator needs, as arrays on the grid (SI units of the physics)."""

    grid: Grid
    coefficient: tuple[np.ndarray, np.ndarray, np.ndarray]  # (kx, ky, kz) per cell; one array thrice if isotropic
    source: np.ndarray  # f per unit volume, per cell
    faces: dict[str, FaceTerms]
    held: np.ndarray  # bool per cell
    held_value: np.ndarray  # value of held cells (meaningless elsewhere)
    gauge_mean_zero: bool = False  # pure Neumann: u is shifted to mean zero after the solve
    # Which [[hold]] holds each cell (the last listed that covers it), -1 elsewhere; the cell
    # pinned in a pure-Neumann problem is held but belongs to no hold. None: not recorded.
    hold_index: np.ndarray | None = None
    # [[patch]], [[exchange]] and [[contact]] tables as discretised (see conditions.py); the
    # patches are already part of ``faces``, kept here for the balance and the report.
    patches: tuple[PatchTerms, ...] = ()
    exchanges: tuple[ExchangeTerms, ...] = ()
    contacts: tuple[ContactTerms, ...] = ()
    # Floating electrodes: (hold index, charge in C), held at 0 V here (electrodes.py)
    floating: tuple[tuple[int, float], ...] = ()
    wells: tuple[Well, ...] = ()  # [[well]] tables placed on the grid (wells.py)

    @property
    def unknowns(self) -> int:
        return int(self.grid.size - np.count_nonzero(self.held))


    @property
    def isotropic(self) -> bool:
        return fields.is_isotropic(self.coefficient)

    @cached_property
    def coefficient_range(self) -> tuple[float, float]:
        """(min, max) of the coefficient over every cell and direction, read once: the method
        choice, the fft solve and the plausibility cautions all ask for it."""
        return fields.value_range(self.coefficient)


def neumann_inflow(faces: dict[str, FaceTerms], grid: Grid, absolute: bool = False) -> float:
    """Total prescribed flux entering through Neumann faces (amount per time); with
    ``absolute``, the sum of its magnitudes."""
    return float(sum(((np.abs(t.flux) if absolute else t.flux) * grid.face_areas(FACE_AXIS[name][0])).sum()
                     for name, t in faces.items()))


def build_problem(
    spec: JobSpec,
    coefficient_file: np.ndarray | tuple[np.ndarray, ...] | None = None,
    source_file: np.ndarray | None = None,
    edge_files: dict[int, np.ndarray] | None = None,
) -> Problem:
    """Discretise a validated spec; arrays named by ``file`` keys are passed in already loaded
    (``edge_files`` maps an axis to its edges)."""
    grid = grid_from_spec(spec.grid, edge_files)
    physics = PHYSICS[spec.physics]
    k = fields.coefficient(spec.material, grid, physics.coefficient_scale, coefficient_file)
    f = fields.source(spec.source, grid, source_file)
    faces, patches = apply_patches(spec.patch, grid, k, face_terms(spec.boundary, grid, k))
    placed = dict(patches=patches, exchanges=build_exchanges(spec.exchange, grid),
                  contacts=build_contacts(spec.contact, grid))

    held = np.zeros(grid.shape, dtype=np.bool_)
    held_value = np.zeros(grid.shape, dtype=np.float64)
    hold_index = np.empty(grid.shape, dtype=np.int32)
    fill(hold_index, -1)
    for i, (hold, m) in enumerate(zip(spec.hold, fields.region_masks(spec.hold, grid, "hold"))):
        held |= m
        held_value[m] = hold.value if hold.value is not None else 0.0  # floating: 0 V, see electrodes.py
        hold_index[m] = i
    if held.all():
        raise JobError("every cell is held; nothing is left to solve", "hold")

    floating = floating_charges(spec, hold_index, faces)
    wells = place_wells(spec.well, grid, k, held)
    # fixed by a hold, a face or patch with a conductance (dirichlet, robin), an exchange, or a
    # head well (a drain, acting only where u > reference, may end up idle: it fixes nothing)
    fixed = (held.any() or any(t.conductance.any() for t in faces.values())
             or any(e.conductance.any() for e in placed["exchanges"] if not e.outflow_only)
             or any(w.head is not None for w in wells))
    if not fixed and any(e.outflow_only for e in placed["exchanges"]):
        raise JobError("an exchange with only = \"outflow\" may stop acting, so it cannot be the only "
                       "condition that fixes u; add a dirichlet or robin face, a hold, or an exchange "
                       "that acts both ways", "exchange")
    if fixed:
        return Problem(grid, k, f, faces, held, held_value, hold_index=hold_index, floating=floating,
                       wells=wells, **placed)

    inflow = neumann_inflow(faces, grid)
    generated = grid.integrate(f) + total_rate(wells)  # rate wells are sources too
    imbalance = generated + inflow
    scale = (grid.integrate(np.abs(f)) + neumann_inflow(faces, grid, absolute=True)
             + total_rate(wells, absolute=True))
    if abs(imbalance) > BALANCE_RTOL * scale:
        units = physics.amount_units
        raise JobError(
            f"pure-Neumann problem (no dirichlet or robin face, no hold) is unbalanced: sources "
            f"add {generated:.6g} {units} and boundary fluxes {inflow:.6g} {units}, net {imbalance:.6g} "
            f"{units} ({abs(imbalance) / scale:.3g} of the total); balance them or fix a face or a hold",
            "boundary",
        )
    f = f - imbalance / float(np.prod(grid.extent))
    held[0, 0, 0] = True  # pin: with a balanced right-hand side the pinned equation holds too
    return Problem(grid, k, f, faces, held, held_value, gauge_mean_zero=True, hold_index=hold_index,
                   wells=wells, **placed)


def complete_field(problem: Problem, u: np.ndarray) -> np.ndarray:
    """The full field from solved values on the free cells: held cells take their values,
    and a pure-Neumann solution is shifted to mean zero. ``u`` is changed in place."""
    np.copyto(u, problem.held_value, where=problem.held)
    if problem.gauge_mean_zero:
        grid = problem.grid
        u -= grid.integrate(u) / float(np.prod(grid.extent))  # the volume-weighted mean
    return u
