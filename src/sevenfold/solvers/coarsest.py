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

With numba on two threads or more, a level of TWO_THREADS_FROM cells or more is factored on
two: the process's helper thread (:mod:`sevenfold.helper`) factors the root's second
subtree while the calling thread factors the first, then the calling thread the root (the
kernel releases the GIL); the factor is the serial one bit for bit. On an idle 2-core machine
that took 0.58-0.60 of the serial time at 17 x 17 x 16 (5.5 against 9.2 ms), 16^3 and
9 x 9 x 16, 0.53 at 8 x 8 x 32 and 0.63 at 10^3 (0.60 against 0.95 ms); below 10^3 cells it
saves under 0.1 ms (0.68 of 0.33 ms at 8^3, 0.83 at 6^3), so those levels stay serial. With
the other core busy, two threads took 1.02-1.05 times the serial time
(benchmarks/fronts_threads_bench.py).

Where the factor would be large (a coarsest level asked much larger than the default) or the
factorisation finds the matrix not positive definite (rounding in a float32 hierarchy could
make it so), a sparse LU takes over.
"""

from __future__ import annotations

import numpy as np

from ..helper import both, threads
from ..kernels.fronts import fronts_factor, fronts_solve
from .dissection import Fronts, fronts
from .levels import Level

# Largest factor, front and waiting updates kept (entries; 8 bytes each): 17 x 17 x 16 needs
# about 0.7 million; a coarsest level asked much larger than the default takes the sparse LU
FRONT_ENTRIES = 1 << 22
# Levels larger than this are not dissected at all (the tree is built in Python)
LEVEL_CELLS = 1 << 16
# Levels of at least this many cells are factored on two threads (see above)
TWO_THREADS_FROM = 1000


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
            two = threads() > 1 and level.diag.size >= TWO_THREADS_FROM
            if factor(tree, level, self._factor, two) == 0:
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


def factor(tree: Fronts, level: Level, out: np.ndarray, two_threads: bool) -> int:
    """``fronts_factor`` of ``level`` (its fronts ``tree``) into ``out``: 0, or 1 when the
    matrix is not positive definite. On ``two_threads`` (when the root has two subtrees) the
    helper thread factors the root's second subtree while this thread factors the first
    (:func:`sevenfold.helper.both`: both here when no thread can be had), then the root; the
    factor is the same bit for bit."""
    arrays = (np.ascontiguousarray(a, dtype=np.float64)
              for a in (level.tx, level.ty, level.tz, level.diag))
    args = (*arrays, tree.index, tree.start, tree.own, tree.first, tree.factor_start, out)
    nodes = tree.own.size
    offset = np.empty(nodes, dtype=np.int64)
    if two_threads and tree.halves is not None:
        middle, first_stack, second_stack = tree.halves
        stack = np.empty(first_stack + second_stack)
        mine, theirs = both(lambda: fronts_factor(*args, stack, offset, 0, middle, 0),
                            lambda: fronts_factor(*args, stack, offset, middle, nodes - 1, first_stack))
        return mine or theirs or fronts_factor(*args, stack, offset, nodes - 1, nodes, 0)
    return fronts_factor(*args, np.empty(tree.stack), offset, 0, nodes, 0)
