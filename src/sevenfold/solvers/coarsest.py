"""The coarsest multigrid level's direct solve.

The level's matrix (at most 16^3 cells by default) is symmetric positive definite: every
coupling is a positive conductance and every level has a held cell, a fixed or convective
face or a pin that anchors it. It is factored as a banded Cholesky factor (``kernels.band``),
its cells numbered with the longest axis outermost so that the bandwidth is the product of the
two shorter sides (256 at 16^3). Against scipy's sparse LU (SuperLU, minimum degree on A^T + A)
a banded factor took a third of the time (benchmarks/RESULTS_COARSEST_BAND.md, LAPACK's pbtrf
then). Our own kernel instead of LAPACK's through scipy.linalg spares a gmg run importing
scipy.linalg (84-106 ms of every fresh process); at 16^3 it factors in 20.5-20.8 ms against
LAPACK's 12.0-12.3 ms on one BLAS thread and solves in the same 0.30 ms
(benchmarks/RESULTS_COARSEST_KERNEL.md); taken in panels since, it factors the 17 x 17 x 16
level of a 128^3 job with arranged aggregates in 21.2 ms against 26.5 ms, LAPACK's 12.3 ms
(benchmarks/RESULTS_COARSEST_PANELS.md).
A gmg run imports neither scipy.linalg nor scipy.sparse.

Where the band would be wide (a coarsest level asked larger than the default) or the
factorisation finds the matrix not positive definite (rounding in a float32 hierarchy could
make it so), a sparse LU takes over.
"""

from __future__ import annotations

import numpy as np

from ..kernels.band import band_cholesky, band_cholesky_solve
from .levels import Level

# Largest band stored (entries; 8 bytes each): 16^3 needs 257 x 4096, about a million
BAND_ENTRIES = 1 << 21


class CoarsestSolver:
    """Factor once, then solve the level's equations for any right-hand side.

    ``kind`` is "band" (banded Cholesky) or "lu" (sparse LU).
    """

    def __init__(self, level: Level) -> None:
        self.shape = level.shape
        self.kind = "lu"
        self._lu = None
        self._factor = None
        band, self._order = level.to_band() if _band_entries(level.shape) <= BAND_ENTRIES else (None, None)
        if band is not None and band_cholesky(band) == 0:
            self._factor = band
            self.kind = "band"
        if self.kind == "lu":
            import scipy.sparse.linalg as sla

            # minimum degree on A^T + A with symmetric pivoting suits an SPD 7-point matrix:
            # at 16^3 it halved the factor's fill, factor time (110 to 53 ms) and solve time
            # (2.8 to 1.3 ms) against the default column ordering
            self._lu = sla.splu(level.to_csr().tocsc(), permc_spec="MMD_AT_PLUS_A",
                                options={"SymmetricMode": True})

    def solve(self, b: np.ndarray, u: np.ndarray) -> None:
        """u = A^-1 b on the level's grid (any float types; the solve runs in float64)."""
        if self.kind == "lu":
            u[...] = self._lu.solve(b.ravel().astype(np.float64)).reshape(self.shape)
            return
        order = self._order
        x = b.transpose(order).astype(np.float64).ravel()  # a fresh array: solved in place
        band_cholesky_solve(self._factor, x)
        u.transpose(order)[...] = x.reshape(tuple(self.shape[a] for a in order))


def _band_entries(shape: tuple[int, int, int]) -> int:
    """Entries of the lower band of a level with this shape, longest axis outermost."""
    sides = sorted(shape)
    return (sides[0] * sides[1] + 1) * int(np.prod(shape))
