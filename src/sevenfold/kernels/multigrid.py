"""Multigrid kernels on face arrays: coarse operators, linear transfers, the narrowing of CG's
residual to a float32 level (the z-line smoother is :mod:`sevenfold.kernels.lines`).

Same level format as :mod:`sevenfold.kernels.stencil`: ``tx[i, j, k]`` couples cell (i, j, k)
with (i+1, j, k) (zero on the last plane and to held cells), likewise ``ty`` and ``tz``, and
(A u)_P = diag_P u_P - sum_N t_PN u_N. Every kernel is generic in the float type, so the
preconditioner's levels may be float32 while the caller's operator stays float64.
"""

from __future__ import annotations

import numpy as np
from numba import prange

from .jit import njit
from .stencil import starts


@njit(cache=True, parallel=True)
def narrow(r, b):
    """b = r in b's (narrower) float type: CG's float64 residual as a float32 level's
    right-hand side (one signature of each level kernel instead of two)."""
    for i in prange(b.shape[0]):
        b[i] = r[i]


@njit(cache=True)  # serial: it reads a subsample, and a parallel build compiles seconds longer
def axis_weakness(tx, ty, tz, free, scale, ratio, stride, lines):
    """Count, over every ``stride``-th free cell per axis, the cells where an axis is weak.

    A cell's coupling along an axis is the larger of its two faces on that axis, divided by
    ``scale[axis]`` (the aggregate size in that axis so far: Galerkin aggregation sums that
    many fine faces, so this keeps coarse levels comparable with a rediscretisation). x is
    weak where ``ratio`` times its coupling is below the strongest other axis's; with
    ``lines`` (z-line smoothing solves strong z) x and y are compared only with each other.
    Returns (weak x, weak y, weak z, cells counted, cells where z is strong: ``ratio`` times
    the stronger of x and y below z's coupling).
    """
    nx, ny, nz = free.shape
    counts = np.zeros((nx, 5), dtype=np.int64)
    for i in range(nx):
        if i % stride != 0:
            continue
        for j in range(0, ny, stride):
            for m in range(0, nz, stride):
                if not free[i, j, m]:
                    continue
                cx = tx[i, j, m]
                if i > 0:
                    cx = max(cx, tx[i - 1, j, m])
                cy = ty[i, j, m]
                if j > 0:
                    cy = max(cy, ty[i, j - 1, m])
                cz = tz[i, j, m]
                if m > 0:
                    cz = max(cz, tz[i, j, m - 1])
                cx /= scale[0]
                cy /= scale[1]
                cz /= scale[2]
                if cx + cy + cz <= 0.0:
                    continue
                counts[i, 3] += 1
                ox = cy if ny > 1 else 0.0
                oy = cx if nx > 1 else 0.0
                if not lines and nz > 1:
                    ox = max(ox, cz)
                    oy = max(oy, cz)
                if ratio * cx < ox:
                    counts[i, 0] += 1
                if ratio * cy < oy:
                    counts[i, 1] += 1
                if ratio * cz < max(cx if nx > 1 else 0.0, cy if ny > 1 else 0.0):
                    counts[i, 2] += 1
                if nz > 1 and ratio * max(cx if nx > 1 else 0.0, cy if ny > 1 else 0.0) < cz:
                    counts[i, 4] += 1
    total = np.zeros(5, dtype=np.int64)  # by hand: numba's sum(axis=0) takes seconds to compile
    for i in range(nx):
        for c in range(5):
            total[c] += counts[i, c]
    return total


@njit(cache=True, nogil=True)  # serial; two halves of the planes on two threads (levels.py)
def wall_counts(diag, free, ratio, lo, hi):
    """Per cell boundary across x (between planes i and i + 1) and across y (rows j and
    j + 1), the pairs of free neighbouring cells whose diagonals differ more than ``ratio``
    times: where the conductivity jumps (:func:`sevenfold.solvers.levels.material_walls`).
    Counted over the planes i in [lo, hi) alone (the boundaries across x after them); the
    counts of a split of the planes add up to the whole's."""
    nx, ny, nz = diag.shape
    cx = np.zeros(max(nx - 1, 0), dtype=np.int64)
    cy = np.zeros(max(ny - 1, 0), dtype=np.int64)
    for i in range(lo, hi):
        for j in range(ny):
            nxt, side = 0, 0
            for m in range(nz):
                d = diag[i, j, m]
                if i + 1 < nx and free[i, j, m] and free[i + 1, j, m]:
                    e = diag[i + 1, j, m]
                    if d > ratio * e or e > ratio * d:
                        nxt += 1
                if j + 1 < ny and free[i, j, m] and free[i, j + 1, m]:
                    e = diag[i, j + 1, m]
                    if d > ratio * e or e > ratio * d:
                        side += 1
            if i + 1 < nx:
                cx[i] += nxt
            if j + 1 < ny:
                cy[j] += side
    return cx, cy


