"""Parallel CSR assembly of the 7-point cell-centred finite-volume operator from its face
arrays (built by :mod:`sevenfold.kernels.finite_volume`, the one place the discretisation lives).

Rows are the free (not held) cells in C order of the (nx, ny, nz) array; ``row[i, j, k]`` is a
cell's row or -1 when it is held. Column indices of each row come out sorted.
"""

from __future__ import annotations

import numpy as np
from numba import prange

from .jit import njit


@njit(cache=True, parallel=True)
def row_lengths(row: np.ndarray, counts: np.ndarray) -> None:
    """Entries per row: the cell itself plus each free neighbour."""
    nx, ny, nz = row.shape
    for i in prange(nx):
        for j in range(ny):
            for k in range(nz):
                r = row[i, j, k]
                if r < 0:
                    continue
                c = 1
                if i > 0 and row[i - 1, j, k] >= 0:
                    c += 1
                if i < nx - 1 and row[i + 1, j, k] >= 0:
                    c += 1
                if j > 0 and row[i, j - 1, k] >= 0:
                    c += 1
                if j < ny - 1 and row[i, j + 1, k] >= 0:
                    c += 1
                if k > 0 and row[i, j, k - 1] >= 0:
                    c += 1
                if k < nz - 1 and row[i, j, k + 1] >= 0:
                    c += 1
                counts[r] = c


@njit(cache=True, parallel=True)
def fill_rows(tx, ty, tz, diag, b_full, row, indptr, indices, data, b) -> None:
    """Write every free row's entries and right-hand side from the level's face arrays
    (:mod:`sevenfold.kernels.finite_volume`): -t to each free neighbour, ``diag`` on the diagonal."""
    nx, ny, nz = row.shape
    for i in prange(nx):
        for j in range(ny):
            for k in range(nz):
                r = row[i, j, k]
                if r < 0:
                    continue
                p = indptr[r]
                # neighbours in increasing row order: x-, y-, z-, self, z+, y+, x+
                if i > 0 and row[i - 1, j, k] >= 0:
                    indices[p] = row[i - 1, j, k]
                    data[p] = -tx[i - 1, j, k]
                    p += 1
                if j > 0 and row[i, j - 1, k] >= 0:
                    indices[p] = row[i, j - 1, k]
                    data[p] = -ty[i, j - 1, k]
                    p += 1
                if k > 0 and row[i, j, k - 1] >= 0:
                    indices[p] = row[i, j, k - 1]
                    data[p] = -tz[i, j, k - 1]
                    p += 1
                indices[p] = r
                data[p] = diag[i, j, k]
                p += 1
                if k < nz - 1 and row[i, j, k + 1] >= 0:
                    indices[p] = row[i, j, k + 1]
                    data[p] = -tz[i, j, k]
                    p += 1
                if j < ny - 1 and row[i, j + 1, k] >= 0:
                    indices[p] = row[i, j + 1, k]
                    data[p] = -ty[i, j, k]
                    p += 1
                if i < nx - 1 and row[i + 1, j, k] >= 0:
                    indices[p] = row[i + 1, j, k]
                    data[p] = -tx[i, j, k]
                    p += 1
                b[r] = b_full[i, j, k]


@njit(cache=True, parallel=True)
def number_rows(held: np.ndarray, row: np.ndarray) -> int:
    """Number the free cells in C order (row -1 for held cells); returns how many are free."""
    nx, ny, nz = held.shape
    per_slab = np.zeros(nx + 1, dtype=np.int64)
    for i in prange(nx):
        c = 0
        for j in range(ny):
            for k in range(nz):
                if not held[i, j, k]:
                    c += 1
        per_slab[i + 1] = c
    start = np.cumsum(per_slab)
    for i in prange(nx):
        r = start[i]
        for j in range(ny):
            for k in range(nz):
                if held[i, j, k]:
                    row[i, j, k] = -1
                else:
                    row[i, j, k] = r
                    r += 1
    return start[nx]
