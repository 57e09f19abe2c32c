"""The coarsest level's sparse Cholesky factor, front by front (the multifrontal method), and
its solve.

The elimination order and the fronts come from :mod:`sevenfold.solvers.dissection` as plain
arrays: ``index[start[f]:start[f + 1]]`` are front f's cells (C-order numbers of the level's
grid), its ``own[f]`` cells to eliminate first, then the later cells their columns of the
factor reach; fronts ``first[f]`` .. f - 1 are f's subtree (the fronts come children first:
the last child is f - 1, the one before it ends where that child's subtree begins).
Each front is a dense symmetric matrix in :mod:`.band`'s storage with the front's size as
width (``a[c, d]`` is entry (c + d, c)). It gathers the level's own entries of its own cells'
columns and adds its children's updates; its own columns are factored and the rest left
updated (``band_cholesky`` with a stop), and that rest, the front's update, is handed to its
parent (common practice: I. S. Duff and J. K. Reid, "The multifrontal solution of indefinite
sparse symmetric linear equations", ACM TOMS 9 (1983); from memory).

The level's matrix: (A u)_P = diag_P u_P - sum_N t_PN u_N, ``tx[i, j, k]`` coupling cell
(i, j, k) with (i + 1, j, k), likewise ``ty`` and ``tz``, all float64. Both kernels are
serial; the factor takes a range of fronts and releases the GIL, so that two subtrees can be
factored at once (:mod:`sevenfold.solvers.coarsest`).
"""

from __future__ import annotations

import numpy as np

from .band import band_cholesky
from .jit import njit


@njit(cache=True)
def _gather_columns(a, cells, owned, where, tx, ty, tz, diag):
    """The level's entries of the front's own columns: entry (r, c) for every front cell r
    at or after own cell c (an earlier neighbour's entry was gathered by its own front)."""
    nx, ny, nz = diag.shape
    plane = ny * nz
    for c in range(owned):
        g = cells[c]
        i, rest = divmod(g, plane)
        j, k = divmod(rest, nz)
        a[c, 0] += diag[i, j, k]
        if i + 1 < nx and where[g + plane] > c:
            a[c, where[g + plane] - c] -= tx[i, j, k]
        if i > 0 and where[g - plane] > c:
            a[c, where[g - plane] - c] -= tx[i - 1, j, k]
        if j + 1 < ny and where[g + nz] > c:
            a[c, where[g + nz] - c] -= ty[i, j, k]
        if j > 0 and where[g - nz] > c:
            a[c, where[g - nz] - c] -= ty[i, j - 1, k]
        if k + 1 < nz and where[g + 1] > c:
            a[c, where[g + 1] - c] -= tz[i, j, k]
        if k > 0 and where[g - 1] > c:
            a[c, where[g - 1] - c] -= tz[i, j, k - 1]


@njit(cache=True)
def _add_update(a, update, cells, where):
    """Add a child's update (its later cells ``cells``, in the order of elimination, as the
    front's are) into the front ``a``."""
    m = cells.shape[0]
    for c in range(m):
        lc = where[cells[c]]
        column = update[c]
        for e in range(m - c):
            a[lc, where[cells[c + e]] - lc] += column[e]


@njit(cache=True, nogil=True)
def fronts_factor(tx, ty, tz, diag, index, start, own, first, factor_start, factor, stack,
                  offset, begin, end, used) -> int:
    """Factor fronts ``begin`` .. ``end`` - 1 into ``factor`` (front f's own columns at
    ``factor[factor_start[f]:factor_start[f + 1]]``, own x size entries, a column per row).
    Each front's update waits in ``stack`` for its parent, at ``offset[f]`` (recorded there);
    the range's first update goes at ``used``, each next one after the updates still waiting.
    Returns 0, or 1 when a pivot is not positive (the matrix is not positive definite).

    The range is whole subtrees, or fronts whose other children an earlier call factored
    (their updates left in ``stack``, offsets in ``offset``). Calls on disjoint subtrees
    with disjoint parts of ``stack`` may run at once; every front's arithmetic is that of
    one call on all fronts, so the factor is the same bit for bit."""
    where = np.full(diag.size, -1, dtype=np.int64)  # a cell's place in the current front
    width = 0
    for f in range(begin, end):
        width = max(width, start[f + 1] - start[f])
    work = np.empty(width * width)
    for f in range(begin, end):
        cells = index[start[f]:start[f + 1]]
        size = cells.shape[0]
        owned = own[f]
        later = size - owned
        for r in range(size):
            where[cells[r]] = r
        work[:size * size] = 0.0  # (the band's unused corner too: the factor holds zeros there)
        a = work[:size * size].reshape((size, size))
        _gather_columns(a, cells, owned, where, tx, ty, tz, diag)
        child = f - 1
        while child >= first[f]:  # the last child first, as they were stacked
            m = start[child + 1] - start[child] - own[child]
            update = stack[offset[child]:offset[child] + m * m].reshape((m, m))
            _add_update(a, update, index[start[child + 1] - m:start[child + 1]], where)
            used = offset[child]
            child = first[child] - 1
        if band_cholesky(a, owned) != 0:
            return 1
        # (loops: as slice assignments through ravel and reshape these two copies took 3 s of
        # the kernel's first compile, benchmarks/RESULTS_COMPILE_ITEMS.md)
        base = factor_start[f]
        for e in range(owned * size):
            factor[base + e] = work[e]
        if later > 0:
            offset[f] = used
            for r in range(later):
                for e in range(later):
                    stack[used + r * later + e] = a[owned + r, e]
            used += later * later
        for r in range(size):
            where[cells[r]] = -1
    return 0


@njit(cache=True, fastmath={"reassoc", "contract", "nsz"})
def fronts_solve(index, start, own, factor_start, factor, x) -> None:
    """x = (L L^T)^-1 x in place (x: the level's cells in C order), for the factor from
    :func:`fronts_factor`: L y = b front by front, children first, then L^T x = y back up."""
    nodes = own.shape[0]
    width = 0
    for f in range(nodes):
        width = max(width, start[f + 1] - start[f])
    v = np.empty(width)
    for f in range(nodes):
        cells = index[start[f]:start[f + 1]]
        size = cells.shape[0]
        owned = own[f]
        lower = factor[factor_start[f]:factor_start[f + 1]].reshape((owned, size))
        for r in range(size):
            v[r] = x[cells[r]]
        for c in range(owned):
            vc = v[c] / lower[c, 0]
            v[c] = vc
            column = lower[c, 1:size - c]
            below = v[c + 1:size]
            for e in range(size - c - 1):
                below[e] -= column[e] * vc
        for r in range(size):
            x[cells[r]] = v[r]
    for f in range(nodes - 1, -1, -1):
        cells = index[start[f]:start[f + 1]]
        size = cells.shape[0]
        owned = own[f]
        lower = factor[factor_start[f]:factor_start[f + 1]].reshape((owned, size))
        for r in range(size):
            v[r] = x[cells[r]]
        for c in range(owned - 1, -1, -1):
            column = lower[c, 1:size - c]
            below = v[c + 1:size]
            s = 0.0
            for e in range(size - c - 1):
                s += column[e] * below[e]
            v[c] = (v[c] - s) / lower[c, 0]
        for r in range(owned):
            x[cells[r]] = v[r]
