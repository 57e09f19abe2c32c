"""The finite-volume discretisation: the finest level's face arrays from the cell fields.

This module is the one place where the discretisation is written: the matrix-free operator
(:mod:`sevenfold.kernels.stencil`), the CSR matrix (:mod:`sevenfold.kernels.assembly`), the
balance and the derived fluxes all start from :func:`transmissibility` and :func:`fine_stencil`.
t_PN is the conductance between two cell centres and diag holds the boundary faces'
conductances, so the operator is symmetric on graded grids too; held cells have no couplings,
diag 1 and right-hand side 0. Loops run in parallel over x planes.
"""

from __future__ import annotations

from numba import prange

from .jit import njit


@njit(cache=True, inline="always")
def _series(area, hp, kp, hn, kn):
    """Conductance between two cell centres: half of each cell's width over its own k, in
    series, times the face area (the distance-weighted harmonic mean of k)."""
    return area / (0.5 * hp / kp + 0.5 * hn / kn)


@njit(cache=True, parallel=True)
def transmissibility(kx, ky, kz, dx, dy, dz, tx, ty, tz):
    """Face conductances between every cell and its + neighbour along each axis (0 on the
    last plane): ``kx`` etc. are the coefficient's directional components per cell and
    ``dx``, ``dy``, ``dz`` the cell widths along each axis (metres)."""
    nx, ny, nz = kx.shape
    for i in prange(nx):
        for j in range(ny):
            for m in range(nz):
                tx[i, j, m] = (_series(dy[j] * dz[m], dx[i], kx[i, j, m], dx[i + 1], kx[i + 1, j, m])
                               if i < nx - 1 else 0.0)
                ty[i, j, m] = (_series(dx[i] * dz[m], dy[j], ky[i, j, m], dy[j + 1], ky[i, j + 1, m])
                               if j < ny - 1 else 0.0)
                tz[i, j, m] = (_series(dx[i] * dy[j], dz[m], kz[i, j, m], dz[m + 1], kz[i, j, m + 1])
                               if m < nz - 1 else 0.0)


@njit(cache=True, parallel=True)
def fine_stencil(tx, ty, tz, held, held_value, f, dx, dy, dz, face_diag, face_rhs, diag, b):
    """Diagonal and right-hand side of the finest level from the face conductances; then the
    couplings to held cells are cut (moved to the right-hand side), in place.

    ``f`` is the source per unit volume; ``face_diag`` and ``face_rhs`` the six boundary faces'
    conductances and inflows at u = 0 (x_min, x_max, y_min, y_max, z_min, z_max), each 2D.
    """
    nx, ny, nz = tx.shape
    for i in prange(nx):
        for j in range(ny):
            for m in range(nz):
                if held[i, j, m]:
                    diag[i, j, m] = 1.0
                    b[i, j, m] = 0.0
                    continue
                d = 0.0
                rhs = f[i, j, m] * dx[i] * dy[j] * dz[m]
                if i > 0:
                    t = tx[i - 1, j, m]
                    d += t
                    if held[i - 1, j, m]:
                        rhs += t * held_value[i - 1, j, m]
                else:
                    d += face_diag[0][j, m]
                    rhs += face_rhs[0][j, m]
                if i < nx - 1:
                    t = tx[i, j, m]
                    d += t
                    if held[i + 1, j, m]:
                        rhs += t * held_value[i + 1, j, m]
                else:
                    d += face_diag[1][j, m]
                    rhs += face_rhs[1][j, m]
                if j > 0:
                    t = ty[i, j - 1, m]
                    d += t
                    if held[i, j - 1, m]:
                        rhs += t * held_value[i, j - 1, m]
                else:
                    d += face_diag[2][i, m]
                    rhs += face_rhs[2][i, m]
                if j < ny - 1:
                    t = ty[i, j, m]
                    d += t
                    if held[i, j + 1, m]:
                        rhs += t * held_value[i, j + 1, m]
                else:
                    d += face_diag[3][i, m]
                    rhs += face_rhs[3][i, m]
                if m > 0:
                    t = tz[i, j, m - 1]
                    d += t
                    if held[i, j, m - 1]:
                        rhs += t * held_value[i, j, m - 1]
                else:
                    d += face_diag[4][i, j]
                    rhs += face_rhs[4][i, j]
                if m < nz - 1:
                    t = tz[i, j, m]
                    d += t
                    if held[i, j, m + 1]:
                        rhs += t * held_value[i, j, m + 1]
                else:
                    d += face_diag[5][i, j]
                    rhs += face_rhs[5][i, j]
                diag[i, j, m] = d
                b[i, j, m] = rhs
    # second pass (the first reads neighbours' couplings): cut every coupling to a held cell
    for i in prange(nx):
        for j in range(ny):
            for m in range(nz):
                if held[i, j, m] or (i < nx - 1 and held[i + 1, j, m]):
                    tx[i, j, m] = 0.0
                if held[i, j, m] or (j < ny - 1 and held[i, j + 1, m]):
                    ty[i, j, m] = 0.0
                if held[i, j, m] or (m < nz - 1 and held[i, j, m + 1]):
                    tz[i, j, m] = 0.0
