"""Conditions where they really are: face patches, interior exchange and contact resistance.

* ``[[patch]]``: a condition on part of one face, the boundary faces whose centres lie in a
  box. Built on top of the face's own terms (:mod:`sevenfold.boundary`): the selected entries
  of the face's 2D arrays are overwritten, later patches over earlier ones. A neumann patch's
  ``total`` (amount per unit time into the domain) becomes the flux per unit area
  total / (area of the selected faces), so the amount is exact on graded grids.
* ``[[exchange]]``: every cell P inside a shape gains ``c V_P (reference - u_P)`` per unit
  time: ``c V_P`` joins the diagonal and ``c V_P reference`` the right-hand side of free cells
  (held cells stay identity rows). The operator stays symmetric positive definite.
  With ``only = "outflow"`` (a drain) a cell acts only while u > reference: a nonlinear
  switch, settled by repeated solves (:func:`settle_drains`).
* ``[[contact]]``: a resistance per unit area R on the interior cell faces lying on a plane
  (a cell edge): the face's conductance T becomes 1 / (1/T + R/A), A the face's area
  (resistances in series; Incropera and DeWitt, thermal contact resistance, from memory).
  Overlapping contacts on the same faces add their resistances.

Amounts per unit time are in the physics' amount units (W, C, m^3/s). Nothing here does I/O.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Callable

import numpy as np

from .boundary import FaceTerms, boundary_cells, condition_terms
from .errors import JobError
from .fields import _values, region_masks
from .grid import FACE_AXIS, Grid
from .spec import ContactSpec, ExchangeSpec, FaceBox, PatchSpec

# Coordinates within this fraction of the box's extent count as equal (rounding of edges).
ROUNDING = 1e-9


@dataclass(frozen=True)
class PatchTerms:
    """One ``[[patch]]`` as discretised: the boundary faces of ``face`` it selects, and those
    it still owns after later patches (2D boolean arrays in the layout of the face's terms)."""

    name: str
    face: str
    selected: np.ndarray
    owned: np.ndarray
    area: float  # m^2 of the selected faces


@dataclass(frozen=True)
class ExchangeTerms:
    """One ``[[exchange]]``: the cells inside (flat C-order indices), each cell's conductance
    to the reference (coefficient times volume: amount per unit time per unit of u) and the
    reference value there."""

    name: str
    cells: np.ndarray
    conductance: np.ndarray
    reference: np.ndarray
    outflow_only: bool = False  # a drain: acts only where u > reference
    active: np.ndarray | None = None  # a drain's cells acting in this solve; None: all

    @property
    def effective(self) -> np.ndarray:
        """The conductance of each cell as the operator uses it (0 where a drain is idle)."""
        return self.conductance if self.active is None else np.where(self.active, self.conductance, 0.0)

    def grounded(self) -> "ExchangeTerms":
        """The same exchange with reference 0 (for unit-potential solves)."""
        return replace(self, reference=np.zeros_like(self.reference))


@dataclass(frozen=True)
class ContactTerms:
    """One ``[[contact]]``: the faces between cells ``index`` and ``index + 1`` along ``axis``
    where ``selected`` (2D over the two other axes, in order) carry ``resistance`` per unit area."""

    name: str
    axis: int
    index: int
    selected: np.ndarray
    resistance: float


def _within(c: np.ndarray, lo: float, hi: float, tol: float) -> np.ndarray:
    return (lo - tol <= c) & (c <= hi + tol)


def face_selection(grid: Grid, face: str, box: FaceBox) -> np.ndarray:
    """The boundary faces of ``face`` whose centres lie in ``box`` (within rounding), 2D."""
    coords = grid.face_mesh(face)
    inside = np.ones((1, 1), dtype=bool)
    for a in range(3):
        inside = inside & _within(coords[a], box.min[a], box.max[a], ROUNDING * grid.extent[a])
    axis = FACE_AXIS[face][0]
    shape = tuple(n for a, n in enumerate(grid.cells) if a != axis)
    return np.broadcast_to(inside, shape).copy()


_CODES = {"neumann": 0, "dirichlet": 1, "robin": 2}


def apply_patches(patches: tuple[PatchSpec, ...], grid: Grid,
                  k: tuple[np.ndarray, np.ndarray, np.ndarray], faces: dict[str, FaceTerms],
                  ) -> tuple[dict[str, FaceTerms], tuple[PatchTerms, ...]]:
    """The faces' terms with every patch applied in order, and the patches' selections.

    A face keeps its type as ``kind`` when every boundary face of it has one type after the
    patches, else its kind is "mixed". Refuses a patch that selects no boundary face.
    """
    if not patches:
        return faces, ()
    arrays = {f: [t.conductance.copy(), t.value.copy(), t.flux.copy()] for f, t in faces.items()}
    codes = {f: np.full(t.conductance.shape, _CODES[t.kind], dtype=np.int8) for f, t in faces.items()}
    owner = {f: np.full(t.conductance.shape, -1, dtype=np.int32) for f, t in faces.items()}
    selections, areas = [], []
    for i, p in enumerate(patches):
        where = f"patch.{i}"
        name = p.name or f"patch {i}"
        axis, side = FACE_AXIS[p.face]
        sel = face_selection(grid, p.face, p.box)
        if not sel.any():
            plane = float(grid.edges[axis][-1 if side else 0])
            lo, hi = p.box.min[axis], p.box.max[axis]
            c = "xyz"[axis]
            why = (f"face {p.face} lies at {c} = {plane:g}, outside the box's {c} range [{lo:g}, {hi:g}]"
                   if not _within(np.array(plane), lo, hi, ROUNDING * grid.extent[axis])
                   else "no face centre lies in the box; enlarge it or refine the grid")
            raise JobError(f"{name!r} selects no boundary face of {p.face}: {why}", f"{where}.box")
        area_map = grid.face_areas(axis)
        area = float(area_map[sel].sum())
        g, v, q = condition_terms(p, grid, p.face, boundary_cells(k[axis], p.face), where)
        if p.total is not None:
            q = np.full_like(q, p.total / area)
        for target, new in zip(arrays[p.face], (g, v, q)):
            target[sel] = new[sel]
        codes[p.face][sel] = _CODES[p.type]
        owner[p.face][sel] = i
        selections.append(sel)
        areas.append(area)
    out = {}
    names = {v: k for k, v in _CODES.items()}
    for f, t in faces.items():
        present = np.unique(codes[f])
        kind = names[int(present[0])] if present.size == 1 else "mixed"
        out[f] = FaceTerms(kind, *arrays[f])
    terms = tuple(PatchTerms(p.name or f"patch {i}", p.face, sel, owner[p.face] == i, area)
                  for i, (p, sel, area) in enumerate(zip(patches, selections, areas)))
    return out, terms


def _volumes_at(grid: Grid, where: np.ndarray) -> np.ndarray:
    """Volumes (m^3) of the cells selected by ``where``, in C order (as ``array[where]``),
    without a full-grid array: a job without exchanges computed one at every build (0.27 s
    and 8 bytes per cell at 256^3)."""
    i, j, k = np.nonzero(where)
    return grid.widths(0)[i] * grid.widths(1)[j] * grid.widths(2)[k]


def build_exchanges(exchanges: tuple[ExchangeSpec, ...], grid: Grid) -> tuple[ExchangeTerms, ...]:
    """Each exchange's cells, conductances and references; refuses one that selects no cell,
    a negative or non-finite coefficient and a non-finite reference."""
    out = []
    for i, (e, m) in enumerate(zip(exchanges, region_masks(exchanges, grid, "exchange"))):
        where = f"exchange.{i}"
        if e.conductance is not None:
            coefficient = np.full(int(m.sum()), e.conductance / grid.volume(m))
        else:
            coefficient = np.broadcast_to(_values(e.coefficient, grid, m), (int(m.sum()),))  # type: ignore[arg-type]
            if not np.all(np.isfinite(coefficient)):
                raise JobError("evaluates to NaN or infinity in the region", f"{where}.coefficient")
            if not np.all(coefficient >= 0):
                raise JobError(f"must not be negative, minimum is {float(coefficient.min())!r}",
                               f"{where}.coefficient")
        reference = np.array(np.broadcast_to(_values(e.reference, grid, m), coefficient.shape), dtype=np.float64)
        if not np.all(np.isfinite(reference)):
            raise JobError("evaluates to NaN or infinity in the region", f"{where}.reference")
        out.append(ExchangeTerms(e.name or f"exchange {i}", np.flatnonzero(m),
                                 coefficient * _volumes_at(grid, m), reference,
                                 outflow_only=e.only == "outflow"))
    return tuple(out)


def add_exchanges(exchanges: tuple[ExchangeTerms, ...], held: np.ndarray, diag: np.ndarray,
                  b: np.ndarray) -> None:
    """Add each exchange's conductance to the diagonal and conductance * reference to the
    right-hand side of its free cells, in place (``diag`` and ``b`` C-contiguous)."""
    if not exchanges:
        return
    flat_diag, flat_b = diag.reshape(-1), b.reshape(-1)
    assert np.shares_memory(flat_diag, diag) and np.shares_memory(flat_b, b)
    flat_held = held.reshape(-1)
    for e in exchanges:
        free = ~flat_held[e.cells]
        cells = e.cells[free]  # unique within one exchange, so fancy-index += is exact
        g = e.effective[free]
        flat_diag[cells] += g
        flat_b[cells] += g * e.reference[free]


def exchange_outflow(e: ExchangeTerms, u: np.ndarray, held: np.ndarray) -> float:
    """Amount per unit time leaving the free cells of ``e`` into its reference."""
    free = ~held.reshape(-1)[e.cells]
    return float(np.sum(e.effective[free] * (u.reshape(-1)[e.cells[free]] - e.reference[free])))


# Rounds of the drains' fixed-point iteration before giving up.
DRAIN_ROUNDS = 50


def settle_drains(problem, solve: Callable):
    """Solve ``problem`` (by ``solve(problem) -> (u, record)``) with every outflow-only
    exchange acting exactly where u > reference: start with every drain cell acting, solve,
    let act the cells where the solution lies above the reference, and repeat until the set
    of acting cells no longer changes (a primal-dual active-set iteration; the operator stays
    an M-matrix, and for those it settles in finitely many rounds: Hintermueller, Ito and
    Kunisch, SIAM J. Optim. 13, 2002, from memory). A cell within rounding of its reference
    keeps its state. Returns (the problem as finally solved, u, record, rounds); rounds is 0
    when there is no drain. Raises SolverError when the set has not settled in DRAIN_ROUNDS.
    """
    from .errors import SolverError

    if not any(e.outflow_only for e in problem.exchanges):
        u, record = solve(problem)
        return problem, u, record, 0
    current = problem
    for rounds in range(1, DRAIN_ROUNDS + 1):
        u, record = solve(current)
        flat = u.reshape(-1)
        tol = 1e-10 * float(np.abs(u).max() or 1.0)
        changed, new = False, []
        for e in current.exchanges:
            if e.outflow_only:
                above = flat[e.cells] - e.reference
                was = np.ones(e.cells.size, bool) if e.active is None else e.active
                act = np.where(np.abs(above) <= tol, was, above > 0)
                changed |= not np.array_equal(act, was)
                e = replace(e, active=act)
            new.append(e)
        current = replace(current, exchanges=tuple(new))
        if not changed:
            note = f"outflow-only exchanges settled after {rounds} solves"
            record.notes = f"{record.notes}; {note}" if record.notes else note
            return current, u, record, rounds
    raise SolverError(f"the cells of the outflow-only exchanges (only = \"outflow\") did not settle "
                      f"in {DRAIN_ROUNDS} solves; check the exchanges' references")


def build_contacts(contacts: tuple[ContactSpec, ...], grid: Grid) -> tuple[ContactTerms, ...]:
    """Each contact's plane and faces; refuses a plane that is not an interior cell edge and a
    box that selects no face on it."""
    out = []
    for i, c in enumerate(contacts):
        where = f"contact.{i}"
        name = c.name or f"contact {i}"
        axis = "xyz".index(c.axis)
        edges = grid.edges[axis]
        tol = ROUNDING * grid.extent[axis]
        j = int(np.argmin(np.abs(edges - c.at)))
        if abs(edges[j] - c.at) > tol:
            above = int(np.searchsorted(edges, c.at))
            near = [f"{edges[n]:.6g}" for n in (above - 1, above) if 0 <= n < edges.size]
            raise JobError(f"{c.axis} = {c.at:g} is not a cell edge; the nearest edges are "
                           f"{' and '.join(near)} (a contact lies between two cells)", f"{where}.at")
        if j == 0 or j == edges.size - 1:
            raise JobError(f"{c.axis} = {c.at:g} is a face of the box, not between two cells; "
                           "use a robin boundary or [[patch]] there", f"{where}.at")
        others = [a for a in range(3) if a != axis]
        shape = tuple(grid.cells[a] for a in others)
        if c.box is None:
            selected = np.ones(shape, dtype=bool)
        else:
            b = c.box
            if not _within(np.array(c.at), b.min[axis], b.max[axis], tol):
                raise JobError(f"the box's {c.axis} range [{b.min[axis]:g}, {b.max[axis]:g}] does not "
                               f"contain the plane {c.axis} = {c.at:g}", f"{where}.box")
            first, second = (_within(grid.centres(a), b.min[a], b.max[a], ROUNDING * grid.extent[a])
                             for a in others)
            selected = first[:, None] & second[None, :]
            if not selected.any():
                raise JobError(f"{name!r} selects no cell face on {c.axis} = {c.at:g}; enlarge the box "
                               "or refine the grid", f"{where}.box")
        out.append(ContactTerms(name, axis, j - 1, selected, c.resistance))
    return tuple(out)


def apply_contacts(contacts: tuple[ContactTerms, ...], grid: Grid, t: tuple[np.ndarray, ...],
                   start: int = 0, stop: int | None = None) -> None:
    """Put each contact's resistance in series with the face conductances ``t`` = (tx, ty, tz)
    of the x slab ``start:stop`` (``t[a][i]`` belongs to cell ``start + i``), in place."""
    stop = grid.cells[0] if stop is None else stop
    for c in contacts:
        area = grid.face_areas(c.axis)
        sel, ra = c.selected, c.resistance / area
        if c.axis == 0:
            if not start <= c.index < stop:
                continue
            face = t[0][c.index - start]
        else:
            face = t[c.axis][:stop - start, c.index, :] if c.axis == 1 else t[2][:stop - start, :, c.index]
            sel, ra = sel[start:stop], ra[start:stop]
        face[sel] = face[sel] / (1.0 + face[sel] * ra[sel])  # 1 / (1/T + R/A)


def placed_rows(problem) -> list[tuple[str, str]]:
    """(key, text) lines for ``sevenfold check``: what each patch, exchange and contact
    selected on this grid, so a user can see a box catch the faces or cells meant."""
    grid = problem.grid
    rows = []
    for p in problem.patches:
        rows.append(("patch", f"{p.name}: {int(p.selected.sum()):,} faces of {p.face}, {p.area:.4g} m^2"
                     + ("" if p.owned.any() else " (all overridden by later patches)")))
    for e in problem.exchanges:
        volume = float(grid.cell_volumes().reshape(-1)[e.cells].sum())
        rows.append(("exchange", f"{e.name}: {e.cells.size:,} cells, {volume:.4g} m^3"
                     + (", drain (only outflow)" if e.outflow_only else "")))
    for c in problem.contacts:
        at = float(grid.edges[c.axis][c.index + 1])
        area = float(grid.face_areas(c.axis)[c.selected].sum())
        rows.append(("contact", f"{c.name}: {int(c.selected.sum()):,} faces on {'xyz'[c.axis]} = {at:.6g}, "
                     f"{area:.4g} m^2"))
    return rows
