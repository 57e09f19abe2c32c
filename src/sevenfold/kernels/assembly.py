"""Parallel CSR assembly of the 7-point cell-centred finite-volume operator.

Rows are the free (not held) cells in C order of the (nx, ny, nz) array; ``row[i, j, k]`` is a
cell's row or -1 when it is held. Per unit cell volume, the row of cell P reads

    sum_N T_PN (u_P - u_N) + D_P u_P = f_P + B_P

with T_PN = harmonic_mean(k_P, k_N) / h_axis^2 for each neighbour N, D_P and B_P the boundary
faces' terms, and held neighbours moved to the right-hand side (T_PN * held value), so the
matrix stays symmetric. Column indices of each row come out sorted.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange


@njit(cache=True, inline="always")
def harmonic(a: float, b: float) -> float:
    return 2.0 * a * b / (a + b)


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


@njit(cache=True, inline="always")
def _link(p, r_n, t, held_value, indices, data):
    """Couple to one neighbour: a matrix entry if it is free, else a right-hand side term."""
    if r_n >= 0:
        indices[p] = r_n
        data[p] = -t
        return p + 1, 0.0
    return p, t * held_value


@njit(cache=True, parallel=True)
def fill_rows(
    k, f, row, held_value, inv_h2, face_diag, face_rhs, indptr, indices, data, b
) -> None:
    """Write every free row's entries and right-hand side.

    ``inv_h2`` holds 1/h^2 per axis; ``face_diag`` and ``face_rhs`` are the six faces'
    per-volume terms (x_min, x_max, y_min, y_max, z_min, z_max), each 2D over the face.
    """
    nx, ny, nz = row.shape
    cx, cy, cz = inv_h2[0], inv_h2[1], inv_h2[2]
    for i in prange(nx):
        for j in range(ny):
            for k_ in range(nz):
                r = row[i, j, k_]
                if r < 0:
                    continue
                kp = k[i, j, k_]
                p = indptr[r]
                diag = 0.0
                rhs = f[i, j, k_]
                # neighbours in increasing row order: x-, y-, z-, self, z+, y+, x+
                if i > 0:
                    t = harmonic(kp, k[i - 1, j, k_]) * cx
                    diag += t
                    p, add = _link(p, row[i - 1, j, k_], t, held_value[i - 1, j, k_], indices, data)
                    rhs += add
                else:
                    diag += face_diag[0][j, k_]
                    rhs += face_rhs[0][j, k_]
                if j > 0:
                    t = harmonic(kp, k[i, j - 1, k_]) * cy
                    diag += t
                    p, add = _link(p, row[i, j - 1, k_], t, held_value[i, j - 1, k_], indices, data)
                    rhs += add
                else:
                    diag += face_diag[2][i, k_]
                    rhs += face_rhs[2][i, k_]
                if k_ > 0:
                    t = harmonic(kp, k[i, j, k_ - 1]) * cz
                    diag += t
                    p, add = _link(p, row[i, j, k_ - 1], t, held_value[i, j, k_ - 1], indices, data)
                    rhs += add
                else:
                    diag += face_diag[4][i, j]
                    rhs += face_rhs[4][i, j]
                pd = p
                indices[pd] = r
                p += 1
                if k_ < nz - 1:
                    t = harmonic(kp, k[i, j, k_ + 1]) * cz
                    diag += t
                    p, add = _link(p, row[i, j, k_ + 1], t, held_value[i, j, k_ + 1], indices, data)
                    rhs += add
                else:
                    diag += face_diag[5][i, j]
                    rhs += face_rhs[5][i, j]
                if j < ny - 1:
                    t = harmonic(kp, k[i, j + 1, k_]) * cy
                    diag += t
                    p, add = _link(p, row[i, j + 1, k_], t, held_value[i, j + 1, k_], indices, data)
                    rhs += add
                else:
                    diag += face_diag[3][i, k_]
                    rhs += face_rhs[3][i, k_]
                if i < nx - 1:
                    t = harmonic(kp, k[i + 1, j, k_]) * cx
                    diag += t
                    p, add = _link(p, row[i + 1, j, k_], t, held_value[i + 1, j, k_], indices, data)
                    rhs += add
                else:
                    diag += face_diag[1][j, k_]
                    rhs += face_rhs[1][j, k_]
                data[pd] = diag
                b[r] = rhs


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
