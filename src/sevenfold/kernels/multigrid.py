"""Multigrid kernels on face arrays: z-line relaxation, coarse operators, linear transfers.

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


# Columns a line sweep (and line_factor) takes as one block; _line_plane writes out its eight
# recurrences
LINE_BLOCK = 8


@njit(cache=True, parallel=True)
def line_factor(tz, diag, inv_w):
    """Pivots of the tridiagonal z-line systems (Thomas algorithm, common practice).

    Along each column the line matrix has diag on the diagonal and -tz off it; ``inv_w`` gets
    1 / w_k with w_0 = diag_0 and w_k = diag_k - tz_{k-1}^2 / w_{k-1}, in diag's float type.
    The line matrices are symmetric and diagonally dominant, so no pivot vanishes. Columns go
    in blocks of LINE_BLOCK gathered at unit stride, so that the recurrence
    advances the whole block at once (0.55-0.7 of the time of one column at a time at 128^3
    to 512^3, benchmarks/RESULTS_PIVOTS.md).
    """
    nx, ny, nz = diag.shape
    for i in prange(nx):
        w = np.empty(nz * LINE_BLOCK, dtype=diag.dtype)
        t = np.empty(nz * LINE_BLOCK, dtype=diag.dtype)
        for j0 in range(0, ny, LINE_BLOCK):
            nb = min(LINE_BLOCK, ny - j0)
            for c in range(nb):
                for m in range(nz):
                    w[m * LINE_BLOCK + c] = diag[i, j0 + c, m]
                    t[m * LINE_BLOCK + c] = tz[i, j0 + c, m]
            for c in range(nb, LINE_BLOCK):  # a short last block factors unit columns
                for m in range(nz):
                    w[m * LINE_BLOCK + c] = 1.0
                    t[m * LINE_BLOCK + c] = 0.0
            for m in range(1, nz):
                at, prev = m * LINE_BLOCK, (m - 1) * LINE_BLOCK
                for c in range(LINE_BLOCK):
                    tp = t[prev + c]
                    w[at + c] = w[at + c] - tp * tp / w[prev + c]
            for c in range(nb):
                for m in range(nz):
                    inv_w[i, j0 + c, m] = 1.0 / w[m * LINE_BLOCK + c]


@njit(cache=True, inline="always")
def _forward(r, tz, inv_w, o, i, j, m, prev):
    """One forward step of the Thomas recurrence for column (i, j) at row m >= 1: y_m =
    (rhs_m + tz_{m-1} y_{m-1}) / w_m, the right-hand side read from and y_m stored to r[o + m]."""
    v = (r[o + m] + tz[i, j, m - np.uint64(1)] * prev) * inv_w[i, j, m]
    r[o + m] = v
    return v


@njit(cache=True, inline="always")
def _backward(r, tz, inv_w, u, o, i, j, m, nxt):
    """One back-substitution step for column (i, j) at row m: u_m = y_m + tz_m / w_m u_{m+1}."""
    v = r[o + m] + tz[i, j, m] * inv_w[i, j, m] * nxt
    u[i, j, m] = v
    return v


@njit(cache=True, inline="always")
def _line_buffer(u):
    """A thread's buffer for :func:`_line_plane`: LINE_BLOCK columns' right-hand sides."""
    return np.empty(u.shape[2] * LINE_BLOCK, dtype=u.dtype)


@njit(cache=True)
def _line_plane(tx, ty, tz, inv_w, b, u, i, colour, r):
    """Exact z-line solves for the columns (i, j) of plane i with (i + j) % 2 == colour, x and
    y neighbours taken from the current u.

    Columns go in blocks of LINE_BLOCK: the block's right-hand sides are formed column by
    column at unit stride into r (this vectorises), then the Thomas recurrences
    (:func:`line_factor`'s pivots) run as eight independent chains, one per column, written
    out so that each chain's running value stays in a register and the eight overlap in the
    pipeline. Indices are unsigned, so no negative-index wraparound is compiled in. Against
    the block gathered into a column-interleaved buffer and advanced with loops across it
    (numba does not enable the SLP vectoriser, so those ran as scalar code anyway, with
    wraparound arithmetic on every access) a smoothing step took 0.63-0.76 of the time and a
    warm gmg solve 0.81-0.90, the same numbers bit for bit (benchmarks/RESULTS_LINE_CHAINS.md). A short last block runs its columns one
    at a time.
    A missing x or y neighbour is read through the last plane's coupling, which is zero by the
    face-array convention, so no weights are needed.
    """
    nx, ny, nz = u.shape
    im = max(i - 1, 0)
    ip = min(i + 1, nx - 1)
    itm = i - 1 if i > 0 else nx - 1  # the zero plane stands in for a missing coupling
    one, zero = np.uint64(1), np.uint64(0)
    unz = np.uint64(nz)
    last = unz - one
    ui = np.uint64(i)
    j0 = (i + colour) & 1
    while j0 < ny:
        nb = min(LINE_BLOCK, (ny - j0 + 1) // 2)
        for c in range(nb):
            j = j0 + 2 * c
            jm = max(j - 1, 0)
            jtm = j - 1 if j > 0 else ny - 1
            jp = min(j + 1, ny - 1)
            o = c * nz
            for m in range(nz):
                r[o + m] = (b[i, j, m] + tx[itm, j, m] * u[im, j, m]
                            + tx[i, j, m] * u[ip, j, m] + ty[i, jtm, m] * u[i, jm, m]
                            + ty[i, j, m] * u[i, jp, m])
        if nb == 8:  # = LINE_BLOCK, written out
            a0 = np.uint64(j0)
            a1, a2, a3 = a0 + np.uint64(2), a0 + np.uint64(4), a0 + np.uint64(6)
            a4, a5, a6, a7 = a0 + np.uint64(8), a0 + np.uint64(10), a0 + np.uint64(12), a0 + np.uint64(14)
            o0 = zero  # (uint64 sums: numba types int64 * uint64 as float64)
            o1 = o0 + unz
            o2 = o1 + unz
            o3 = o2 + unz
            o4 = o3 + unz
            o5 = o4 + unz
            o6 = o5 + unz
            o7 = o6 + unz
            p0 = r[o0] * inv_w[ui, a0, zero]
            p1 = r[o1] * inv_w[ui, a1, zero]
            p2 = r[o2] * inv_w[ui, a2, zero]
            p3 = r[o3] * inv_w[ui, a3, zero]
            p4 = r[o4] * inv_w[ui, a4, zero]
            p5 = r[o5] * inv_w[ui, a5, zero]
            p6 = r[o6] * inv_w[ui, a6, zero]
            p7 = r[o7] * inv_w[ui, a7, zero]
            r[o0], r[o1], r[o2], r[o3], r[o4], r[o5], r[o6], r[o7] = p0, p1, p2, p3, p4, p5, p6, p7
            for m in range(one, unz):
                p0 = _forward(r, tz, inv_w, o0, ui, a0, m, p0)
                p1 = _forward(r, tz, inv_w, o1, ui, a1, m, p1)
                p2 = _forward(r, tz, inv_w, o2, ui, a2, m, p2)
                p3 = _forward(r, tz, inv_w, o3, ui, a3, m, p3)
                p4 = _forward(r, tz, inv_w, o4, ui, a4, m, p4)
                p5 = _forward(r, tz, inv_w, o5, ui, a5, m, p5)
                p6 = _forward(r, tz, inv_w, o6, ui, a6, m, p6)
                p7 = _forward(r, tz, inv_w, o7, ui, a7, m, p7)
            u[ui, a0, last], u[ui, a1, last], u[ui, a2, last], u[ui, a3, last] = p0, p1, p2, p3
            u[ui, a4, last], u[ui, a5, last], u[ui, a6, last], u[ui, a7, last] = p4, p5, p6, p7
            for k in range(one, unz):
                m = last - k
                p0 = _backward(r, tz, inv_w, u, o0, ui, a0, m, p0)
                p1 = _backward(r, tz, inv_w, u, o1, ui, a1, m, p1)
                p2 = _backward(r, tz, inv_w, u, o2, ui, a2, m, p2)
                p3 = _backward(r, tz, inv_w, u, o3, ui, a3, m, p3)
                p4 = _backward(r, tz, inv_w, u, o4, ui, a4, m, p4)
                p5 = _backward(r, tz, inv_w, u, o5, ui, a5, m, p5)
                p6 = _backward(r, tz, inv_w, u, o6, ui, a6, m, p6)
                p7 = _backward(r, tz, inv_w, u, o7, ui, a7, m, p7)
        else:
            for c in range(nb):
                a = np.uint64(j0 + 2 * c)
                o = np.uint64(c * nz)
                p = r[o] * inv_w[ui, a, zero]
                r[o] = p
                for m in range(one, unz):
                    p = _forward(r, tz, inv_w, o, ui, a, m, p)
                u[ui, a, last] = p
                for k in range(one, unz):
                    p = _backward(r, tz, inv_w, u, o, ui, a, last - k, p)
        j0 += 2 * LINE_BLOCK


@njit(cache=True, parallel=True)
def line_gauss_seidel_colour(tx, ty, tz, inv_w, b, u, colour):
    """One colour of zebra z-line Gauss-Seidel: exact solves along every z column (i, j) with
    (i + j) % 2 == colour (:func:`_line_plane`); the columns of one colour are independent."""
    nx = u.shape[0]
    for i in prange(nx):
        r = _line_buffer(u)
        _line_plane(tx, ty, tz, inv_w, b, u, i, colour, r)


@njit(cache=True, parallel=True)
def line_gauss_seidel(tx, ty, tz, inv_w, b, u, first, sweeps, chunks):
    """``sweeps`` zebra z-line Gauss-Seidel sweeps, each colour ``first`` then the other, in
    one pass over memory: the same result, bit for bit, as :func:`line_gauss_seidel_colour`
    for ``first`` and then for ``1 - first``, ``sweeps`` times, for a fraction of the memory
    traffic.

    The 2 ``sweeps`` colour passes are stages of a wavefront, each trailing the one before by
    one x-plane: at step i stage s solves plane i - s. Its columns read only columns of the
    other colour, in planes i - s - 1 to i - s + 1, which stage s - 1 (one plane ahead) has
    solved by then; a column's own old value is not read, and no later stage reads what stage
    s overwrites. The x-planes are split into ``chunks`` runs, one per thread. Within a run
    stage s solves the planes at least s away from the run's ends; the 2 s planes around each
    border between runs (and at the grid's ends) follow once every run is done, stage by
    stage, one border per thread. Two sweeps in one pass took 0.84-0.85 of the time of two
    one-sweep passes on 256^3 finest levels, 0.91-0.95 on 128^3 (benchmarks/RESULTS_SWEEPS.md).
    """
    nx = u.shape[0]
    stages = 2 * sweeps
    # a run spans at least 2 (stages - 1) planes, so that its two borders' planes stay apart
    chunks = min(chunks, nx // (2 * (stages - 1)))
    if chunks < 1:  # too few planes for a wavefront: the colour passes in order, one thread
        r = _line_buffer(u)
        for s in range(stages):
            for plane in range(nx):
                _line_plane(tx, ty, tz, inv_w, b, u, plane, (first + s) % 2, r)
        return
    # the plane solve is a called function, not inlined: four inlined copies compiled in 18.6 s,
    # the call in 7 s, for sweeps within measurement noise of each other
    for k in prange(chunks):
        r = _line_buffer(u)
        lo, hi = k * nx // chunks, (k + 1) * nx // chunks
        for i in range(lo, hi + stages - 1):
            for s in range(stages):
                plane = i - s
                if lo + s <= plane <= hi - 1 - s:
                    _line_plane(tx, ty, tz, inv_w, b, u, plane, (first + s) % 2, r)
    for k in prange(chunks + 1):  # the border at plane k nx / chunks (0 and nx: the ends)
        r = _line_buffer(u)
        p = k * nx // chunks
        for s in range(1, stages):
            for plane in range(max(p - s, 0), min(p + s, nx)):
                _line_plane(tx, ty, tz, inv_w, b, u, plane, (first + s) % 2, r)


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


@njit(cache=True)
def _axis_scales(agg, nc):
    """Per aggregate along one axis (``agg``: each fine cell's, ``nc`` of them): its first
    cell and the end (:func:`sevenfold.kernels.stencil.starts`), 1 / its size, and the scale
    of its coupling to the next aggregate, 2 / (the two sizes summed): the fine cells' centre
    distance over the aggregates' (1/2 between pairs)."""
    first = starts(agg, nc)
    inv = np.empty(nc)
    face = np.empty(nc)
    for I in range(nc):
        inv[I] = 1.0 / (first[I + 1] - first[I])
    for I in range(nc):
        if I + 1 < nc:
            face[I] = 2.0 / (first[I + 2] - first[I])
        else:
            face[I] = inv[I]  # (no coupling leaves the last aggregate)
    return first, inv, face


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

    Each thread builds one coarse x-plane, reading its fine rows along z at unit stride (an
    aggregate's cells are visited in the same order as aggregate by aggregate, so the sums are
    the same bit for bit; 2 to 3 times faster than looping over aggregates).
    """
    nx, ny, nz = diag.shape
    ax, ay, az = agg
    ncx, ncy, ncz = diagc.shape
    xs, inv_x, face_x = _axis_scales(ax, ncx)
    ys, inv_y, face_y = _axis_scales(ay, ncy)
    zs, inv_z, face_z = _axis_scales(az, ncz)
    for I in prange(ncx):
        d = np.zeros((ncy, ncz))
        cxs = np.zeros((ncy, ncz))
        cys = np.zeros((ncy, ncz))
        czs = np.zeros((ncy, ncz))
        nfree = np.zeros((ncy, ncz), dtype=np.int64)
        i0, i1 = xs[I], xs[I + 1]
        fx = inv_x[I]
        gxm = face_x[I - 1] if I > 0 else fx  # (no coupling enters the first aggregate)
        gxp = face_x[I]
        for i in range(i0, i1):
            for j in range(ny):
                J = ay[j]
                j0, j1 = ys[J], ys[J + 1]
                fy = inv_y[J]
                gym = face_y[J - 1] if J > 0 else fy
                gyp = face_y[J]
                for m in range(nz):
                    if not free[i, j, m]:
                        continue
                    K = az[m]
                    k0, k1 = zs[K], zs[K + 1]
                    fz = inv_z[K]
                    nfree[J, K] += 1
                    txm = tx[i - 1, j, m] if i > 0 else 0.0
                    tym = ty[i, j - 1, m] if j > 0 else 0.0
                    tzm = tz[i, j, m - 1] if m > 0 else 0.0
                    txp = tx[i, j, m]
                    typ = ty[i, j, m]
                    tzp = tz[i, j, m]
                    excess = diag[i, j, m] - (txm + txp + tym + typ + tzm + tzp)
                    missing_x = (1 if txm == 0.0 else 0) + (1 if txp == 0.0 else 0)
                    missing_y = (1 if tym == 0.0 else 0) + (1 if typ == 0.0 else 0)
                    missing_z = (1 if tzm == 0.0 else 0) + (1 if tzp == 0.0 else 0)
                    missing = missing_x + missing_y + missing_z
                    a = d[J, K]
                    if missing > 0:
                        share = excess / missing
                        a += share * (missing_x * fx + missing_y * fy + missing_z * fz)
                    else:
                        a += excess * (fx + fy + fz) / 3.0
                    # faces leaving the aggregate add to its diagonal; plus faces are also the
                    # coupling to the next aggregate
                    if i == i0:
                        a += gxm * txm
                    if i + 1 == i1:
                        a += gxp * txp
                        cxs[J, K] += txp
                    if j == j0:
                        a += gym * tym
                    if j + 1 == j1:
                        a += gyp * typ
                        cys[J, K] += typ
                    if m == k0:
                        a += (face_z[K - 1] if K > 0 else fz) * tzm
                    if m + 1 == k1:
                        a += face_z[K] * tzp
                        czs[J, K] += tzp
                    d[J, K] = a
        for J in range(ncy):
            for K in range(ncz):
                n = nfree[J, K]
                freec[I, J, K] = n > 0
                diagc[I, J, K] = d[J, K] if n > 0 else 1.0
                txc[I, J, K] = gxp * cxs[J, K]
                tyc[I, J, K] = face_y[J] * cys[J, K]
                tzc[I, J, K] = face_z[K] * czs[J, K]


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
