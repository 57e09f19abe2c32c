"""Chebyshev polynomial smoothing on z-line Jacobi, against the kept z-line Gauss-Seidel.

    python benchmarks/chebyshev_bench.py [--sizes 128 256] [--cases column layered inclusions constant]

Issue 10 names polynomial smoothers as a candidate for a cheaper cycle: their steps have no
colours and no order, so every pass runs at unit stride over whole planes. Here the kept
hierarchy (scaled aggregation, float32 levels, the same coarse operators and transfers) smooths
every level with Chebyshev iteration on M^-1 A, M the z-line (tridiagonal) part of A, instead
of its z-line Gauss-Seidel sweeps. Each step is one fused pass (the residual of a block of
columns, its line solves with the stored pivots, and the Chebyshev update of the direction d)
and one pass u += d.

Interval (common practice for Chebyshev smoothers, from memory): M^-1 A of a diagonally
dominant M-matrix has its eigenvalues in (0, 2); on the constant-coefficient 7-point
operator, with z solved by the lines, the errors that are rough in x or y have eigenvalues in
[1/2, 2], so the polynomial is the Chebyshev one on [2/ALPHA, 2] with ALPHA = 4. The
three-term recurrence (Saad, Iterative Methods for Sparse Linear Systems, 2nd ed., sec. 12.3.2,
from memory): theta, delta = centre and half-width, sigma = theta / delta; d_0 = M^-1 r / theta;
then rho_k = 1 / (2 sigma - rho_{k-1}), d_k = rho_k rho_{k-1} d_{k-1} + (2 rho_k / delta) M^-1 r_k.
The same polynomial before and after the coarse correction keeps the cycle symmetric, so CG
stays valid.

Writes benchmarks/RESULTS_CHEBYSHEV.md (one thread, CPU seconds, as benchmarks/wall_bench.py).
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
from numba import njit, prange

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import cycle_bench as cb  # noqa: E402
import wall_bench  # noqa: E402

from sevenfold.kernels.lines import LINE_BLOCK  # noqa: E402
from sevenfold.solvers import gmg  # noqa: E402

LB = LINE_BLOCK
ALPHA = 4.0
HIGHEST = 2.0  # bound on the eigenvalues of M^-1 A


@njit(inline="always")
def solve_block(y, w, t, nz):
    """Solve LB tridiagonal z-line systems side by side, in place: ``y`` (nz rows of LB, flat)
    holds their right-hand sides and gets the solutions; ``w`` the pivots 1 / w_k of
    lines.line_factor and ``t`` the couplings tz, in the same layout (the sweep's block
    solve until lines._line_plane wrote its recurrences out as chains)."""
    for c in range(LB):
        y[c] = y[c] * w[c]
    for m in range(1, nz):
        at, prev = m * LB, (m - 1) * LB
        for c in range(LB):
            y[at + c] = (y[at + c] + t[prev + c] * y[prev + c]) * w[at + c]
    for m in range(nz - 2, -1, -1):
        at, nxt = m * LB, (m + 1) * LB
        for c in range(LB):
            y[at + c] += t[at + c] * w[at + c] * y[nxt + c]


@njit(parallel=True)  # (no cache: a cached kernel re-imports this module)
def chebyshev_line_step(tx, ty, tz, diag, inv_w, b, u, d, keep, gain):
    """d = keep * d + gain * M^-1 (b - A u), M the z-line part of A (pivots ``inv_w`` as
    lines.line_factor stores them); columns in blocks of LINE_BLOCK as in the sweep."""
    nx, ny, nz = u.shape
    for i in prange(nx):
        y = np.empty(nz * LB, dtype=u.dtype)
        w = np.empty(nz * LB, dtype=u.dtype)
        t = np.empty(nz * LB, dtype=u.dtype)
        im, ip = max(i - 1, 0), min(i + 1, nx - 1)
        itm = i - 1 if i > 0 else nx - 1  # the zero last plane stands in for a missing coupling
        for j0 in range(0, ny, LB):
            nb = min(LB, ny - j0)
            for c in range(nb):
                j = j0 + c
                jm, jp = max(j - 1, 0), min(j + 1, ny - 1)
                jtm = j - 1 if j > 0 else ny - 1
                for m in range(nz):
                    mm, mp = max(m - 1, 0), min(m + 1, nz - 1)
                    tzm = tz[i, j, m - 1] if m > 0 else 0.0
                    y[m * LB + c] = (b[i, j, m] - diag[i, j, m] * u[i, j, m]
                                     + tx[itm, j, m] * u[im, j, m] + tx[i, j, m] * u[ip, j, m]
                                     + ty[i, jtm, m] * u[i, jm, m] + ty[i, j, m] * u[i, jp, m]
                                     + tzm * u[i, j, mm] + tz[i, j, m] * u[i, j, mp])
                    w[m * LB + c] = inv_w[i, j, m]
                    t[m * LB + c] = tz[i, j, m]
            for c in range(nb, LB):
                for m in range(nz):
                    y[m * LB + c] = 0.0
                    w[m * LB + c] = 0.0
                    t[m * LB + c] = 0.0
            solve_block(y, w, t, nz)
            for c in range(nb):
                for m in range(nz):
                    if keep == 0.0:
                        d[i, j0 + c, m] = gain * y[m * LB + c]
                    else:
                        d[i, j0 + c, m] = keep * d[i, j0 + c, m] + gain * y[m * LB + c]


@njit(parallel=True)
def add(u, d):
    """u += d."""
    nx, ny, nz = u.shape
    for i in prange(nx):
        for j in range(ny):
            for m in range(nz):
                u[i, j, m] += d[i, j, m]


def coefficients(degree: int) -> list[tuple[float, float]]:
    """(keep, gain) of each step of the degree-``degree`` Chebyshev smoother on [2/ALPHA, 2]."""
    lo = HIGHEST / ALPHA
    theta, delta = (HIGHEST + lo) / 2, (HIGHEST - lo) / 2
    sigma = theta / delta
    rho = 1.0 / sigma
    steps = [(0.0, 1.0 / theta)]
    for _ in range(degree - 1):
        new = 1.0 / (2.0 * sigma - rho)
        steps.append((new * rho, 2.0 * new / delta))
        rho = new
    return steps


class ChebyshevHierarchy(gmg.Hierarchy):
    """The kept hierarchy whose line-smoothed levels take ``degree`` Chebyshev steps on each
    side of the coarse correction instead of the Gauss-Seidel sweeps."""

    def __init__(self, fine, degree: int, **options) -> None:
        super().__init__(fine, **options)
        self.steps = coefficients(degree)
        self.notes = f"degree {degree}, interval [{HIGHEST / ALPHA:g}, {HIGHEST:g}]"
        for lv in self.levels[:-1]:
            lv.d = np.empty(lv.shape, dtype=self.dtype)

    def _smooth(self, lv, b, u, first) -> None:
        for keep, gain in self.steps:
            chebyshev_line_step(lv.tx, lv.ty, lv.tz, lv.diag, lv.inv_w, b, u, lv.d,
                                lv.diag.dtype.type(keep), lv.diag.dtype.type(gain))
            add(u, lv.d)


DESIGNS = {
    "kept": None,
    "W, Chebyshev degree 2": ("W", 2),
    "W, Chebyshev degree 3": ("W", 3),
    "V, Chebyshev degree 3": ("V", 3),
    "V, Chebyshev degree 4": ("V", 4),
}


def solve(fine, b, design: str):
    kept = gmg.Hierarchy
    options = {"finest": "copy"}
    if DESIGNS[design] is not None:
        cycle, degree = DESIGNS[design]
        options["cycle"] = cycle
        gmg.Hierarchy = lambda fine, **opts: ChebyshevHierarchy(fine, degree, **opts)
    try:
        return gmg.solve_levels(fine, b, cb.RTOL, cb.MAX_ITERATIONS, **options)
    finally:
        gmg.Hierarchy = kept


INTRO = ("*kept* = `sevenfold.solvers.gmg`'s hierarchy (W(2,2) z-line Gauss-Seidel); the others "
         "smooth every level of the same hierarchy with that many Chebyshev steps on z-line "
         "Jacobi before and after the coarse correction (see the docstring of "
         "`benchmarks/chebyshev_bench.py`).")

if __name__ == "__main__":
    raise SystemExit(wall_bench.main(script="chebyshev_bench.py", results="RESULTS_CHEBYSHEV.md",
                                     designs=tuple(DESIGNS), solver=solve,
                                     title="Chebyshev smoothing on z-line Jacobi (a prototype)",
                                     intro=INTRO, notes="smoother"))
