"""Matrix-free 7-point stencils on face arrays: the operator, its residual and smoothing, and
the transfers and Galerkin products between aggregated levels.

A level's operator is given by four (nx, ny, nz) arrays: ``tx[i, j, k]`` couples cell
(i, j, k) with (i+1, j, k) (zero on the last plane), likewise ``ty`` and ``tz``, and ``diag``.
(A u)_P = diag_P u_P - sum_N t_PN u_N. On the finest level the rows are balances over each
cell (amount per unit time), built by :mod:`sevenfold.kernels.finite_volume`; held cells have
no couplings, diag 1 and right-hand side 0, so they stay 0 in every correction and the
operator is SPD on the free cells. All loops run in parallel over x slabs.
"""

from __future__ import annotations

import numpy as np
from numba import prange

from .jit import njit

# The operator walks slabs of x planes in bands of y rows when a plane is large: the three
# planes of u a row needs (i - 1, i, i + 1) then stay in cache from one plane to the next,
# where a whole 512^2 plane (2 MB per array) has left it by the time plane i + 1 needs it.
# Measured with benchmarks/operator_bench.py (RESULTS_OPERATOR.md, 2026-12-02): at 512^3 the
# banded, branch-free form took 0.77-0.91 of the plain order's time (56-66 % -> 73-74 % of
# the copy bandwidth); at 256^3 a plane (0.5 MB) stays cached anyway and bands cost 10 %.
# Slabs of 16 to 64 planes measured alike at 512^3 (71-72 %; 256, one per thread, 69 %).
BAND_PLANE = 131072  # cells of an x plane (1 MB of float64) above which bands are used
BAND_CELLS = 16384  # cells of a plane per band (128 KB of float64 per array)
SLAB_PLANES = 32  # x planes a banded slab walks (its first and last re-read a neighbour plane)


@njit(cache=True, inline="always")
def _offdiag_row(tx, ty, tz, u, i, j, m, wxm, wxp, wym, wyp, im, ip, jm, jp, nz):
    """sum_N t_PN u_N for cell (i, j, m); the x and y weights are 0 on the box's faces."""
    s = (
        wxm * tx[im, j, m] * u[im, j, m]
        + wxp * tx[i, j, m] * u[ip, j, m]
        + wym * ty[i, jm, m] * u[i, jm, m]
        + wyp * ty[i, j, m] * u[i, jp, m]
    )
    if m > 0:
        s += tz[i, j, m - 1] * u[i, j, m - 1]
    if m < nz - 1:
        s += tz[i, j, m] * u[i, j, m + 1]
    return s


@njit(cache=True, inline="always")
def _neighbours(i, j, nx, ny):
    """Neighbour indices and 0/1 weights in x and y; clamped indices where there is none."""
    wxm = 1.0 if i > 0 else 0.0
    wxp = 1.0 if i < nx - 1 else 0.0
    wym = 1.0 if j > 0 else 0.0
    wyp = 1.0 if j < ny - 1 else 0.0
    return wxm, wxp, wym, wyp, max(i - 1, 0), min(i + 1, nx - 1), max(j - 1, 0), min(j + 1, ny - 1)


