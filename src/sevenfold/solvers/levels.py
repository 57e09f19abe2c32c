"""Multigrid levels: the face-array format of one level, and the rule that reads from a
level's operator which axes to coarsen and whether z-lines are needed (see
:mod:`sevenfold.solvers.gmg` for the hierarchy and cycle built on them)."""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from ..helper import HALVES_FROM, both
from ..kernels import multigrid, stencil
from ..kernels.vector import PARALLEL_FROM

if TYPE_CHECKING:
    import scipy.sparse as sp

# An axis is weak in a cell when its coupling times WEAK_RATIO is below the strongest other
# axis's (2.25 = 1.5^2: cells 1.5 times longer along it); an axis that is weak in more than
# WEAK_FRACTION of the sampled cells is not coarsened on that level.
WEAK_RATIO = 2.25
WEAK_FRACTION = 0.1
SAMPLE_CELLS = 200_000  # cells the coarsening rule looks at per level (a regular subsample)
# A cell boundary across x or y is a wall in the conductivity where, over at least WALL_COVER
# of its plane, the cells on its two sides have diagonals more than WALL_RATIO times apart;
# walls are kept between aggregates on an axis while there is at most one per WALL_SPACING
# cells along it (each costs an aggregate of one cell where a pair would straddle it).
WALL_RATIO = 10.0
WALL_COVER = 0.05
WALL_SPACING = 16


@dataclass
class Level:
    tx: np.ndarray
    ty: np.ndarray
    tz: np.ndarray
    diag: np.ndarray
    free: np.ndarray  # bool: cells (aggregates) carrying an unknown
    step: np.ndarray  # aggregate size per axis towards the next coarser level (1 or 2)
    spacing: tuple[float, float, float] | None = None  # unused by the hierarchy (kept for callers)
    r: np.ndarray | None = None  # work arrays
    e: np.ndarray | None = None
    b: np.ndarray | None = None
    inv_w: np.ndarray | None = None  # z-line pivots (line smoother)
    lines: bool = True  # smoothed by z-lines (else red-black points)
    boost: np.ndarray | None = None  # per-axis factor of unscaled Galerkin couplings
    # per axis, each cell's aggregate on the next level (see aggregates); None on the coarsest
    agg: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None

    @property
    def shape(self) -> tuple[int, int, int]:
        return self.diag.shape

    def apply(self, u: np.ndarray, out: np.ndarray) -> np.ndarray:
        stencil.apply(self.tx, self.ty, self.tz, self.diag, u, out)
        return out

    def astype(self, dtype) -> "Level":
        """A copy of the operator in another float type (free and step shared); float64 to
        float32 on every thread from PARALLEL_FROM cells (numpy's conversion runs on one: about
        twice the time at 256^3, benchmarks/RESULTS_SETUP.md)."""
        def convert(a: np.ndarray) -> np.ndarray:
            if (a.dtype != np.float64 or np.dtype(dtype) != np.float32 or a.size < PARALLEL_FROM
                    or not a.flags.c_contiguous):
                return a.astype(dtype)
            out = np.empty(a.shape, dtype=np.float32)
            multigrid.narrow(a.reshape(-1), out.reshape(-1))
            return out

        return Level(*(convert(a) for a in (self.tx, self.ty, self.tz, self.diag)),
                     self.free, self.step.copy(), self.spacing, agg=self.agg)

    def to_csr(self) -> "sp.csr_matrix":
        """The level's matrix (only for the small coarsest level)."""
        import scipy.sparse as sp

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
            (np.concatenate(vals).astype(np.float64), (np.concatenate(rows), np.concatenate(cols))),
            shape=(n, n),
        )


def strong_z(lv: Level) -> bool:
    """Whether z is the strong axis (WEAK_RATIO times the stronger of x and y below z's
    coupling) in more than WEAK_FRACTION of the sampled cells: where a point smoother leaves
    errors smooth along z only, which z-lines remove (thin cells, a graded z axis)."""
    stride = max(1, int(round((lv.diag.size / SAMPLE_CELLS) ** (1.0 / 3.0))))
    boost = lv.boost if lv.boost is not None else np.ones(3)
    counts = multigrid.axis_weakness(lv.tx, lv.ty, lv.tz, lv.free, boost.astype(np.float64),
                                     WEAK_RATIO, stride, False)
    return counts[4] > WEAK_FRACTION * max(int(counts[3]), 1)


