"""A banded Cholesky factor and its solve: the coarsest multigrid level's direct solver.

Storage is LAPACK's lower band transposed (common practice, LAPACK Users' Guide, "band
storage"), so that a column of the factor is one contiguous row: ``a[j, d]`` holds entry
(j + d, j) of the symmetric matrix, d = 0 .. w - 1 (``a[j, d]`` for j + d >= n is unused).
The factor is right-looking, the same arithmetic as LAPACK's unblocked pbtf2, taken in panels
of PANEL columns: a panel's columns are scaled and update each other, then every later column
the panel reaches takes the panel's updates in one pass, four columns' products at a time,
while its entries are in the first-level cache. Each entry receives the same updates in the
same order as column by column, so the factor is the same bit for bit. At 17 x 17 x 16 cells
it took 21.2 ms against 26.5 ms; on bands of 65-82 the calls cost more than the passes save
(1.0-1.2 ms against 0.8; benchmarks/RESULTS_COARSEST_PANELS.md). The solve is the forward
substitution L y = b by columns and the backward one L^T x = y by dot products along the same
rows.

The solve's inner loops run over slices, so their indices are known non-negative and they
vectorise (indexed ``x[j + d]`` kept numba's negative-index check in the loop: a prototype's
solve took 0.93 ms at 16^3 against 0.29 ms with slices; benchmarks/ANALYSIS.md). The factor's
updates are small functions of their own: written inside its loop nest they compiled to
scalar instructions only (inspected in the machine code). Both kernels are serial:
the level has at most 4096 cells (a few more where aggregates are arranged).
"""

from __future__ import annotations

import numpy as np

from .jit import njit


# Columns per panel of the factor: 4 to 64 took 21-25 ms at 17 x 17 x 16 cells (8 the least)
PANEL = 8


@njit(cache=True, fastmath={"contract"})
def _take_four(a: np.ndarray, c: int, j: int, length: int) -> None:
    """Column c loses the products of columns j .. j + 3 in its first ``length`` entries (the
    rows all four reach), in column order per entry."""
    o = c - j
    t = a[c]
    s0, s1, s2, s3 = a[j, o:], a[j + 1, o - 1:], a[j + 2, o - 2:], a[j + 3, o - 3:]
    f0, f1, f2, f3 = s0[0], s1[0], s2[0], s3[0]
    for e in range(length):
        t[e] = t[e] - s0[e] * f0 - s1[e] * f1 - s2[e] * f2 - s3[e] * f3


@njit(cache=True, fastmath={"contract"})
def _take_one(a: np.ndarray, c: int, j: int, start: int, stop: int) -> None:
    """Column c loses column j's products in its entries start .. stop - 1."""
    t = a[c]
    s = a[j, c - j:]
    f = s[0]
    for e in range(start, stop):
        t[e] -= s[e] * f


@njit(cache=True, fastmath={"contract"})
def band_cholesky(a: np.ndarray) -> int:
    """Overwrite the band ``a`` (n, w) of an SPD matrix with its Cholesky factor L in the same
    storage. Returns 0, or j + 1 when the pivot of column j is not positive (the matrix is not
    positive definite; ``a`` is then partly overwritten)."""
    n, w = a.shape
    for j0 in range(0, n, PANEL):
        j1 = min(j0 + PANEL, n)
        for j in range(j0, j1):  # the panel's columns, each updating the panel's later ones
            pivot = a[j, 0]
            if not pivot > 0.0:  # also catches NaN
                return j + 1
            pivot = np.sqrt(pivot)
            a[j, 0] = pivot
            m = min(w - 1, n - 1 - j)
            column = a[j, 1:m + 1]  # L[j + 1 .. j + m, j]
            inverse = 1.0 / pivot
            for d in range(m):
                column[d] *= inverse
            for c in range(j + 1, min(j + 1 + m, j1)):
                _take_one(a, c, j, 0, j + 1 + m - c)
        # every later column the panel reaches (column j reaches row min(j + w, n) - 1)
        for c in range(j1, min(n, j1 - 1 + w)):
            j = max(j0, c - w + 1)
            while j + 3 < j1:
                reach = min(j + w, n) - c  # entries of c all four columns reach
                _take_four(a, c, j, reach)
                for e in range(reach, min(j + 3 + w, n) - c):  # the later three reach further
                    for k in range(1, 4):
                        if e < min(j + k + w, n) - c:
                            a[c, e] -= a[j + k, c - j - k + e] * a[j + k, c - j - k]
                j += 4
            for jj in range(j, j1):
                _take_one(a, c, jj, 0, min(jj + w, n) - c)
    return 0


@njit(cache=True, fastmath={"reassoc", "contract", "nsz"})
def band_cholesky_solve(a: np.ndarray, x: np.ndarray) -> None:
    """x = (L L^T)^-1 x in place, for the factor ``a`` from :func:`band_cholesky`."""
    n, w = a.shape
    for j in range(n):  # L y = b, column by column
        xj = x[j] / a[j, 0]
        x[j] = xj
        m = min(w - 1, n - 1 - j)
        column = a[j, 1:m + 1]
        below = x[j + 1:j + m + 1]
        for d in range(m):
            below[d] -= column[d] * xj
    for j in range(n - 1, -1, -1):  # L^T x = y, a dot product per row
        m = min(w - 1, n - 1 - j)
        column = a[j, 1:m + 1]
        below = x[j + 1:j + m + 1]
        s = 0.0
        for d in range(m):
            s += column[d] * below[d]
        x[j] = (x[j] - s) / a[j, 0]