@njit(cache=True)
def _axis_scales(agg, nc):
    """Per aggregate along one axis (``agg``: each fine cell's, ``nc`` of them): its first
    cell and the end (:func:`sevenfold.kernels.stencil.starts`), and the scale of its coupling
    to the next aggregate, 2 / (the two sizes summed): the fine cells' centre distance over
    the aggregates' (1/2 between pairs). And per fine cell (``cell[:, i]``), its place in its
    aggregate for :func:`_galerkin_row`: 1 / the aggregate's size; the scales of its minus and
    of its plus face where they leave the aggregate, else 0; 1 where its plus face is the
    coupling to the next aggregate, else 0."""
    first = starts(agg, nc)
    face = np.empty(nc)
    cell = np.zeros((4, agg.shape[0]))
    for I in range(nc):
        i0, i1 = first[I], first[I + 1]
        inv = 1.0 / (i1 - i0)
        face[I] = 2.0 / (first[I + 2] - i0) if I + 1 < nc else inv  # (none leaves the last)
        for i in range(i0, i1):
            cell[0, i] = inv
        cell[1, i0] = face[I - 1] if I > 0 else inv  # (no coupling enters the first aggregate)
        cell[2, i1 - 1] = face[I]
        cell[3, i1 - 1] = 1.0
    return first, face, cell


@njit(cache=True)
def _galerkin_row(tx, ty, tz, diag, free, i, j, x, y, z, keep, rows):
    """rows[q, m] = keep * rows[q, m] + fine cell (i, j, m)'s contribution, zero where the
    cell is held: q = 0 to its aggregate's diagonal, 1 its plus z face where that couples to
    the next aggregate (else 0), 2 one (a free cell), 3 and 4 its plus x and y faces, only
    where the row's couple to the next aggregate (rows 3 and 4 are left as they are
    otherwise). ``keep`` 0 fills a row buffer, 1 adds to a coarse row (z not coarsened).

    ``x``, ``y``, ``z``: each axis's place of the fine cells in their aggregates
    (:func:`_axis_scales`). 0/1 factors instead of branches and one output row per loop, so
    that every loop vectorises (five rows written by one loop did not, and took twice as
    long)."""
    nz = diag.shape[2]
    fx, gxm, gxp, cx = x[0, i], x[1, i], x[2, i], x[3, i]
    fy, gym, gyp, cy = y[0, j], y[1, j], y[2, j], y[3, j]
    wxm, wym = (1.0 if i > 0 else 0.0), (1.0 if j > 0 else 0.0)  # (no face before the first)
    im, jm = max(i - 1, 0), max(j - 1, 0)
    zp = 0.0
    for m in range(nz):  # in float64 (the 0/1 weights and 1.0 * widen float32 levels)
        xm, xp, ym, yp = wxm * tx[im, j, m], tx[i, j, m], wym * ty[i, jm, m], ty[i, j, m]
        zm, zp = zp, 1.0 * tz[i, j, m]
        fz = z[0, m]
        excess = diag[i, j, m] - (xm + xp + ym + yp + zm + zp)
        mx = (1.0 if xm == 0.0 else 0.0) + (1.0 if xp == 0.0 else 0.0)
        my = (1.0 if ym == 0.0 else 0.0) + (1.0 if yp == 0.0 else 0.0)
        mz = (1.0 if zm == 0.0 else 0.0) + (1.0 if zp == 0.0 else 0.0)
        missing = mx + my + mz
        if missing > 0.0:
            a = excess / missing * (mx * fx + my * fy + mz * fz)
        else:
            a = excess * (fx + fy + fz) / 3.0
        # faces leaving the aggregate add to its diagonal
        a = a + gxm * xm + gxp * xp + gym * ym + gyp * yp + z[1, m] * zm + z[2, m] * zp
        rows[0, m] = keep * rows[0, m] + (a if free[i, j, m] else 0.0)
    for m in range(nz):
        rows[1, m] = keep * rows[1, m] + (z[3, m] * tz[i, j, m] if free[i, j, m] else 0.0)
    for m in range(nz):
        rows[2, m] = keep * rows[2, m] + (1.0 if free[i, j, m] else 0.0)
    if cx != 0.0:
        for m in range(nz):
            rows[3, m] = keep * rows[3, m] + (tx[i, j, m] if free[i, j, m] else 0.0)
    if cy != 0.0:
        for m in range(nz):
            rows[4, m] = keep * rows[4, m] + (ty[i, j, m] if free[i, j, m] else 0.0)


