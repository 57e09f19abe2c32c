"""Assemble a :class:`~sevenfold.problem.Problem` into a sparse SPD system A u = b.

A and b are per unit cell volume: A u = b is the finite-volume balance of each free cell
divided by the cell volume (units of the source, e.g. W/m^3 for heat).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from .kernels.assembly import fill_rows, number_rows, row_lengths
from .problem import Problem, complete_field
from .spec import FACES

INT32_MAX = np.iinfo(np.int32).max


@dataclass(frozen=True)
class LinearSystem:
    matrix: sp.csr_matrix
    rhs: np.ndarray
    row: np.ndarray  # (nx, ny, nz) row of each cell, -1 where held


def number_cells(held: np.ndarray) -> tuple[np.ndarray, int]:
    """Row number of every free cell in C order, -1 for held cells; and the count of rows."""
    row = np.empty(held.shape, dtype=np.int64)
    n = number_rows(held, row)
    return row, int(n)


def assemble(problem: Problem) -> LinearSystem:
    """Build the CSR matrix and right-hand side in parallel numba kernels."""
    grid = problem.grid
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
    inv_h2 = np.array([1.0 / h**2 for h in grid.spacing])
    face_diag = tuple(
        np.ascontiguousarray(problem.faces[f].diagonal(grid.spacing[i // 2])) for i, f in enumerate(FACES)
    )
    face_rhs = tuple(
        np.ascontiguousarray(problem.faces[f].rhs(grid.spacing[i // 2])) for i, f in enumerate(FACES)
    )
    fill_rows(
        problem.coefficient, problem.source, row, problem.held_value, inv_h2,
        face_diag, face_rhs, indptr, indices, data, b,
    )
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
