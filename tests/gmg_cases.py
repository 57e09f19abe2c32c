"""Multigrid test and benchmark problems given directly as face arrays (the Level format).

``graded_level`` stands in for a job on a grid graded along z until graded grids reach the job
file: x and y uniform (width h = 1/n), z widths growing geometrically from h / ``decades``-th
power of ten at z = 0 to h at the top (three decades: aspect ratios 1000:1 to 1:1), conductivity
``kh`` in x and y and ``kv`` in z. Rows are volume-integrated finite-volume balances (each row
multiplied by its cell volume, which keeps the matrix symmetric on graded grids): the coupling
across a face is k * area / (distance between the two cell centres), a Dirichlet face adds
k * area / (half the cell width) to the diagonal (common practice, cell-centred finite volumes).
"""

from __future__ import annotations

import numpy as np

from sevenfold.solvers.levels import Level


def graded_widths(n: int, decades: float = 3.0) -> np.ndarray:
    """n z widths growing by a constant ratio from 10^-decades / n to 1 / n."""
    return (10.0 ** np.linspace(-decades, 0.0, n)) / n


def graded_level(n: int, nz: int | None = None, kh: float = 100.0, kv: float = 1.0,
                 decades: float = 3.0, holds: bool = False) -> tuple[Level, np.ndarray]:
    """Face arrays and right-hand side of -div(K grad u) = 1 on n x n x nz cells graded along z.

    Dirichlet u = 0 on z_min (the fine end) and x_min, u = 1 on x_max, insulated elsewhere;
    ``holds`` holds a block of cells (a held electrode, u = 2) near the fine end.
    """
    nz = nz or n
    h = 1.0 / n
    dz = graded_widths(nz, decades)
    shape = (n, n, nz)
    area_x = h * dz[None, None, :] * np.ones(shape)  # face normal to x
    area_z = h * h * np.ones(shape)
    tx = np.zeros(shape)
    ty = np.zeros(shape)
    tz = np.zeros(shape)
    tx[:-1] = kh * area_x[:-1] / h
    ty[:, :-1] = kh * area_x[:, :-1] / h
    tz[:, :, :-1] = kv * area_z[:, :, :-1] / (0.5 * (dz[:-1] + dz[1:]))
    diag = np.zeros(shape)
    diag[1:] += tx[:-1]
    diag[:-1] += tx[:-1]
    diag[:, 1:] += ty[:, :-1]
    diag[:, :-1] += ty[:, :-1]
    diag[:, :, 1:] += tz[:, :, :-1]
    diag[:, :, :-1] += tz[:, :, :-1]
    b = (h * h * dz)[None, None, :] * np.ones(shape)
    wall_x = kh * area_x[0] / (0.5 * h)
    diag[0] += wall_x  # x_min, u = 0
    diag[-1] += wall_x  # x_max, u = 1
    b[-1] += wall_x * 1.0
    diag[:, :, 0] += kv * h * h / (0.5 * dz[0])  # z_min, u = 0
    free = np.ones(shape, dtype=bool)
    if holds:
        held = np.zeros(shape, dtype=bool)
        held[n // 4: n // 2, n // 3: (2 * n) // 3, nz // 8: nz // 4] = True
        value = 2.0
        # a free cell next to a held one keeps the coupling on its diagonal and moves
        # t * value to its right-hand side; the held cell gets diag 1, b 0, no couplings
        for t, axis in ((tx, 0), (ty, 1), (tz, 2)):
            lo = [slice(None)] * 3
            hi = [slice(None)] * 3
            lo[axis] = slice(0, shape[axis] - 1)
            hi[axis] = slice(1, shape[axis])
            lo, hi = tuple(lo), tuple(hi)
            cut_lo = held[hi] & ~held[lo]  # free cell below a held one
            cut_hi = held[lo] & ~held[hi]
            b[lo] += np.where(cut_lo, t[lo] * value, 0.0)
            b[hi] += np.where(cut_hi, t[lo] * value, 0.0)
            t[lo] = np.where(held[lo] | held[hi], 0.0, t[lo])
        diag[held] = 1.0
        b[held] = 0.0
        free = ~held
    return Level(tx, ty, tz, diag, free, np.ones(3, dtype=np.int64)), b