@njit(cache=True)
def _add_rows(rows, zs, last, sums, J):
    """sums[J, q, K] += rows[q, first cell of K], then += rows[q, its second cell] (a cell
    alone: rows[q, nz], kept zero) for the aggregates K along z (``zs``: their first cells
    and the end), q < 3 and the couplings q = 3, 4 where ``last`` (x, y) is not 0. One scalar
    loop for every partition of z (pairs, shifted or not, cells alone): a vectorised loop per
    kind of partition compiled 1.7 s longer for about 1 ns less per fine cell."""
    nz = rows.shape[1] - 1
    cx, cy = last
    for K in range(zs.shape[0] - 1):
        f = zs[K]
        g = f + 1 if zs[K + 1] - f == 2 else nz
        sums[J, 0, K] = (sums[J, 0, K] + rows[0, f]) + rows[0, g]
        sums[J, 1, K] = (sums[J, 1, K] + rows[1, f]) + rows[1, g]
        sums[J, 2, K] = (sums[J, 2, K] + rows[2, f]) + rows[2, g]
        if cx != 0.0:
            sums[J, 3, K] = (sums[J, 3, K] + rows[3, f]) + rows[3, g]
        if cy != 0.0:
            sums[J, 4, K] = (sums[J, 4, K] + rows[4, f]) + rows[4, g]


@njit(cache=True, parallel=True)
def galerkin_scaled(tx, ty, tz, diag, free, agg, txc, tyc, tzc, diagc, freec):
    """Coarse face arrays from aggregates (``agg``: per axis, each fine cell's aggregate),
    scaled per axis to a rediscretisation.

    The piecewise-constant Galerkin product P^T A P sums the fine couplings crossing between
    two aggregates (so coefficient jumps reach the coarse levels as fluxes, not averages); it
    is about twice too strong along each axis coarsened by pairs compared with the same
    operator rediscretised on the coarse cells. Scaling each coupling by the fine over the
    coarse centre distance (:func:`_axis_scales`: 1/2 between pairs, 2/3 between a pair and a
    single cell) gives a coarse operator consistent with linear interpolation
    (P_lin^T A P_lin on smooth errors) and with full multigrid. A cell's diagonal excess
    (boundary faces, couplings to held cells) is split equally over its faces that store no
    coupling, each share scaled by 1 / the aggregate's size along the face's axis (the
    half-cell distance to a boundary face grows with it).

    Each thread builds one coarse x-plane in float64 sums. Per fine row, :func:`_galerkin_row`
    computes every cell's contributions into row buffers without branches, and
    :func:`_add_rows` adds them to the row's aggregates (z not coarsened: the row adds them to
    its coarse row itself). Every sum takes its cells in the order of a cell-by-cell loop
    (x, then y, then z), so couplings and free cells are that loop's bit for bit; a cell's
    diagonal terms are summed before they join its aggregate's, where such a loop added them
    one by one (float64 diagonals may differ in their last bits; the float32 levels of the
    inclusions and graded jobs came out equal). 0.3-0.6 of the cell-by-cell loop's time on
    their 128^3 and 256^3 finest levels (benchmarks/galerkin_bench.py).
    """
    nz = diag.shape[2]
    ax, ay, az = agg
    ncx, ncy, ncz = diagc.shape
    xs, face_x, x = _axis_scales(ax, ncx)
    _, face_y, y = _axis_scales(ay, ncy)
    zs, face_z, z = _axis_scales(az, ncz)
    whole = ncz == nz  # z not coarsened: each row adds its cells to its coarse row itself
    for I in prange(ncx):
        sums = np.zeros((ncy, 5, ncz))
        rows = np.zeros((5, nz + 1))  # (its last column stays zero: a cell alone's partner)
        for i in range(xs[I], xs[I + 1]):
            for j in range(ay.shape[0]):
                _galerkin_row(tx, ty, tz, diag, free, i, j, x, y, z, 1.0 if whole else 0.0,
                              sums[ay[j]] if whole else rows)
                if not whole:
                    _add_rows(rows, zs, (x[3, i], y[3, j]), sums, ay[j])
        for J in range(ncy):
            for K in range(ncz):
                n = sums[J, 2, K]
                freec[I, J, K] = n > 0.0
                diagc[I, J, K] = sums[J, 0, K] if n > 0.0 else 1.0
                txc[I, J, K] = face_x[I] * sums[J, 3, K]
                tyc[I, J, K] = face_y[J] * sums[J, 4, K]
                tzc[I, J, K] = face_z[K] * sums[J, 1, K]


