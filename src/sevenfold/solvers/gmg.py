"""Geometric multigrid on the cell-centred grid, as a preconditioner for conjugate gradients.

Design (chosen for robustness to coefficient jumps that do not line up with coarse cells):

* coarsening by aggregating 2 cells per coarsened axis (any cell count: an odd last cell forms
  its own aggregate); an axis whose effective spacing exceeds 1.5 times the smallest is not
  coarsened (semi-coarsening where cells are strongly anisotropic);
* piecewise-constant prolongation P over each aggregate's free cells, restriction P^T, and
  Galerkin coarse operators P^T A P, which stay 7-point stencils: every coarse coupling is the
  sum of the fine couplings crossing between two aggregates, so jumps in k are carried to the
  coarse levels exactly instead of being averaged (the remedy for averaged-coefficient coarse
  grids; an aggregation form of operator-dependent Galerkin coarsening);
* the coarse correction is scaled by ``overcorrection`` (piecewise-constant P underestimates
  smooth corrections; the scaling for aggregation multigrid is due to Braess, 1995);
* red-black Gauss-Seidel smoothing, red then black before and black then red after the coarse
  correction, so the cycle is a symmetric positive definite preconditioner and CG stays valid;
* a sparse LU of the coarsest level.

The finest level is never stored as a CSR matrix: only its face arrays (tx, ty, tz, diag).
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numba
import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as sla

from ..kernels import stencil
from .cg import Monitor, SolveResult, pcg

COARSEST_CELLS = 512
# Levels smaller than this run their kernels on one thread: there the cost of waking and
# joining threads exceeds the work, and it grows sharply when another process holds a core.
SERIAL_BELOW = 32_768
SEMI_COARSENING_RATIO = 1.5


@dataclass
class Level:
    tx: np.ndarray
    ty: np.ndarray
    tz: np.ndarray
    diag: np.ndarray
    free: np.ndarray  # bool: cells (aggregates) carrying an unknown
    step: np.ndarray  # aggregate size per axis towards the next coarser level (1 or 2)
    spacing: tuple[float, float, float]  # effective spacing, for the coarsening rule
    r: np.ndarray | None = None  # work arrays
    e: np.ndarray | None = None
    b: np.ndarray | None = None

    @property
    def shape(self) -> tuple[int, int, int]:
        return self.diag.shape

    def apply(self, u: np.ndarray, out: np.ndarray) -> np.ndarray:
        stencil.apply(self.tx, self.ty, self.tz, self.diag, u, out)
        return out

    def to_csr(self) -> sp.csr_matrix:
        """The level's matrix (only for the small coarsest level)."""
        shape = self.shape
        n = int(np.prod(shape))
        idx = np.arange(n).reshape(shape)
        rows, cols, vals = [idx.ravel()], [idx.ravel()], [self.diag.ravel()]
        for t, axis in ((self.tx, 0), (self.ty, 1), (self.tz, 2)):
            lo = [slice(None)] * 3
            hi = [slice(None)] * 3
            lo[axis] = slice(0, shape[axis] - 1)
            hi[axis] = slice(1, shape[axis])
            a, c, v = idx[tuple(lo)].ravel(), idx[tuple(hi)].ravel(), t[tuple(lo)].ravel()
            rows += [a, c]
            cols += [c, a]
            vals += [-v, -v]
        return sp.csr_matrix(
            (np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(n, n)
        )


def _coarsening_step(shape, spacing) -> np.ndarray:
    active = [h for n, h in zip(shape, spacing) if n > 1]
    hmin = min(active) if active else 1.0
    return np.array(
        [2 if (n > 1 and h <= SEMI_COARSENING_RATIO * hmin) else 1 for n, h in zip(shape, spacing)],
        dtype=np.int64,
    )


class Hierarchy:
    """The levels, from the finest face arrays down to a factorised coarsest level."""

    def __init__(self, fine: Level, overcorrection: float = 1.8, cycle: str = "W",
                 smoothing: int = 2) -> None:
        self.levels = [fine]
        self.overcorrection = overcorrection
        self.gamma = 2 if cycle == "W" else 1
        self.smoothing = smoothing
        while True:
            lv = self.levels[-1]
            step = _coarsening_step(lv.shape, lv.spacing)
            if int(np.prod(lv.shape)) <= COARSEST_CELLS or not (step > 1).any():
                break
            lv.step = step
            cshape = tuple(int((n + s - 1) // s) for n, s in zip(lv.shape, step))
            arrays = [np.empty(cshape) for _ in range(4)]
            freec = np.empty(cshape, dtype=np.bool_)
            stencil.galerkin(lv.tx, lv.ty, lv.tz, lv.diag, lv.free, step, *arrays, freec)
            spacing = tuple(h * s for h, s in zip(lv.spacing, step))
            coarse = Level(*arrays, freec, np.ones(3, dtype=np.int64), spacing)
            coarse.r, coarse.e, coarse.b = (np.empty(cshape) for _ in range(3))
            self.levels.append(coarse)
        if fine.r is None:
            fine.r = np.empty(fine.shape)
        self.coarsest = sla.splu(self.levels[-1].to_csr().tocsc())

    @property
    def shapes(self) -> list[tuple[int, int, int]]:
        return [lv.shape for lv in self.levels]

    def _smooth(self, lv: Level, b: np.ndarray, u: np.ndarray, order: tuple[int, int]) -> None:
        for _ in range(self.smoothing):
            for colour in order:
                stencil.gauss_seidel_colour(lv.tx, lv.ty, lv.tz, lv.diag, b, u, colour)

    def cycle(self, level: int, b: np.ndarray, u: np.ndarray) -> None:
        """Improve u for A_level u = b in place (u may start at zero)."""
        lv = self.levels[level]
        threads = numba.get_num_threads()
        if threads > 1 and lv.diag.size < SERIAL_BELOW:
            numba.set_num_threads(1)
            try:
                self.cycle(level, b, u)
            finally:
                numba.set_num_threads(threads)
            return
        if level == len(self.levels) - 1:
            u[...] = self.coarsest.solve(b.ravel()).reshape(lv.shape)
            return
        coarse = self.levels[level + 1]
        self._smooth(lv, b, u, (0, 1))
        stencil.residual(lv.tx, lv.ty, lv.tz, lv.diag, b, u, lv.r)
        stencil.restrict(lv.r, lv.free, lv.step, coarse.b)
        coarse.e[...] = 0.0
        # one coarse cycle (V) or two in a row (W); each is symmetric, so the pair is too
        for _ in range(self.gamma if level + 2 < len(self.levels) else 1):
            self.cycle(level + 1, coarse.b, coarse.e)
        stencil.prolong_add(coarse.e, lv.free, lv.step, self.overcorrection, u)
        self._smooth(lv, b, u, (1, 0))

    def precondition(self, r: np.ndarray) -> np.ndarray:
        """One cycle from zero for A z = r. The returned array is reused by the next call."""
        fine = self.levels[0]
        if fine.e is None:
            fine.e = np.empty(fine.shape)
        fine.e[...] = 0.0
        self.cycle(0, r.reshape(fine.shape), fine.e)
        return fine.e.ravel()


class FineOperator:
    """The finest level as a linear operator on flat vectors (for CG)."""

    def __init__(self, level: Level) -> None:
        self.level = level
        self.shape = (level.diag.size, level.diag.size)
        self._out: np.ndarray | None = None

    def __matmul__(self, x: np.ndarray) -> np.ndarray:
        """A x; the returned array is reused by the next product (CG needs one at a time)."""
        if self._out is None:
            self._out = np.empty(self.level.shape)
        self.level.apply(x.reshape(self.level.shape), self._out)
        return self._out.ravel()


def fine_level(problem) -> tuple[Level, np.ndarray]:
    """The finest level's face arrays and the full-grid right-hand side (0 on held cells)."""
    from ..operator import face_arrays

    faces = face_arrays(problem)
    grid = problem.grid
    # effective spacing for the coarsening rule: the mean cell width per axis
    spacing = tuple(e / n for e, n in zip(grid.extent, grid.cells))
    level = Level(faces.tx, faces.ty, faces.tz, faces.diag, ~problem.held,
                  np.ones(3, dtype=np.int64), spacing)
    return level, faces.b


def solve_gmg(problem, rtol: float, max_iterations: int, monitor: Monitor | None = None,
              stagnation_window: int = 50, overcorrection: float = 1.8, cycle: str = "W",
              smoothing: int = 2) -> tuple[np.ndarray, SolveResult]:
    """CG preconditioned by the multigrid cycle; returns u on the full grid (0 on held cells)
    and the solve's record (face arrays built in ``assembly_seconds``, levels in ``setup``)."""
    t0 = time.perf_counter()
    fine, b = fine_level(problem)
    t1 = time.perf_counter()
    hierarchy = Hierarchy(fine, overcorrection, cycle, smoothing)
    setup = time.perf_counter() - t1
    result = pcg(FineOperator(fine), b.ravel(), hierarchy.precondition, rtol, max_iterations,
                 monitor, stagnation_window, "gmg", setup)
    result.assembly_seconds = t1 - t0
    result.notes = "levels " + " > ".join("x".join(map(str, s)) for s in hierarchy.shapes)
    return result.x.reshape(fine.shape), result
