"""The coarsest multigrid level's direct solve.

The level's matrix (at most 16^3 cells by default) is symmetric positive definite: every
coupling is a positive conductance and every level has a held cell, a fixed or convective
face or a pin that anchors it. It is factored as a banded Cholesky factor (LAPACK's pbtrf and pbtrs
through scipy.linalg), its cells numbered with the longest axis outermost so that the
bandwidth is the product of the two shorter sides (256 at 16^3). Against scipy's sparse LU
(SuperLU, minimum degree on A^T + A) the factor takes a third of the time (10-11 against 30
ms at 16^3) and each solve about 1.3 times as long (the band holds 1.05 million entries, the
LU 0.61 million; 8 x 8 x 32 solves faster); warm 128^3 gmg solves took 0.89-0.98 times as
long, 256^3 ones 0.95-1.01 (benchmarks/RESULTS_COARSEST_BAND.md). A gmg run imports no
scipy.sparse.

Where the band would be wide (a coarsest level asked larger than the default) or the
factorisation finds the matrix not positive definite (rounding in a float32 hierarchy could
make it so), a sparse LU takes over.
"""

from __future__ import annotations

import numpy as np

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
        if band is not None:
            from scipy.linalg import LinAlgError, cho_solve_banded, cholesky_banded

            self._solve_banded = cho_solve_banded
            try:
                self._factor = cholesky_banded(band, lower=True, overwrite_ab=True,
                                               check_finite=False)
                self.kind = "band"
            except LinAlgError:
                pass
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
        x = self._solve_banded((self._factor, True), b.transpose(order).astype(np.float64).ravel(),
                               check_finite=False)
        u.transpose(order)[...] = x.reshape(tuple(self.shape[a] for a in order))


def _band_entries(shape: tuple[int, int, int]) -> int:
    """Entries of the lower band of a level with this shape, longest axis outermost."""
    sides = sorted(shape)
    return (sides[0] * sides[1] + 1) * int(np.prod(shape))
