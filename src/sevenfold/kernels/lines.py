"""The z-line smoother on face arrays: tridiagonal pivots per z column and zebra z-line
Gauss-Seidel sweeps, two colours' sweeps in one pass over memory.

Same level format as :mod:`sevenfold.kernels.stencil`: ``tx[i, j, k]`` couples cell (i, j, k)
with (i+1, j, k) (zero on the last plane and to held cells), likewise ``ty`` and ``tz``, and
(A u)_P = diag_P u_P - sum_N t_PN u_N. Every kernel is generic in the float type, so the
preconditioner's levels may be float32 while the caller's operator stays float64.
"""

from __future__ import annotations

import numpy as np
from numba import prange

from .jit import njit


# Columns a line sweep (and line_factor) takes as one block; _line_plane writes out its eight
# recurrences
LINE_BLOCK = 8
# a * b + c as one fused multiply-add (one rounding), nothing else relaxed: a pass of two
# sweeps took 0.86-0.98x its time without (medians over 15 rounds at 128^3 and 256^3; 0.90-0.94x
# on float32 levels; benchmarks/RESULTS_CONTRACT.md), resident gmg jobs 0.95-0.97x
# (RESULTS_CONTRACT_WHOLE.md)
CONTRACT = {"contract"}
# Bytes of one array's plane that a strip of the sweeps' wavefront spans: the strip's planes
# of all six arrays then stay in a core's second-level cache while the stages pass over them.
# A two-sweep pass on a 256^3 float32 level took 0.81-0.83x its time without strips at 16 and
# 32 KiB, 0.85 at 64 and 0.97 at 128 (one-offs), 0.83-0.84x at 32 in benchmarks/RESULTS_STRIPS.md
STRIP_BYTES = 32768


@njit(cache=True, fastmath=CONTRACT, parallel=True)
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


@njit(cache=True, fastmath=CONTRACT, inline="always")
def _forward(r, l, inv_w, o, i, j, m, prev):
    """One forward step for column (i, j) at row m >= 1: z_m = rhs_m + l_{m-1} z_{m-1}, the
    right-hand side read from r[o + m] and y_m = z_m / w_m stored there (l in ``l[o + m]``)."""
    v = r[o + m] + l[o + m - np.uint64(1)] * prev
    r[o + m] = v * inv_w[i, j, m]
    return v


@njit(cache=True, fastmath=CONTRACT, inline="always")
def _backward(r, l, u, o, i, j, m, nxt):
    """One back-substitution step for column (i, j) at row m: u_m = y_m + l_m u_{m+1}."""
    v = r[o + m] + l[o + m] * nxt
    u[i, j, m] = v
    return v


@njit(cache=True, fastmath=CONTRACT, inline="always")
def _line_buffer(u):
    """A thread's buffer for :func:`_line_plane`: LINE_BLOCK columns' right-hand sides, then
    as many columns' products l = tz / w."""
    return np.empty(2 * u.shape[2] * LINE_BLOCK, dtype=u.dtype)


