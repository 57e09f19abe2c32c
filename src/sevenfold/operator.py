"""The finite-volume operator of a :class:`~sevenfold.problem.Problem`: its face arrays, and
the sparse SPD system A u = b assembled from them.

Each row is the balance of one free cell (amount per unit time, e.g. W for heat): the
conductances to its neighbours and boundary faces times the differences in u equal the
source integrated over the cell plus the boundary inflows. With graded cells this form keeps
A symmetric. The discretisation itself lives in :mod:`sevenfold.kernels.finite_volume`; matrix-free
solvers use the face arrays, the others the CSR matrix built from them here.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

# numba, the kernels and scipy.sparse are imported where they are used, so that `check`
# (which imports the balance and with it this module) loads none of them
from .conditions import add_exchanges, apply_contacts
from .problem import Problem, complete_field
from .spec import FACES
from .wells import add_wells

if TYPE_CHECKING:
    import scipy.sparse as sp

INT32_MAX = np.iinfo(np.int32).max


@dataclass(frozen=True)
class FaceArrays:
    """The finest level: couplings to the + neighbour per axis (zero to held cells and on the
    last plane), diagonal and right-hand side, each (nx, ny, nz); held cells have diag 1, b 0."""

    tx: np.ndarray
    ty: np.ndarray
    tz: np.ndarray
    diag: np.ndarray
    b: np.ndarray


@dataclass(frozen=True)
class LinearSystem:
    matrix: "sp.csr_matrix"
    rhs: np.ndarray
    row: np.ndarray  # (nx, ny, nz) row of each cell, -1 where held


def widths(problem: Problem) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    return tuple(np.ascontiguousarray(problem.grid.widths(a)) for a in range(3))  # type: ignore[return-value]


def conductances(problem: Problem, start: int = 0, stop: int | None = None,
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Conductances between neighbouring cells (amount per unit time per unit of u), for the x
    slab ``start:stop`` and its + neighbours, before any coupling to a held cell is cut.

    ``tx[i]`` couples cell ``start + i`` with the next one; the slab's last x plane couples to
    the cell after ``stop`` when there is one (so slabs tile the whole grid).
    """
    from .kernels.finite_volume import transmissibility

    nx = problem.grid.cells[0]
    stop = nx if stop is None else stop
    hi = min(stop + 1, nx)
    k = [np.ascontiguousarray(c[start:hi]) for c in problem.coefficient]
    dx, dy, dz = widths(problem)
    shape = k[0].shape
    tx, ty, tz = (np.empty(shape) for _ in range(3))
    transmissibility(k[0], k[1], k[2], np.ascontiguousarray(dx[start:hi]), dy, dz, tx, ty, tz)
    apply_contacts(problem.contacts, problem.grid, (tx, ty, tz), start, stop)
    n = stop - start
    return tx[:n], ty[:n], tz[:n]


def face_arrays(problem: Problem) -> FaceArrays:
    """The finest level's face arrays, diagonal and right-hand side."""
    from .kernels.finite_volume import fine_stencil

    grid = problem.grid
    dx, dy, dz = widths(problem)
    shape = grid.shape
    tx, ty, tz = conductances(problem)
    diag, b = np.empty(shape), np.empty(shape)
    areas = {f: grid.face_areas(i // 2) for i, f in enumerate(FACES)}
    face_diag = tuple(np.ascontiguousarray(problem.faces[f].diagonal(areas[f])) for f in FACES)
    face_rhs = tuple(np.ascontiguousarray(problem.faces[f].rhs(areas[f])) for f in FACES)
    fine_stencil(tx, ty, tz, problem.held, problem.held_value, problem.source, dx, dy, dz,
                 face_diag, face_rhs, diag, b)
    add_exchanges(problem.exchanges, problem.held, diag, b)
    if problem.wells:
        add_wells(problem.wells, problem.held, diag, b)  # rates to b; a head well's index to diag and b
    return FaceArrays(tx, ty, tz, diag, b)


def number_cells(held: np.ndarray) -> tuple[np.ndarray, int]:
    """Row number of every free cell in C order, -1 for held cells; and the count of rows."""
    from .kernels.assembly import number_rows

    row = np.empty(held.shape, dtype=np.int64)
    n = number_rows(held, row)
    return row, int(n)


def assemble(problem: Problem) -> LinearSystem:
    """Build the CSR matrix and right-hand side from the face arrays (parallel numba kernels)."""
    import scipy.sparse as sp

    from .kernels.assembly import fill_rows, row_lengths

    faces = face_arrays(problem)
    row, n = number_cells(problem.held)
    counts = np.zeros(n, dtype=np.int64)
    row_lengths(row, counts)
    indptr = np.zeros(n + 1, dtype=np.int64)
    np.cumsum(counts, out=indptr[1:])
    del counts
    nnz = int(indptr[-1])
    index_type = np.int32 if max(nnz, n) <= INT32_MAX else np.int64
    indices = np.empty(nnz, dtype=index_type)
    data = np.empty(nnz, dtype=np.float64)
    b = np.empty(n, dtype=np.float64)
    fill_rows(faces.tx, faces.ty, faces.tz, faces.diag, faces.b, row, indptr, indices, data, b)
    del faces
    if index_type is np.int32:
        indptr = indptr.astype(np.int32)
    matrix = sp.csr_matrix((data, indices, indptr), shape=(n, n))
    # scipy may re-check indices; mark them as canonical: sorted, no duplicates, by construction
    matrix.has_sorted_indices = True
    return LinearSystem(matrix, b, row)


def scatter(system: LinearSystem, problem: Problem, x: np.ndarray) -> np.ndarray:
    """The full (nx, ny, nz) field: solved values on free cells, held values on held cells."""
    u = np.zeros(problem.grid.shape)
    free = system.row >= 0
    u[free] = x[system.row[free]]
    return complete_field(problem, u)