@njit(cache=True, inline="always")
def _partner(i, s, nc):
    """The second coarse cell in fine cell i's value along one axis (or -1), and weights.

    Linear interpolation between cell centres for aggregates of 2: weights 3/4 (own) and 1/4
    (the nearer neighbour); at the box's faces, linear extrapolation from the own and the
    inner neighbour (5/4 and -1/4), which keeps the interpolation second order up to a wall.
    """
    own = i // s
    if s == 1:
        return own, 1.0, -1, 0.0
    other = own - 1 if i % 2 == 0 else own + 1
    if 0 <= other < nc:
        return own, 0.75, other, 0.25
    if nc == 1:
        return own, 1.0, -1, 0.0
    return own, 1.25, (own + 1 if other < 0 else own - 1), -0.25


@njit(cache=True, inline="always")
def _w1(i, c, s, nc):
    """Weight of coarse cell c in the value at fine cell i along one axis."""
    a, wa, b, wb = _partner(i, s, nc)
    if c == a:
        return wa
    if c == b:
        return wb
    return 0.0


@njit(cache=True, parallel=True)
def prolong_linear_add(ec, free, step, scale, u):
    """u += scale * P ec on free cells, P the tensor product of linear interpolation between
    cell centres along each coarsened axis (see :func:`_partner`).

    Per fine row (i, j) the x and y interpolation is done once on the coarse z-row (at most
    four coarse rows combined), then each fine cell takes its two z weights from that row: a
    third of the multiplications of interpolating cell by cell, and unit-stride inner loops.
    """
    nx, ny, nz = u.shape
    sx, sy, sz = step[0], step[1], step[2]
    ncx, ncy, ncz = ec.shape
    ka = np.empty(nz, dtype=np.int64)
    kb = np.empty(nz, dtype=np.int64)
    wka = np.empty(nz)
    wkb = np.empty(nz)
    for m in range(nz):
        ka[m], wka[m], kb[m], wkb[m] = _partner(m, sz, ncz)
        if kb[m] < 0:
            kb[m], wkb[m] = ka[m], 0.0
    for i in prange(nx):
        ia, wia, ib, wib = _partner(i, sx, ncx)
        row = np.empty(ncz, dtype=ec.dtype)
        for j in range(ny):
            ja, wja, jb, wjb = _partner(j, sy, ncy)
            waa = wia * wja
            for K in range(ncz):
                row[K] = waa * ec[ia, ja, K]
            if jb >= 0:
                wab = wia * wjb
                for K in range(ncz):
                    row[K] += wab * ec[ia, jb, K]
            if ib >= 0:
                wba = wib * wja
                for K in range(ncz):
                    row[K] += wba * ec[ib, ja, K]
                if jb >= 0:
                    wbb = wib * wjb
                    for K in range(ncz):
                        row[K] += wbb * ec[ib, jb, K]
            for m in range(nz):
                if free[i, j, m]:
                    u[i, j, m] += scale * (wka[m] * row[ka[m]] + wkb[m] * row[kb[m]])


@njit(cache=True, parallel=True)
def restrict_linear(r, free, step, rc):
    """rc = P^T r for the linear interpolation of :func:`prolong_linear_add` (free cells only)."""
    nx, ny, nz = r.shape
    sx, sy, sz = step[0], step[1], step[2]
    ncx, ncy, ncz = rc.shape
    for I in prange(ncx):
        ilo = max(I * sx - 2 * (sx - 1), 0)  # reaches the extrapolating cells at the faces
        ihi = min(I * sx + sx + 2 * (sx - 1), nx)
        for J in range(ncy):
            jlo = max(J * sy - 2 * (sy - 1), 0)
            jhi = min(J * sy + sy + 2 * (sy - 1), ny)
            for K in range(ncz):
                klo = max(K * sz - 2 * (sz - 1), 0)
                khi = min(K * sz + sz + 2 * (sz - 1), nz)
                s = 0.0
                for i in range(ilo, ihi):
                    wx = _w1(i, I, sx, ncx)
                    if wx == 0.0:
                        continue
                    for j in range(jlo, jhi):
                        wy = _w1(j, J, sy, ncy)
                        if wy == 0.0:
                            continue
                        for m in range(klo, khi):
                            if free[i, j, m]:
                                s += wx * wy * _w1(m, K, sz, ncz) * r[i, j, m]
                rc[I, J, K] = s
