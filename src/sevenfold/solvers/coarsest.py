"""The coarsest multigrid level's direct solve.

The level's matrix (at most 16^3 cells by default) is symmetric positive definite: every
coupling is a positive conductance and every level has a held cell, a fixed or convective
face or a pin that anchors it. It is factored by sparse Cholesky, front by front, in the
nested-dissection order of :mod:`.dissection` (``kernels.fronts``). At 17 x 17 x 16 cells that
took 8.9 ms against 21.3 ms for the banded Cholesky factor used before (the level numbered
longest axis outermost, a band of 273), and a solve 0.29 against 0.38 ms; at 16^3 7.5 against
16.8 ms (benchmarks/RESULTS_FRONTS.md). On a long thin level the band was faster (8 x 8 x 32,
a band of 65: 1.2 against 1.7 ms, a solve 0.08 against 0.11 ms), where either costs little.
Both are our own kernels, so a gmg run imports neither scipy.linalg nor scipy.sparse (84-106
ms of every fresh process; benchmarks/RESULTS_COARSEST_KERNEL.md).

Where the factor would be large (a coarsest level asked much larger than the default) or the
factorisation finds the matrix not positive definite (rounding in a float32 hierarchy could
make it so), a sparse LU takes over.
"""

from __future__ import annotations

import numpy as np

from ..kernels.fronts import fronts_factor, fronts_solve
from .dissection import fronts
from .levels import Level

# Largest factor, front and waiting updates kept (entries; 8 bytes each): 17 x 17 x 16 needs
# about 0.7 million; a coarsest level asked much larger than the default takes the sparse LU
FRONT_ENTRIES = 1 << 22
# Levels larger than this are not dissected at all (the tree is built in Python)
LEVEL_CELLS = 1 << 16


class CoarsestSolver:
    """Factor once, then solve the level's equations for any right-hand side.

    ``kind`` is "fronts" (sparse Cholesky in nested-dissection order) or "lu" (sparse LU).
    """

    def __init__(self, level: Level) -> None:
        self.shape = level.shape
        self.kind = "lu"
        self._lu = None
        tree = self._tree = fronts(level.shape) if level.diag.size <= LEVEL_CELLS else None
        if tree is not None and tree.entries <= FRONT_ENTRIES:
            self._factor = np.empty(int(tree.factor_start[-1]))
            arrays = (np.ascontiguousarray(a, dtype=np.float64)
                      for a in (level.tx, level.ty, level.tz, level.diag))
            if fronts_factor(*arrays, tree.index, tree.start, tree.own, tree.children,
                             tree.factor_start, self._factor, np.empty(tree.stack)) == 0:
                self.kind = "fronts"
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
        tree = self._tree
        x = b.astype(np.float64).ravel()  # a fresh array: solved in place
        fronts_solve(tree.index, tree.start, tree.own, tree.factor_start, self._factor, x)
        u[...] = x.reshape(self.shape)