@njit(cache=True, inline="always")
def _bands(nx, ny, nz):
    """The operator's traversal: (x planes per slab, y rows per band). A small plane: one
    plane per slab, all rows at once (the plain order). A large one: slabs of up to
    :data:`SLAB_PLANES` planes (at least 8 slabs, for the threads), walked band by band."""
    if ny * nz <= BAND_PLANE:
        return 1, ny
    return min(SLAB_PLANES, max(1, nx // 8)), max(1, BAND_CELLS // nz)


@njit(cache=True, inline="always")
def _apply_row(tx, ty, tz, diag, u, out, i, j, nx, ny, nz):
    """out[:] = (A u)[i, j, :] (``out`` one row of nz); the z couplings in a second pass over
    the row, so that neither loop has a branch (the row's two ends are peeled off) and both
    vectorise."""
    wxm, wxp, wym, wyp, im, ip, jm, jp = _neighbours(i, j, nx, ny)
    for m in range(nz):
        out[m] = (diag[i, j, m] * u[i, j, m] - wxm * tx[im, j, m] * u[im, j, m]
                  - wxp * tx[i, j, m] * u[ip, j, m] - wym * ty[i, jm, m] * u[i, jm, m]
                  - wyp * ty[i, j, m] * u[i, jp, m])
    for m in range(1, nz - 1):
        out[m] -= tz[i, j, m - 1] * u[i, j, m - 1] + tz[i, j, m] * u[i, j, m + 1]
    if nz > 1:
        out[0] -= tz[i, j, 0] * u[i, j, 1]
        out[nz - 1] -= tz[i, j, nz - 2] * u[i, j, nz - 2]


@njit(cache=True, parallel=True)
def apply(tx, ty, tz, diag, u, out):
    """out = A u, slab by slab of x planes, each walked band by band of y rows (:func:`_bands`)."""
    nx, ny, nz = u.shape
    per, rows = _bands(nx, ny, nz)
    slabs = (nx + per - 1) // per
    for t in prange(slabs):
        for j0 in range(0, ny, rows):
            for i in range(t * per, min(t * per + per, nx)):
                for j in range(j0, min(j0 + rows, ny)):
                    _apply_row(tx, ty, tz, diag, u, out[i, j], i, j, nx, ny, nz)


@njit(cache=True, parallel=True)
def residual(tx, ty, tz, diag, b, u, r):
    """r = b - A u (each row's A u written by :func:`_apply_row`, then taken from b)."""
    nx, ny, nz = u.shape
    for i in prange(nx):
        for j in range(ny):
            _apply_row(tx, ty, tz, diag, u, r[i, j], i, j, nx, ny, nz)
            for m in range(nz):
                r[i, j, m] = b[i, j, m] - r[i, j, m]


@njit(cache=True, parallel=True, fastmath={"reassoc", "nsz", "contract"})
def apply_dot(tx, ty, tz, diag, u, out):
    """out = A u; returns u . A u (CG's curvature p . A p in the same pass over memory, the
    row's product read back from cache; the sum may be reordered so that it vectorises).
    Traversal as :func:`apply`."""
    nx, ny, nz = u.shape
    per, rows = _bands(nx, ny, nz)
    slabs = (nx + per - 1) // per
    s = 0.0
    for t in prange(slabs):
        for j0 in range(0, ny, rows):
            for i in range(t * per, min(t * per + per, nx)):
                for j in range(j0, min(j0 + rows, ny)):
                    _apply_row(tx, ty, tz, diag, u, out[i, j], i, j, nx, ny, nz)
                    for m in range(nz):
                        s += out[i, j, m] * u[i, j, m]
    return s


@njit(cache=True)
def starts(agg, nc):
    """First fine cell of each of the ``nc`` aggregates along one axis (``agg``: each fine
    cell's aggregate, non-decreasing from 0), and the axis's cell count at the end: aggregate
    I holds cells [starts[I], starts[I + 1])."""
    out = np.empty(nc + 1, dtype=np.int64)
    out[nc] = agg.shape[0]
    for i in range(agg.shape[0] - 1, -1, -1):
        out[agg[i]] = i
    return out


@njit(cache=True)
def pair_offset(agg):
    """0 when ``agg`` pairs cells (0, 1), (2, 3), ..., 1 when (0), (1, 2), (3, 4), ... (an odd
    last cell alone either way), -1 for any other partition (the kernels' general loop)."""
    n = agg.shape[0]
    o = 1 if n > 1 and agg[1] != agg[0] else 0
    for i in range(n):
        if agg[i] != (i + o) // 2:
            return -1
    return o


@njit(cache=True, inline="always")
def _pair_residuals(b, row, rc):
    """rc[K] += the sum of b - row over cells 2K and 2K + 1 of one row (an odd last cell
    alone): a unit-stride loop that vectorises."""
    n = b.shape[0]
    for K in range(n // 2):
        rc[K] += (b[2 * K] - row[2 * K]) + (b[2 * K + 1] - row[2 * K + 1])
    if n % 2:
        rc[n // 2] += b[n - 1] - row[n - 1]


@njit(cache=True, inline="always")
def _pair_sums(r, rc):
    """rc[K] += r[2K] + r[2K + 1] along one row (an odd last cell alone)."""
    n = r.shape[0]
    for K in range(n // 2):
        rc[K] += r[2 * K] + r[2 * K + 1]
    if n % 2:
        rc[n // 2] += r[n - 1]


@njit(cache=True, parallel=True)
def residual_restrict(tx, ty, tz, diag, b, u, step, agg, rc):
    """rc = P^T (b - A u) for piecewise-constant P over aggregates (``agg``: per axis, each fine
    cell's aggregate; ``step``: 1 on an axis not coarsened), without storing the fine
    residual (each coarse x-plane is one thread's). As in :func:`restrict`, held cells add
    nothing because their residual is zero.

    Each fine row's A u goes to a row buffer first (:func:`_apply_row`, branch-free), then
    its residuals are summed into the coarse row: both loops vectorise, where a residual added
    to its aggregate cell by cell did not (0.22-0.25 and 0.39-0.42 of that form's time at 128^3
    and 256^3, benchmarks/RESULTS_RESTRICT.md). Pairs along z, shifted or not, take that
    path; any other partition of z a cell-by-cell loop.
    """
    nx, ny, nz = u.shape
    ax, ay, az = agg
    sz = step[2]
    oz = pair_offset(az) if sz == 2 else 0
    ncx, ncy, ncz = rc.shape
    xs = starts(ax, ncx)
    for I in prange(ncx):
        row = np.empty(nz, dtype=u.dtype)
        for J in range(ncy):
            for K in range(ncz):
                rc[I, J, K] = 0.0
        for i in range(xs[I], xs[I + 1]):
            for j in range(ny):
                J = ay[j]
                _apply_row(tx, ty, tz, diag, u, row, i, j, nx, ny, nz)
                if sz == 1:
                    for m in range(nz):
                        rc[I, J, m] += b[i, j, m] - row[m]
                elif oz == 1:  # (the first cell alone, the pairs on views past it)
                    rc[I, J, 0] += b[i, j, 0] - row[0]
                    _pair_residuals(b[i, j, 1:], row[1:], rc[I, J, 1:])
                elif oz == 0:
                    _pair_residuals(b[i, j], row, rc[I, J])
                else:
                    for m in range(nz):
                        rc[I, J, az[m]] += b[i, j, m] - row[m]


@njit(cache=True, parallel=True)
def gauss_seidel_colour(tx, ty, tz, diag, b, u, colour):
    """One Gauss-Seidel sweep over the cells with (i + j + k) % 2 == colour."""
    nx, ny, nz = u.shape
    for i in prange(nx):
        for j in range(ny):
            wxm, wxp, wym, wyp, im, ip, jm, jp = _neighbours(i, j, nx, ny)
            for m in range((i + j + colour) & 1, nz, 2):
                u[i, j, m] = (b[i, j, m] + _offdiag_row(
                    tx, ty, tz, u, i, j, m, wxm, wxp, wym, wyp, im, ip, jm, jp, nz)) / diag[i, j, m]


@njit(cache=True, parallel=True)
def restrict(r, step, agg, rc):
    """rc = P^T r for piecewise-constant prolongation over aggregates (``step``, ``agg`` as in
    :func:`residual_restrict`).

    Sums every child, held ones included: a residual is zero on held cells (b = 0, u = 0,
    no couplings), which is what lets the inner loop run without a mask and vectorise.
    """
    nz = r.shape[2]
    ax, ay, az = agg
    sz = step[2]
    oz = pair_offset(az) if sz == 2 else 0
    ncx, ncy, ncz = rc.shape
    xs, ys = starts(ax, ncx), starts(ay, ncy)
    for I in prange(ncx):
        for J in range(ncy):
            for K in range(ncz):
                rc[I, J, K] = 0.0
            for i in range(xs[I], xs[I + 1]):
                for j in range(ys[J], ys[J + 1]):
                    if sz == 1:
                        for K in range(nz):
                            rc[I, J, K] += r[i, j, K]
                    elif oz == 1:
                        rc[I, J, 0] += r[i, j, 0]
                        _pair_sums(r[i, j, 1:], rc[I, J, 1:])
                    elif oz == 0:
                        _pair_sums(r[i, j], rc[I, J])
                    else:
                        for m in range(nz):
                            rc[I, J, az[m]] += r[i, j, m]


@njit(cache=True, inline="always")
def _prolong_pairs(ec, free, scale, u):
    """u[m] += scale * ec[m // 2] on the free cells of one row, as u[m] += e free[m] over the
    pairs (no branch, no index arithmetic in the loop: it vectorises; a held cell adds 0)."""
    n = u.shape[0]
    for K in range(n // 2):
        e = scale * ec[K]
        u[2 * K] += e * free[2 * K]
        u[2 * K + 1] += e * free[2 * K + 1]
    if n % 2:
        u[n - 1] += scale * ec[n // 2] * free[n - 1]


@njit(cache=True, parallel=True)
def prolong_add(ec, free, step, agg, scale, u):
    """u += scale * P ec on the free cells (P piecewise constant over the aggregates;
    ``step``, ``agg`` as in :func:`residual_restrict`). Along pairs in z a held cell gets
    scale * e * 0 added instead of a branch, so that the loop vectorises: 0.40-0.80x the
    branch's time at 128^3 and 256^3 (benchmarks/RESULTS_PROLONG.md); z kept whole (the graded
    job) keeps the branch, which masked stores vectorise as it is."""
    nx, ny, nz = u.shape
    ax, ay, az = agg
    sz = step[2]
    oz = pair_offset(az) if sz == 2 else 0
    for i in prange(nx):
        I = ax[i]
        for j in range(ny):
            J = ay[j]
            if sz == 1:  # (masked stores vectorise this one as it is)
                for m in range(nz):
                    if free[i, j, m]:
                        u[i, j, m] += scale * ec[I, J, m]
            elif oz == 1:  # (the first cell alone, the pairs on views past it)
                u[i, j, 0] += scale * ec[I, J, 0] * free[i, j, 0]
                _prolong_pairs(ec[I, J, 1:], free[i, j, 1:], scale, u[i, j, 1:])
            elif oz == 0:
                _prolong_pairs(ec[I, J], free[i, j], scale, u[i, j])
            else:
                for m in range(nz):
                    if free[i, j, m]:
                        u[i, j, m] += scale * ec[I, J, az[m]]


@njit(cache=True, parallel=True)
def galerkin(tx, ty, tz, diag, free, agg, txc, tyc, tzc, diagc, freec):
    """Coarse face arrays P^T A P for piecewise-constant P over aggregates (free cells only;
    ``agg`` as in :func:`residual_restrict`).

    A coupling between two aggregates is the sum of the fine couplings crossing between
    them; a coarse diagonal is the sum of its free children's diagonals minus twice the
    couplings inside the aggregate. An aggregate with no free child is held (diag 1).
    """
    nx, ny, nz = diag.shape
    ncx, ncy, ncz = diagc.shape
    xs, ys, zs = starts(agg[0], ncx), starts(agg[1], ncy), starts(agg[2], ncz)
    for I in prange(ncx):
        for J in range(ncy):
            for K in range(ncz):
                i0, i1 = xs[I], xs[I + 1]
                j0, j1 = ys[J], ys[J + 1]
                k0, k1 = zs[K], zs[K + 1]
                d = 0.0
                cxs = 0.0
                cys = 0.0
                czs = 0.0
                nfree = 0
                for i in range(i0, i1):
                    for j in range(j0, j1):
                        for m in range(k0, k1):
                            if not free[i, j, m]:
                                continue
                            nfree += 1
                            d += diag[i, j, m]
                            # couplings to the plus neighbours: internal or to the next aggregate
                            if i + 1 < i1:
                                d -= 2.0 * tx[i, j, m]
                            elif i + 1 < nx:
                                cxs += tx[i, j, m]
                            if j + 1 < j1:
                                d -= 2.0 * ty[i, j, m]
                            elif j + 1 < ny:
                                cys += ty[i, j, m]
                            if m + 1 < k1:
                                d -= 2.0 * tz[i, j, m]
                            elif m + 1 < nz:
                                czs += tz[i, j, m]
                freec[I, J, K] = nfree > 0
                diagc[I, J, K] = d if nfree > 0 else 1.0
                txc[I, J, K] = cxs
                tyc[I, J, K] = cys
                tzc[I, J, K] = czs