def coarsening_step(lv: Level, lines: bool) -> np.ndarray:
    """Aggregate size per axis (1 or 2) for the next level, read from the operator.

    An axis is coarsened unless it is weakly coupled (see WEAK_RATIO) in more than
    WEAK_FRACTION of the cells: errors smooth along a strong axis but rough along a weak one
    are what point smoothers leave, and only a grid that keeps the weak axis fine represents
    them (semi-coarsening). With z-line smoothing strong z is solved by the lines, so x and y
    are only compared with each other. Couplings are compared per cell, so a grid graded
    along z that is anisotropic only near its fine end keeps z fine on every level.
    """
    shape = lv.shape
    stride = max(1, int(round((lv.diag.size / SAMPLE_CELLS) ** (1.0 / 3.0))))
    boost = lv.boost if lv.boost is not None else np.ones(3)
    counts = multigrid.axis_weakness(lv.tx, lv.ty, lv.tz, lv.free, boost.astype(np.float64),
                                     WEAK_RATIO, stride, lines)
    total = max(int(counts[3]), 1)
    step = np.array([2 if n > 1 and counts[a] <= WEAK_FRACTION * total else 1
                     for a, n in enumerate(shape)], dtype=np.int64)
    if not (step > 1).any():
        # weak somewhere along every axis (strong heterogeneity rather than anisotropy):
        # coarsen the axes that are weak least often rather than stop on a large level
        least = min(counts[a] for a, n in enumerate(shape) if n > 1) if max(shape) > 1 else 0
        step = np.array([2 if n > 1 and counts[a] == least else 1 for a, n in enumerate(shape)],
                        dtype=np.int64)
    return step


def partition(n: int, planes: tuple[int, ...], offset: int = 0) -> np.ndarray:
    """Each cell's aggregate along an axis of ``n`` cells: pairs (0, 1), (2, 3), ... (``offset``
    0) or (0), (1, 2), ... (1), with a cell left alone wherever the next pair would hold one
    of ``planes`` (cell boundaries b, between cells b - 1 and b), so that every plane lies
    between aggregates; an odd last cell alone."""
    cut = set(planes)
    agg = np.empty(n, dtype=np.int64)
    i = coarse = 0
    if offset and n > 1:
        agg[0], i, coarse = 0, 1, 1
    while i < n:
        agg[i] = coarse
        if i + 1 < n and i + 1 not in cut:
            agg[i + 1] = coarse
            i += 1
        i += 1
        coarse += 1
    return agg


def pairs(shape: tuple[int, ...], step, off=(0, 0, 0)) -> tuple[np.ndarray, ...]:
    """Each cell's aggregate per axis for pairs from ``off`` (0: (0, 1), ...; 1: (0), (1, 2),
    ...) where ``step`` is 2, single cells where it is 1."""
    return tuple(np.arange(n, dtype=np.int64) if s == 1 else partition(n, (), o)
                 for n, s, o in zip(shape, step, off))


