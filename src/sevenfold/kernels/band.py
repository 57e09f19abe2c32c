"""A dense or banded Cholesky factor, whole or of its first columns: each front of the
coarsest level's factor (:mod:`.fronts`) is factored with it.

Storage is LAPACK's lower band transposed (common practice, LAPACK Users' Guide, "band
storage"), so that a column of the factor is one contiguous row: ``a[j, d]`` holds entry
(j + d, j) of the symmetric matrix, d = 0 .. w - 1 (``a[j, d]`` for j + d >= n is unused); a
dense matrix is a band as wide as it is long. The factor is right-looking, the same arithmetic
as LAPACK's unblocked pbtf2, taken in panels of PANEL columns: a panel's columns are scaled
and update each other, then every later column the panel reaches takes the panel's updates in
one pass, four columns' products at a time, while its entries are in the first-level cache.
Each entry receives the same updates in the same order as column by column, so the factor is
the same bit for bit. As the coarsest level's whole-band factor it took 21.2 ms against
26.5 ms column by column at 17 x 17 x 16 cells (benchmarks/RESULTS_COARSEST_PANELS.md).
Stopped after some columns, the later ones hold what remains of the matrix once those are
eliminated (the Schur complement), which is a front's update.

The factor's updates are small functions of their own: written inside its loop nest they
compiled to scalar instructions only (inspected in the machine code). The kernel is serial.
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
def band_cholesky(a: np.ndarray, stop: int) -> int:
    """Overwrite the first ``stop`` columns of the band ``a`` (n, w) of an SPD matrix with
    those of its Cholesky factor L, in the same storage, and the later columns with the Schur
    complement that remains of them (``stop`` = n: the whole factor). Returns 0, or j + 1
    when the pivot of column j is not positive (the matrix is not positive definite; ``a`` is
    then partly overwritten)."""
    n, w = a.shape
    for j0 in range(0, stop, PANEL):
        j1 = min(j0 + PANEL, stop)
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
