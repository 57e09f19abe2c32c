"""A banded Cholesky factor and its solve: the coarsest multigrid level's direct solver.

Storage is LAPACK's lower band transposed (common practice, LAPACK Users' Guide, "band
storage"), so that a column of the factor is one contiguous row: ``a[j, d]`` holds entry
(j + d, j) of the symmetric matrix, d = 0 .. w - 1 (``a[j, d]`` for j + d >= n is unused).
The factor is right-looking (column j scales, then updates the columns it reaches), the same
arithmetic as LAPACK's unblocked pbtf2; the solve is the forward substitution L y = b by
columns and the backward one L^T x = y by dot products along the same rows.

Every inner loop runs over a slice, so its indices are known non-negative and it vectorises
(indexed ``x[j + d]`` kept numba's negative-index check in the loop: a prototype's solve took
0.93 ms at 16^3 against 0.29 ms with slices; benchmarks/ANALYSIS.md). Both kernels are serial:
the level has at most 4096 cells.
"""

from __future__ import annotations

import numpy as np

from .jit import njit


@njit(cache=True, fastmath={"contract"})
def band_cholesky(a: np.ndarray) -> int:
    """Overwrite the band ``a`` (n, w) of an SPD matrix with its Cholesky factor L in the same
    storage. Returns 0, or j + 1 when the pivot of column j is not positive (the matrix is not
    positive definite; ``a`` is then partly overwritten)."""
    n, w = a.shape
    for j in range(n):
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
        for c in range(m):  # column j + 1 + c loses L[j + 1 + c .., j] * L[j + 1 + c, j]
            lc = column[c]
            target = a[j + 1 + c, 0:m - c]
            source = column[c:m]
            for e in range(m - c):
                target[e] -= source[e] * lc
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