@njit(cache=True, fastmath=CONTRACT)
def _line_plane(tx, ty, tz, inv_w, b, u, i, colour, zero, r, jlo, jhi):
    """Exact z-line solves for the columns (i, j) of plane i with jlo <= j < jhi and
    (i + j) % 2 == colour, x and y neighbours taken from the current u, or, when ``zero``,
    taken as zero (u's current values are not read: the first colour of a sweep from u = 0
    needs neither u nor its zeroing).

    Each column's system is solved as L D L^T with L unit lower bidiagonal (entries -l_{m-1},
    l_m = tz_m / w_m) and D = diag(w): forward z_m = rhs_m + l_{m-1} z_{m-1}, storing
    y_m = z_m / w_m, then u_m = y_m + l_m u_{m+1}. Each step's dependence on the step before is
    one fused multiply-add (CONTRACT); the Thomas form, (rhs_m + tz_{m-1} y_{m-1}) / w_m, puts a
    division on that chain too (a smoothing step 0.88-0.92 of its time in a one-off of the kernel
    alone, 0.90-1.05 on the solver's finest levels, benchmarks/RESULTS_LDL.md).

    Columns go in blocks of LINE_BLOCK: the block's right-hand sides are formed column by
    column at unit stride into r (this vectorises), then the recurrences
    (:func:`line_factor`'s pivots) run as eight independent chains, one per column, written
    out so that each chain's running value stays in a register and the eight overlap in the
    pipeline. Indices are unsigned, so no negative-index wraparound is compiled in. Against
    the block gathered into a column-interleaved buffer and advanced with loops across it
    (numba does not enable the SLP vectoriser, so those ran as scalar code anyway, with
    wraparound arithmetic on every access) a smoothing step took 0.63-0.76 of the time and a
    warm gmg solve 0.81-0.90, the same numbers bit for bit (benchmarks/RESULTS_LINE_CHAINS.md).
    A short last block runs its columns one at a time.

    The block's products l go to the buffer beside its right-hand sides as these are formed,
    and the forward pass leaves y there, so that the back substitution reads the buffer alone
    and writes u. When it read tz and the pivots in place, 32 columns were in flight, and on a
    256^3 level same-colour columns lie 2 KiB apart, a power of two that puts a block's columns
    in two sets of the first-level cache: a step took 1.4x the time per cell of a 256^2 x 248
    level. With the buffer it takes 0.63-0.65x its former time on 256^3 finest levels and
    0.85-0.88x at 128^3, the numbers bit for bit the same, and warm gmg solves 0.75-0.86x and
    0.83-0.98x (benchmarks/RESULTS_BLOCK_BUFFER.md).

    A missing x or y neighbour is read through the last plane's coupling, which is zero by the
    face-array convention, so no weights are needed; its value is taken from the neighbour on
    the other side, a column of the other colour, which this sweep has written (the column's
    own value may be anything when the sweep started from ``zero``, and 0 times NaN is NaN).
    Planes one column wide have no such neighbour: :func:`line_gauss_seidel` zeroes them.
    """
    nx, ny, nz = u.shape
    im = i - 1 if i > 0 else min(i + 1, nx - 1)
    ip = i + 1 if i < nx - 1 else max(i - 1, 0)
    itm = i - 1 if i > 0 else nx - 1  # the zero plane stands in for a missing coupling
    one, start = np.uint64(1), np.uint64(0)
    unz = np.uint64(nz)
    last = unz - one
    ui = np.uint64(i)
    j0 = jlo + ((i + colour + jlo) & 1)
    lb = r[LINE_BLOCK * nz:]  # the block's products l
    while j0 < jhi:
        nb = min(LINE_BLOCK, (jhi - j0 + 1) // 2)
        for c in range(nb):
            j = j0 + 2 * c
            jm = j - 1 if j > 0 else min(j + 1, ny - 1)
            jtm = j - 1 if j > 0 else ny - 1
            jp = j + 1 if j < ny - 1 else max(j - 1, 0)
            o = c * nz
            if zero:
                for m in range(nz):
                    lb[o + m] = tz[i, j, m] * inv_w[i, j, m]
                    r[o + m] = b[i, j, m]
                continue
            for m in range(nz):
                lb[o + m] = tz[i, j, m] * inv_w[i, j, m]
                r[o + m] = (b[i, j, m] + tx[itm, j, m] * u[im, j, m]
                            + tx[i, j, m] * u[ip, j, m] + ty[i, jtm, m] * u[i, jm, m]
                            + ty[i, j, m] * u[i, jp, m])
        if nb == 8:  # = LINE_BLOCK, written out
            a0 = np.uint64(j0)
            a1, a2, a3 = a0 + np.uint64(2), a0 + np.uint64(4), a0 + np.uint64(6)
            a4, a5, a6, a7 = a0 + np.uint64(8), a0 + np.uint64(10), a0 + np.uint64(12), a0 + np.uint64(14)
            o0 = start  # (uint64 sums: numba types int64 * uint64 as float64)
            o1 = o0 + unz
            o2 = o1 + unz
            o3 = o2 + unz
            o4 = o3 + unz
            o5 = o4 + unz
            o6 = o5 + unz
            o7 = o6 + unz
            p0, p1, p2, p3 = r[o0], r[o1], r[o2], r[o3]
            p4, p5, p6, p7 = r[o4], r[o5], r[o6], r[o7]
            r[o0], r[o1] = p0 * inv_w[ui, a0, start], p1 * inv_w[ui, a1, start]
            r[o2], r[o3] = p2 * inv_w[ui, a2, start], p3 * inv_w[ui, a3, start]
            r[o4], r[o5] = p4 * inv_w[ui, a4, start], p5 * inv_w[ui, a5, start]
            r[o6], r[o7] = p6 * inv_w[ui, a6, start], p7 * inv_w[ui, a7, start]
            for m in range(one, unz):
                p0 = _forward(r, lb, inv_w, o0, ui, a0, m, p0)
                p1 = _forward(r, lb, inv_w, o1, ui, a1, m, p1)
                p2 = _forward(r, lb, inv_w, o2, ui, a2, m, p2)
                p3 = _forward(r, lb, inv_w, o3, ui, a3, m, p3)
                p4 = _forward(r, lb, inv_w, o4, ui, a4, m, p4)
                p5 = _forward(r, lb, inv_w, o5, ui, a5, m, p5)
                p6 = _forward(r, lb, inv_w, o6, ui, a6, m, p6)
                p7 = _forward(r, lb, inv_w, o7, ui, a7, m, p7)
            p0, p1 = p0 * inv_w[ui, a0, last], p1 * inv_w[ui, a1, last]
            p2, p3 = p2 * inv_w[ui, a2, last], p3 * inv_w[ui, a3, last]
            p4, p5 = p4 * inv_w[ui, a4, last], p5 * inv_w[ui, a5, last]
            p6, p7 = p6 * inv_w[ui, a6, last], p7 * inv_w[ui, a7, last]
            u[ui, a0, last], u[ui, a1, last], u[ui, a2, last], u[ui, a3, last] = p0, p1, p2, p3
            u[ui, a4, last], u[ui, a5, last], u[ui, a6, last], u[ui, a7, last] = p4, p5, p6, p7
            for k in range(one, unz):
                m = last - k
                p0 = _backward(r, lb, u, o0, ui, a0, m, p0)
                p1 = _backward(r, lb, u, o1, ui, a1, m, p1)
                p2 = _backward(r, lb, u, o2, ui, a2, m, p2)
                p3 = _backward(r, lb, u, o3, ui, a3, m, p3)
                p4 = _backward(r, lb, u, o4, ui, a4, m, p4)
                p5 = _backward(r, lb, u, o5, ui, a5, m, p5)
                p6 = _backward(r, lb, u, o6, ui, a6, m, p6)
                p7 = _backward(r, lb, u, o7, ui, a7, m, p7)
        else:
            for c in range(nb):
                a = np.uint64(j0 + 2 * c)
                o = np.uint64(c * nz)
                p = r[o]
                r[o] = p * inv_w[ui, a, start]
                for m in range(one, unz):
                    p = _forward(r, lb, inv_w, o, ui, a, m, p)
                p = p * inv_w[ui, a, last]
                u[ui, a, last] = p
                for k in range(one, unz):
                    p = _backward(r, lb, u, o, ui, a, last - k, p)
        j0 += 2 * LINE_BLOCK


@njit(cache=True, inline="always")
def strip_width(ny, nz, itemsize, stages):
    """Columns in a strip of :func:`line_gauss_seidel`'s wavefront: about STRIP_BYTES of each
    array's plane, a multiple of 2 LINE_BLOCK (full blocks of one colour); ny + stages - 1
    (one strip for every stage) when the plane is no larger than 2 STRIP_BYTES (a 128^3
    float32 level's planes, 64 KiB, took 1.01-1.09x their time in strips of 32 KiB)."""
    if ny * nz * itemsize <= 2 * STRIP_BYTES:
        return ny + stages - 1
    w = (STRIP_BYTES // (nz * itemsize)) // (2 * LINE_BLOCK) * (2 * LINE_BLOCK)
    return max(w, 2 * LINE_BLOCK)


@njit(cache=True, fastmath=CONTRACT, parallel=True)
def line_gauss_seidel_colour(tx, ty, tz, inv_w, b, u, colour):
    """One colour of zebra z-line Gauss-Seidel: exact solves along every z column (i, j) with
    (i + j) % 2 == colour (:func:`_line_plane`); the columns of one colour are independent."""
    nx = u.shape[0]
    for i in prange(nx):
        r = _line_buffer(u)
        _line_plane(tx, ty, tz, inv_w, b, u, i, colour, False, r, 0, u.shape[1])


@njit(cache=True, fastmath=CONTRACT, parallel=True)
def line_gauss_seidel(tx, ty, tz, inv_w, b, u, first, sweeps, chunks, zero):
    """``sweeps`` zebra z-line Gauss-Seidel sweeps, each colour ``first`` then the other, in
    one pass over memory: the same result, bit for bit, as :func:`line_gauss_seidel_colour`
    for ``first`` and then for ``1 - first``, ``sweeps`` times, for a fraction of the memory
    traffic. ``zero``: start from u = 0 without reading u (it need not be zeroed: the first
    two colour passes write every cell before any is read), the same result bit for bit.

    The 2 ``sweeps`` colour passes are stages of a wavefront, each trailing the one before by
    one x-plane: at step i stage s solves plane i - s. Its columns read only columns of the
    other colour, in planes i - s - 1 to i - s + 1, which stage s - 1 (one plane ahead) has
    solved by then; a column's own old value is not read, and no later stage reads what stage
    s overwrites. The x-planes are split into ``chunks`` runs, one per thread. Within a run
    stage s solves the planes at least s away from the run's ends; the 2 s planes around each
    border between runs (and at the grid's ends) follow once every run is done, stage by
    stage, one border per thread. Two sweeps in one pass took 0.84-0.85 of the time of two
    one-sweep passes on 256^3 finest levels, 0.91-0.95 on 128^3 (benchmarks/RESULTS_SWEEPS.md).

    Within a run the columns go in strips along y (:func:`strip_width`), each strip a whole
    wavefront over the run's planes, stage s's strip one column behind stage s - 1's: a column
    of stage s reads its y neighbours at j - 1 and j + 1, which stage s - 1 has solved (its
    strip reaches one column further), and stage s + 1, whose colour it reads, has stopped two
    columns short of them. Solves are only reordered, so the result is the same bit for bit.
    """
    nx, ny = u.shape[0], u.shape[1]
    if zero and (nx < 2 or ny < 2):  # no column of the other colour beside a border column
        u[...] = 0.0
        zero = False
    stages = 2 * sweeps
    # a run spans at least 2 (stages - 1) planes, so that its two borders' planes stay apart
    chunks = min(chunks, nx // (2 * (stages - 1)))
    if chunks < 1:  # too few planes for a wavefront: the colour passes in order, one thread
        r = _line_buffer(u)
        for s in range(stages):
            for plane in range(nx):
                _line_plane(tx, ty, tz, inv_w, b, u, plane, (first + s) % 2, zero and s == 0, r,
                            0, ny)
        return
    # the plane solve is a called function, not inlined: four inlined copies compiled in 18.6 s,
    # the call in 7 s, for sweeps within measurement noise of each other
    width = strip_width(ny, u.shape[2], u.itemsize, stages)
    strips = (ny + stages - 1 + width - 1) // width
    for k in prange(chunks):
        r = _line_buffer(u)
        lo, hi = k * nx // chunks, (k + 1) * nx // chunks
        for q in range(strips):
            for i in range(lo, hi + stages - 1):
                for s in range(stages):
                    plane = i - s
                    jlo, jhi = max(q * width - s, 0), min((q + 1) * width - s, ny)
                    if lo + s <= plane <= hi - 1 - s and jlo < jhi:
                        _line_plane(tx, ty, tz, inv_w, b, u, plane, (first + s) % 2,
                                    zero and s == 0, r, jlo, jhi)
    for k in prange(chunks + 1):  # the border at plane k nx / chunks (0 and nx: the ends)
        r = _line_buffer(u)
        p = k * nx // chunks
        for s in range(1, stages):
            for plane in range(max(p - s, 0), min(p + s, nx)):
                _line_plane(tx, ty, tz, inv_w, b, u, plane, (first + s) % 2, zero and s == 0, r,
                            0, ny)