def material_walls(lv: Level) -> tuple[tuple[int, ...], tuple[int, ...], tuple[int, ...]]:
    """Per axis, the cell boundaries b (between cells b - 1 and b) across x and y where the
    conductivity jumps over a good part of the plane (WALL_RATIO, WALL_COVER), read from the
    operator's diagonal; none along z.

    A pair of cells that straddles such a wall, a cell of a 1000:1 column with one of its
    surroundings, is one unknown on the coarse level, where the two sides' errors differ: the
    1000:1 column took 9 iterations at 256^3 with its walls inside pairs, 7 with them kept
    between aggregates (benchmarks/RESULTS_MATERIAL_WALLS.md). Along z the lines solve
    exactly, and walls of both parities would keep z whole (:func:`aggregates`)."""
    nx, ny, nz = lv.shape
    if lv.diag.size < HALVES_FROM:
        cx, cy = multigrid.wall_counts(lv.diag, lv.free, WALL_RATIO, 0, nx)
    else:  # the two halves of the planes on two cores
        parts = both(lambda: multigrid.wall_counts(lv.diag, lv.free, WALL_RATIO, 0, nx // 2),
                     lambda: multigrid.wall_counts(lv.diag, lv.free, WALL_RATIO, nx // 2, nx))
        cx, cy = parts[0][0] + parts[1][0], parts[0][1] + parts[1][1]
    found = []
    for counts, plane in ((cx, ny * nz), (cy, nx * nz)):
        found.append(tuple(int(b) + 1 for b in np.nonzero(counts >= WALL_COVER * plane)[0]))
    return found[0], found[1], ()


def aggregates(shape: tuple[int, int, int], planes: tuple[tuple[int, ...], ...],
               step: np.ndarray, lines: bool = False,
               walls: tuple[tuple[int, ...], ...] = ((), (), ()),
               ) -> tuple[np.ndarray, tuple[np.ndarray, ...], tuple[tuple[int, ...], ...],
                          tuple[tuple[int, ...], ...]]:
    """Aggregate sizes per axis, each fine cell's aggregate per axis, and where ``planes`` and
    ``walls`` lie on the coarse level, for a level of ``shape`` that :func:`coarsening_step`
    would coarsen by ``step``.

    ``planes[axis]`` holds cell boundaries b (between cells b - 1 and b) that must not fall
    inside an aggregate: faces carrying a contact resistance, whose weak coupling the Galerkin
    product drops when both cells join one aggregate (the coarse levels then miss the
    resistance: 17 iterations instead of 5 at 64^3, benchmarks/RESULTS_WALLS_CONTACT.md; three
    contacts across x of both parities 39 instead of 8 at 128^3,
    benchmarks/RESULTS_PARTITION.md). ``walls[axis]`` (:func:`material_walls`) are kept
    between aggregates like planes while the axis has at most one per WALL_SPACING cells, and
    dropped for good once it has more: many walls of both parities (a stack of layers) would
    leave many cells alone, which cost more than they give (every wall kept: the speed suite's
    layered job 1.17x at 128^3 and 2.15x at 256^3 in the same iterations, its coarse levels
    no longer coarsened along y and z; benchmarks/RESULTS_MATERIAL_WALLS.md). A coarsened axis is paired from the parity most of them
    have, with a cell alone wherever a pair would hold one (:func:`partition`). Along z,
    the level kernels' pair loops vectorise only for pairs (shifted or not): where a level
    smoothed along z lines has z planes of both parities, z keeps its cells instead (the lines
    solve along z exactly, so it need not be coarsened: three joints of both parities took
    8 iterations against the majority's shift's 15 and 11 at 128^3 and 256^3, as many as the
    job without joints, benchmarks/RESULTS_SHIFT_JOINTS.md), unless no other axis would be
    coarsened. ``step`` is not changed; the sizes returned may keep z whole.
    """
    step = step.copy()
    if lines and step[2] == 2 and len({b % 2 for b in planes[2]}) > 1 and (step[:2] > 1).any():
        step[2] = 1
    walls = tuple(at if len(at) <= n // WALL_SPACING else () for n, at in zip(shape, walls))
    agg, coarse, coarse_walls = [], [], []
    for n, s, at, kept in zip(shape, step, planes, walls):
        if s == 1:
            agg.append(np.arange(n, dtype=np.int64))
            coarse.append(tuple(at))
            coarse_walls.append(tuple(kept))
            continue
        cut = tuple(sorted(set(at) | set(kept)))
        odd = sum(b % 2 for b in cut)
        a = partition(n, cut, 1 if 2 * odd > len(cut) else 0)
        agg.append(a)
        coarse.append(tuple(sorted({int(a[b]) for b in at})))
        coarse_walls.append(tuple(sorted({int(a[b]) for b in kept})))
    return step, tuple(agg), tuple(coarse), tuple(coarse_walls)


def plain_pairs(lv: Level) -> bool:
    """Whether ``lv``'s aggregates are the plain pairs (0, 1), (2, 3), ... (or single cells on
    an axis not coarsened), which linear interpolation and full multigrid assume."""
    return all(np.array_equal(a, b) for a, b in zip(lv.agg, pairs(lv.shape, lv.step)))
