"""Colour-split storage for the z-line sweep: a prototype of the design named for issue 10's
work-unit target.

    python benchmarks/split_bench.py [--sizes 128 256] [--cases column layered inclusions constant]

The kept sweep (`sevenfold.kernels.lines.line_gauss_seidel`) stores a level as u[i, j, k],
z contiguous. Its columns of one colour ((i + j) % 2) are every other j, so each block of 8
columns is gathered from 8 strided columns into a small buffer before the Thomas recurrences
can run across the block; that gather and the scatter back are most of a sweep's time.

Here every array of the level is stored split by colour and with z in the middle:
S[c, i, k, h] holds cell (i, j, k) with c = (i + j) % 2 and j = 2 h + ((i + c) % 2). One x-row
of one colour, S[c, i], is then one contiguous block of nz rows of ny / 2 columns, and the
Thomas recurrence along z advances a whole row of columns at unit stride, with no gather:

* the y neighbours of column (c, i, h) are the other colour's columns h - 1 + q and h + q of
  the same row (q = (i + c) % 2), its x neighbours the other colour's column h of rows i - 1
  and i + 1, so every neighbour read is unit stride too;
* the forward recurrence writes into u itself (a colour's own old values are not read), the
  backward one reads the row back while it is still in the second-level cache (a row is nz ny
  / 2 values: 32 KiB at 128^3, 128 KiB at 256^3);
* the same order of colours and rows as the kept sweep (the second colour trailing the first
  by one x-row, runs of rows per thread, border rows last), and the same sums in the same
  order. The recurrences are the Thomas form the kept sweep had when this was written; the
  kept sweep has since moved to the L D L^T form (benchmarks/RESULTS_LDL.md), so the two now
  agree to rounding, not bit for bit (the table says which; the iterations still match);
* the sweeps before (or after) a coarse correction run in one pass over memory, as the kept
  ones do: the colour passes of both sweeps as stages of a wavefront (`sweeps_split`). On
  two threads a split sweep is limited by memory bandwidth, and without this it gained
  little over the kept pass of two sweeps.

Designs: the finest level split, or every smoothed level (the coarsest level's LU stays in
the kept layout); the finest level split with CG left in the kept layout (r and z transposed
each iteration, ``--designs 'split finest level, CG kept'``); and, since a split sweep costs
half a kept one, three sweeps before and after each coarse correction instead of two, kept and
split. Otherwise CG works on split vectors, with the finest operator, the residual and
restriction and the prolongation written for the split layout (the restriction writes, and the
prolongation reads, the coarse array in x, z, y order, so that a coarse row's y run is unit
stride too; it is rearranged into the coarse level's layout at coarse size; y pairs may be
offset by one cell, as the kept hierarchy pairs them to keep walls between aggregates). The levels are
those of the kept hierarchy, split once at set-up (the time is reported: assembly and a
Galerkin product that wrote them split would not pay it). Only the run of levels from the
finest with an even ny is split; the rest stay in the kept layout.

Writes benchmarks/RESULTS_SPLIT.md: whole gmg-CG solves, kept against the two designs (one
numba thread, CPU seconds, set-up and CG apart), and each kernel alone on the same arrays.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numba
import numpy as np
from numba import njit, prange

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import cycle_bench as cb  # noqa: E402
import timing  # noqa: E402
import wall_bench  # noqa: E402

from sevenfold.kernels import lines, multigrid, stencil  # noqa: E402
from sevenfold.solvers import gmg  # noqa: E402
from sevenfold.solvers.cg import pcg  # noqa: E402


TILE = 16  # z planes a transposition moves per pass along a row


@njit(parallel=True)  # (no cache: a cached kernel re-imports this module)
def to_split(a, s):
    """s[c, i, k, h] = a[i, 2 h + (i + c) % 2, k] (and a narrowing cast to s's type), in tiles
    of TILE z planes along each row (a one-off check found no order of these loops much
    faster: a transposition runs at a third to a fifth of a copy's speed)."""
    nx, ny, nz = a.shape
    nyh = ny // 2
    for i in prange(nx):
        for c in range(2):
            q = (i + c) & 1
            for k0 in range(0, nz, TILE):
                k1 = min(k0 + TILE, nz)
                for h in range(nyh):
                    j = 2 * h + q
                    for k in range(k0, k1):
                        s[c, i, k, h] = a[i, j, k]


@njit(parallel=True)
def from_split(s, a):
    """The inverse of :func:`to_split`, tiled the same way."""
    nx, ny, nz = a.shape
    nyh = ny // 2
    for i in prange(nx):
        for c in range(2):
            q = (i + c) & 1
            for k0 in range(0, nz, TILE):
                k1 = min(k0 + TILE, nz)
                for h in range(nyh):
                    j = 2 * h + q
                    for k in range(k0, k1):
                        a[i, j, k] = s[c, i, k, h]


@njit
def _solve_row(b, txm, uxm, txp, uxp, tym, typ, uy, tz, iw, u, q):
    """Exact z-line solves of one x-row of one colour (split layout; every argument a 2-D
    (nz, ny / 2) row): b the right-hand side, (txm, uxm) and (txp, uxp) the x-minus and x-plus
    couplings and the other colour's u in those rows, tym and typ the y couplings (tym the
    other colour's), uy the other colour's u in this row, tz and iw the z couplings and pivots,
    u the row's own u (written). q = 0: the y-minus neighbour of column h is the other colour's
    column h - 1, and h + 0 the y-plus one; q = 1: h and h + 1. The sums in the order of
    lines._line_plane, the recurrences of its _forward and _backward; each loop runs across the
    row's columns at unit stride and touches few arrays, so that it vectorises."""
    nz, nyh = u.shape
    for k in range(nz):
        for h in range(nyh):
            u[k, h] = b[k, h] + txm[k, h] * uxm[k, h] + txp[k, h] * uxp[k, h]
        if q == 0:  # column 0 has no y-minus neighbour (its coupling is zero)
            for h in range(1, nyh):
                u[k, h] = u[k, h] + tym[k, h - 1] * uy[k, h - 1]
            for h in range(nyh):
                u[k, h] = u[k, h] + typ[k, h] * uy[k, h]
        else:  # the last column has no y-plus neighbour
            for h in range(nyh):
                u[k, h] = u[k, h] + tym[k, h] * uy[k, h]
            for h in range(nyh - 1):
                u[k, h] = u[k, h] + typ[k, h] * uy[k, h + 1]
        if k == 0:
            for h in range(nyh):
                u[0, h] = u[0, h] * iw[0, h]
        else:
            for h in range(nyh):
                u[k, h] = (u[k, h] + tz[k - 1, h] * u[k - 1, h]) * iw[k, h]
    for k in range(nz - 2, -1, -1):
        for h in range(nyh):
            u[k, h] += tz[k, h] * iw[k, h] * u[k + 1, h]


@njit
def _row(tx, ty, tz, iw, b, u, i, c):
    """The z-line solves of colour c in x-row i (:func:`_solve_row` on the rows involved)."""
    nx = u.shape[1]
    o = 1 - c
    im = max(i - 1, 0)
    ip = min(i + 1, nx - 1)
    itm = i - 1 if i > 0 else nx - 1  # the zero last row stands in for a missing coupling
    _solve_row(b[c, i], tx[o, itm], u[o, im], tx[c, i], u[o, ip], ty[o, i], ty[c, i], u[o, i],
               tz[c, i], iw[c, i], u[c, i], (i + c) & 1)


@njit(parallel=True)
def sweep_split(tx, ty, tz, iw, b, u, first, chunks):
    """One zebra z-line Gauss-Seidel sweep on split arrays, colour ``first`` then the other,
    in one pass (the order of lines.line_gauss_seidel: the second colour one row behind,
    ``chunks`` runs of rows, the runs' border rows last)."""
    nx = u.shape[1]
    chunks = max(1, min(chunks, nx))
    second = 1 - first
    for r in prange(chunks):
        lo, hi = r * nx // chunks, (r + 1) * nx // chunks
        for i in range(lo, hi):
            _row(tx, ty, tz, iw, b, u, i, first)
            if i - 1 > lo:
                _row(tx, ty, tz, iw, b, u, i - 1, second)
    for r in prange(chunks):
        lo, hi = r * nx // chunks, (r + 1) * nx // chunks
        _row(tx, ty, tz, iw, b, u, lo, second)
        if hi - 1 > lo:
            _row(tx, ty, tz, iw, b, u, hi - 1, second)


@njit(parallel=True)
def sweeps_split(tx, ty, tz, iw, b, u, first, sweeps, chunks):
    """``sweeps`` sweeps of :func:`sweep_split` in one pass over memory: the 2 ``sweeps``
    colour passes as stages of a wavefront, each trailing the one before by one x-row, runs
    of rows per thread and the rows around the runs' borders last, stage by stage (the order
    of lines.line_gauss_seidel, the numbers of :func:`sweep_split` twice). On two threads a split
    sweep is limited by memory bandwidth, which one pass per pair of sweeps halves."""
    nx = u.shape[1]
    stages = 2 * sweeps
    chunks = min(chunks, nx // (2 * (stages - 1)))
    if chunks < 1:
        for s in range(stages):
            for i in range(nx):
                _row(tx, ty, tz, iw, b, u, i, (first + s) % 2)
        return
    for r in prange(chunks):
        lo, hi = r * nx // chunks, (r + 1) * nx // chunks
        for i in range(lo, hi + stages - 1):
            for s in range(stages):
                row = i - s
                if lo + s <= row <= hi - 1 - s:
                    _row(tx, ty, tz, iw, b, u, row, (first + s) % 2)
    for r in prange(chunks + 1):
        p = r * nx // chunks
        for s in range(1, stages):
            for row in range(max(p - s, 0), min(p + s, nx)):
                _row(tx, ty, tz, iw, b, u, row, (first + s) % 2)


@njit(parallel=True)
def prolong_add_split(ect, free, step, agg, scale, u):
    """u += scale * P ec on the free cells, u split, ``free`` split as 1.0 and 0.0 in u's
    type (a product instead of a branch, so that the loop vectorises), ect = ec in x, z, y
    order (stencil.prolong_add's sums; ``agg`` as there, its y pairs offset or not: a
    colour's column h lies in coarse column h + ay[q])."""
    nx, nz, nyh = u.shape[1], u.shape[2], u.shape[3]
    ax, ay, az = agg
    sy = step[1]
    for i in prange(nx):
        I = ax[i]
        for c in range(2):
            q = (i + c) & 1
            oy = ay[q]
            for k in range(nz):
                row = ect[I, az[k]]
                uk = u[c, i, k]
                fk = free[c, i, k]
                if sy == 2:
                    for h in range(nyh):
                        uk[h] += scale * row[h + oy] * fk[h]
                else:
                    for h in range(nyh):
                        uk[h] += scale * row[2 * h + q] * fk[h]


@njit
def _residual_row(b, diag, txm, uxm, txp, uxp, tym, typ, uy, tz, u, q, r):
    """r = b - A u on the columns of one x-row and colour (split layout; the rows as in
    :func:`_solve_row`, r another (nz, ny / 2) row; missing neighbours as in
    :func:`_product_row`)."""
    nz, nyh = u.shape
    for k in range(nz):
        km = k - 1 if k > 0 else nz - 1
        um = u[k - 1] if k > 0 else u[k]
        up = u[k + 1] if k < nz - 1 else u[k]
        tm, tp, y, uk, bk = tz[km], tz[k], r[k], u[k], b[k]
        if q == 0:
            y[0] = (bk[0] - diag[k, 0] * uk[0] + txm[k, 0] * uxm[k, 0] + txp[k, 0] * uxp[k, 0]
                    + typ[k, 0] * uy[k, 0] + tm[0] * um[0] + tp[0] * up[0])
            for h in range(1, nyh):
                y[h] = (bk[h] - diag[k, h] * uk[h] + txm[k, h] * uxm[k, h] + txp[k, h] * uxp[k, h]
                        + tym[k, h - 1] * uy[k, h - 1] + typ[k, h] * uy[k, h]
                        + tm[h] * um[h] + tp[h] * up[h])
        else:
            for h in range(nyh - 1):
                y[h] = (bk[h] - diag[k, h] * uk[h] + txm[k, h] * uxm[k, h] + txp[k, h] * uxp[k, h]
                        + tym[k, h] * uy[k, h] + typ[k, h] * uy[k, h + 1]
                        + tm[h] * um[h] + tp[h] * up[h])
            h = nyh - 1
            y[h] = (bk[h] - diag[k, h] * uk[h] + txm[k, h] * uxm[k, h] + txp[k, h] * uxp[k, h]
                    + tym[k, h] * uy[k, h] + tm[h] * um[h] + tp[h] * up[h])


@njit(parallel=True)
def residual_restrict_split(tx, ty, tz, diag, b, u, step, agg, rct):
    """rct = P^T (b - A u) with u, b and the face arrays split and rct in x, z, y order
    (rct[I, K, J]: a coarse row's y run is unit stride, as the split fine rows are), the
    piecewise-constant restriction of stencil.residual_restrict (``agg`` as there, its y
    pairs offset or not); each coarse x-row is one thread's."""
    nx, nz, nyh = u.shape[1], u.shape[2], u.shape[3]
    ax, ay, az = agg
    sy = step[1]
    ncx = rct.shape[0]
    xs = stencil.starts(ax, ncx)
    for I in prange(ncx):
        rct[I] = 0.0
        r = np.empty((nz, nyh), dtype=rct.dtype)
        for i in range(xs[I], xs[I + 1]):
            im = max(i - 1, 0)
            ip = min(i + 1, nx - 1)
            itm = i - 1 if i > 0 else nx - 1
            for c in range(2):
                o = 1 - c
                q = (i + c) & 1
                oy = ay[q]
                _residual_row(b[c, i], diag[c, i], tx[o, itm], u[o, im], tx[c, i], u[o, ip],
                              ty[o, i], ty[c, i], u[o, i], tz[c, i], u[c, i], q, r)
                for k in range(nz):
                    row = rct[I, az[k]]
                    rk = r[k]
                    if sy == 2:  # column h of colour q lies in coarse column h + ay[q]
                        for h in range(nyh):
                            row[h + oy] += rk[h]
                    else:
                        for h in range(nyh):
                            row[2 * h + q] += rk[h]


@njit(parallel=True)
def swap_yz(a, out):
    """out[i, k, j] = a[i, j, k] (a coarse level's array between the kept x, y, z order and
    the x, z, y order of the split level's transfers)."""
    for i in prange(a.shape[0]):
        for j in range(a.shape[1]):
            for k in range(a.shape[2]):
                out[i, k, j] = a[i, j, k]


@njit(fastmath={"reassoc", "nsz", "contract"})  # as stencil.apply_dot: the sum vectorises
def _product_row(diag, txm, uxm, txp, uxp, tym, typ, uy, tz, u, q, out, k0, k1):
    """out = A u on the columns of one x-row and colour in planes [k0, k1) (split layout, the
    rows as in :func:`_solve_row`); returns u . A u over them. One loop per plane: a missing z
    neighbour is read through the last plane's coupling, which is zero by the face-array
    convention (as a missing x neighbour is), and the edge column's missing y neighbour
    through its own zero coupling."""
    nz, nyh = u.shape
    acc = 0.0
    for k in range(k0, k1):
        km = k - 1 if k > 0 else nz - 1
        um = u[k - 1] if k > 0 else u[k]
        up = u[k + 1] if k < nz - 1 else u[k]
        tm, tp, y, uk = tz[km], tz[k], out[k], u[k]
        if q == 0:  # y neighbours h - 1 and h; column 0's y-minus coupling is missing
            y[0] = (diag[k, 0] * uk[0] - txm[k, 0] * uxm[k, 0] - txp[k, 0] * uxp[k, 0]
                    - typ[k, 0] * uy[k, 0] - tm[0] * um[0] - tp[0] * up[0])
            for h in range(1, nyh):
                y[h] = (diag[k, h] * uk[h] - txm[k, h] * uxm[k, h] - txp[k, h] * uxp[k, h]
                        - tym[k, h - 1] * uy[k, h - 1] - typ[k, h] * uy[k, h]
                        - tm[h] * um[h] - tp[h] * up[h])
        else:  # y neighbours h and h + 1; the last column's y-plus coupling is missing
            for h in range(nyh - 1):
                y[h] = (diag[k, h] * uk[h] - txm[k, h] * uxm[k, h] - txp[k, h] * uxp[k, h]
                        - tym[k, h] * uy[k, h] - typ[k, h] * uy[k, h + 1]
                        - tm[h] * um[h] - tp[h] * up[h])
            h = nyh - 1
            y[h] = (diag[k, h] * uk[h] - txm[k, h] * uxm[k, h] - txp[k, h] * uxp[k, h]
                    - tym[k, h] * uy[k, h] - tm[h] * um[h] - tp[h] * up[h])
        for h in range(nyh):
            acc += uk[h] * y[h]
    return acc


@njit(parallel=True, fastmath={"reassoc", "nsz", "contract"})
def apply_dot_split(tx, ty, tz, diag, p, out):
    """out = A p on split arrays (the finest operator, for CG), and p . A p."""
    nx, nz = p.shape[1], p.shape[2]
    pq = 0.0
    for i in prange(nx):
        im = max(i - 1, 0)
        ip = min(i + 1, nx - 1)
        itm = i - 1 if i > 0 else nx - 1
        acc = 0.0
        for c in range(2):
            o = 1 - c
            q = (i + c) & 1
            acc += _product_row(diag[c, i], tx[o, itm], p[o, im], tx[c, i], p[o, ip], ty[o, i],
                                ty[c, i], p[o, i], tz[c, i], p[c, i], q, out[c, i], 0, nz)
        pq += acc
    return pq


class SplitOperator:
    """The finest operator on split float64 arrays, as CG's A (flat split vectors)."""

    def __init__(self, fine) -> None:
        t = cb.CLOCK()
        self.s = {name: split(getattr(fine, name)) for name in ("tx", "ty", "tz", "diag")}
        self.splitting = cb.CLOCK() - t
        n = fine.diag.size
        self.shape = (n, n)
        self.out = np.empty_like(self.s["diag"])

    def apply_dot(self, p: np.ndarray) -> tuple[np.ndarray, float]:
        s = self.s
        pq = apply_dot_split(s["tx"], s["ty"], s["tz"], s["diag"], p.reshape(self.out.shape),
                             self.out)
        return self.out.ravel(), pq

    def __matmul__(self, p: np.ndarray) -> np.ndarray:
        return self.apply_dot(p)[0]


def split_like(a: np.ndarray, dtype=None) -> np.ndarray:
    nx, ny, nz = a.shape
    if ny % 2:
        raise ValueError("the split prototype needs an even ny")
    return np.empty((2, nx, nz, ny // 2), dtype=dtype or a.dtype)


def split(a: np.ndarray, dtype=None) -> np.ndarray:
    s = split_like(a, dtype)
    to_split(a, s)
    return s


@njit(parallel=True)
def xzy_to_split(a, s):
    """s[c, i, k, h] = a[i, k, 2 h + (i + c) % 2]: a coarse array from the x, z, y order of
    the transfers into the split layout."""
    nx, nz, nyh = s.shape[1], s.shape[2], s.shape[3]
    for i in prange(nx):
        for c in range(2):
            q = (i + c) & 1
            for k in range(nz):
                for h in range(nyh):
                    s[c, i, k, h] = a[i, k, 2 * h + q]


@njit(parallel=True)
def split_to_xzy(s, a):
    """The inverse of :func:`xzy_to_split`."""
    nx, nz, nyh = s.shape[1], s.shape[2], s.shape[3]
    for i in prange(nx):
        for c in range(2):
            q = (i + c) & 1
            for k in range(nz):
                for h in range(nyh):
                    a[i, k, 2 * h + q] = s[c, i, k, h]


class SplitHierarchy(gmg.Hierarchy):
    """The kept hierarchy (the same levels, coarse operators and cycle) whose smoothed levels
    are stored split: the finest ``split_levels`` of them (all but the coarsest by default),
    the rest, and the coarsest level's LU, in the kept layout. Only a run of levels from the
    finest with an even ny and y pairs (offset or not) or y whole can be split: the rest stay
    kept (on the column at 256^3 the second level is 129 x 129 x 128, so only the finest is
    split)."""

    def __init__(self, fine, split_levels: int | None = None, **options) -> None:
        super().__init__(fine, **options)
        t = cb.CLOCK()
        smoothed = 0  # the leading levels the prototype can split: an even ny, y paired or whole
        for lv in self.levels[:-1]:
            if lv.shape[1] % 2 or (lv.step[1] == 2 and stencil.pair_offset(lv.agg[1]) < 0):
                break
            smoothed += 1
        self.split_levels = min(smoothed, split_levels if split_levels is not None else smoothed)
        for lv in self.levels[:self.split_levels]:
            lv.s = {name: split(getattr(lv, name)) for name in ("tx", "ty", "tz", "diag", "inv_w")}
            lv.s["free"] = split(lv.free, self.dtype)
            lv.sb = split_like(lv.diag, self.dtype)
            lv.su = split_like(lv.diag, self.dtype)
        for lv, coarse in zip(self.levels[:self.split_levels], self.levels[1:]):
            nx, ny, nz = coarse.shape
            lv.ct = np.empty((nx, nz, ny), dtype=self.dtype)  # the coarse array in x, z, y order
        self.splitting = cb.CLOCK() - t  # set-up that levels built split would not pay

    @property
    def rhs_buffer(self) -> None:
        """None: CG hands r over as it is (the prototype narrows it here)."""
        return None

    def precondition_dot(self, r: np.ndarray, filled: bool = False) -> tuple[np.ndarray, float]:
        """One cycle from zero for A z = r, r and z split (r float64, z float32), and r . z."""
        from sevenfold.kernels.vector import vector_ops

        top = self.levels[0]
        multigrid.narrow(r, top.sb.reshape(-1))
        top.su[...] = 0.0
        self.cycle(0, None, None)
        z = top.su.reshape(-1)
        return z, vector_ops(z.size).dot(r, z)

    def _sweeps(self, lv, first: int) -> None:
        s = lv.s
        sweeps_split(s["tx"], s["ty"], s["tz"], s["inv_w"], lv.sb, lv.su, first,
                     self.sweeps[first], numba.get_num_threads())

    def cycle(self, level: int, b: np.ndarray, u: np.ndarray, zero: bool = False) -> None:
        """The kept cycle; a split level works on its own lv.sb and lv.su (u from zero)."""
        if level >= self.split_levels:
            return super().cycle(level, b, u, zero)
        lv, coarse = self.levels[level], self.levels[level + 1]
        s = lv.s
        self._sweeps(lv, 0)
        residual_restrict_split(s["tx"], s["ty"], s["tz"], s["diag"], lv.sb, lv.su, lv.step, lv.agg,
                                lv.ct)
        visits = self.gamma if level + 2 < len(self.levels) else 1
        if level + 1 < self.split_levels:
            xzy_to_split(lv.ct, coarse.sb)
            coarse.su[...] = 0.0
            for _ in range(visits):
                self.cycle(level + 1, None, None)
            split_to_xzy(coarse.su, lv.ct)
        else:
            swap_yz(lv.ct, coarse.b)
            coarse.e[...] = 0.0
            for _ in range(visits):
                super().cycle(level + 1, coarse.b, coarse.e)
            swap_yz(coarse.e, lv.ct)
        prolong_add_split(lv.ct, s["free"], lv.step, lv.agg, self.overcorrection, lv.su)
        self._sweeps(lv, 1)


class SplitFinestKeptCG(SplitHierarchy):
    """The finest level split, CG's vectors and operator in the kept layout: each cycle
    transposes r into the split right-hand side (narrowing it to float32 as it goes) and the
    correction back into the kept float32 z, two float32 transpositions per iteration in place
    of CG's operator on split vectors (1.3-1.6x the kept one). The split arrays could be written
    where the kept hierarchy writes its float32 copy of the finest level, so a product built
    this way would pay the splitting at set-up: its measure is the total, not *built split*."""

    def __init__(self, fine, **options) -> None:
        super().__init__(fine, 1, **options)

    def precondition_dot(self, r: np.ndarray, filled: bool = False) -> tuple[np.ndarray, float]:
        from sevenfold.kernels.vector import vector_ops

        top = self.levels[0]
        to_split(r.reshape(top.shape), top.sb)
        top.su[...] = 0.0
        self.cycle(0, None, None)
        from_split(top.su, top.e)
        z = top.e.reshape(-1)
        return z, vector_ops(z.size).dot(r, z)


# design: (levels stored split, 0 = the kept hierarchy; None = every smoothed level; "kept CG" =
# SplitFinestKeptCG), sweeps before and after each coarse correction
DESIGNS = {"kept": (0, 2), "split finest level": (1, 2), "every level split": (None, 2),
           "kept, W(3,3)": (0, 3), "every level split, W(3,3)": (None, 3),
           "split finest level, CG kept": ("kept CG", 2)}
OPTIONS = {k: v for k, v in gmg.DEFAULTS.items() if k not in ("start", "smoothing")} | {"finest": "copy"}


def solve(fine, b, design: str) -> dict:
    """gmg-CG from zero with the kept hierarchy or the prototype (CG on split vectors with
    :class:`SplitOperator` and :class:`SplitHierarchy`): CPU seconds of the set-up (of which
    ``splitting``: the prototype's splitting of the finest arrays) and of CG, the iterations,
    and the true relative residual of x in the kept layout."""
    levels, sweeps = DESIGNS[design]
    t0 = cb.CLOCK()
    if levels == 0:
        operator = gmg.FineOperator(fine)
        hierarchy = gmg.Hierarchy(fine, out=operator.out, smoothing=sweeps, **OPTIONS)
        rhs, splitting = b.reshape(-1), 0.0
    elif levels == "kept CG":
        operator = gmg.FineOperator(fine)
        hierarchy = SplitFinestKeptCG(fine, out=operator.out, smoothing=sweeps, **OPTIONS)
        rhs, splitting = b.reshape(-1), hierarchy.splitting
    else:
        operator = SplitOperator(fine)
        hierarchy = SplitHierarchy(fine, levels, smoothing=sweeps, **OPTIONS)
        t = cb.CLOCK()
        rhs = split(b).reshape(-1)
        splitting = cb.CLOCK() - t + operator.splitting + hierarchy.splitting
    t1 = cb.CLOCK()
    result = pcg(operator, rhs, hierarchy, cb.RTOL, cb.MAX_ITERATIONS, None, 50, "gmg", 0.0)
    t2 = cb.CLOCK()
    x = result.x.reshape(fine.shape)
    if levels not in (0, "kept CG"):
        x = np.empty(fine.shape)
        from_split(result.x.reshape(operator.out.shape), x)
    ax = np.empty(fine.shape)
    fine.apply(x, ax)
    residual = float(np.linalg.norm(b - ax) / np.linalg.norm(b))
    return dict(design=design, split=getattr(hierarchy, "split_levels", 0), setup=t1 - t0,
                splitting=splitting, cg=t2 - t1,
                iterations=result.iterations, converged=result.converged, residual=residual)


def run_case(n: int, case: str, repeats: int, designs=tuple(DESIGNS)) -> list[dict]:
    """The designs on one problem, alternating, best of ``repeats`` by total CPU time; the
    work unit as a median around them."""
    fine, b = cb.problem_level(n, case)
    best: dict[str, dict] = {}
    units = []
    for _ in range(repeats):
        for design in designs:
            units.append(cb.unit_seconds(fine))
            row = solve(fine, b, design)
            if design not in best or row["setup"] + row["cg"] < best[design]["setup"] + best[design]["cg"]:
                best[design] = row
    unit = float(np.median(units))
    rows = []
    for design in designs:
        r = best[design] | dict(case=case, n=n, unit=unit)
        rows.append(r)
        print(f"{case:10s} {n:4d} {design:20s} it {r['iterations']:3d} setup {r['setup'] / unit:6.1f} "
              f"(splitting {r['splitting'] / unit:5.1f}) cg {r['cg'] / unit:6.1f} WU "
              f"residual {r['residual']:.1e}", flush=True)
    return rows


def components(n: int, case: str, repeats: int = 5) -> list[dict]:
    """Each finest-level kernel, kept against split, on the kept hierarchy's arrays of one
    problem (CPU seconds, median of ``repeats``, the pairs alternating), in work units; and
    the sweeps of every coarser level, for the projection of a hierarchy split throughout."""
    fine, b = cb.problem_level(n, case)
    h = gmg.Hierarchy(fine, smoothing=2, **OPTIONS)
    unit = cb.unit_seconds(fine)
    rows = []
    r = np.random.default_rng(0).standard_normal(fine.shape)
    for level, lv in enumerate(h.levels[:-1]):
        rhs = np.empty(lv.shape, dtype=h.dtype)
        multigrid.narrow(r[tuple(slice(0, s) for s in lv.shape)].copy().ravel(), rhs.ravel())
        u = np.zeros(lv.shape, dtype=h.dtype)
        s = {name: split(getattr(lv, name)) for name in ("tx", "ty", "tz", "diag", "inv_w")}
        sb, su = split(rhs), split(u)
        threads = numba.get_num_threads()
        # the check the docstring promises: one sweep from the same random u, both layouts
        start = np.random.default_rng(level).standard_normal(lv.shape).astype(h.dtype)
        kept_u, split_u, back = start.copy(), split(start), np.empty_like(start)
        lines.line_gauss_seidel(lv.tx, lv.ty, lv.tz, lv.inv_w, rhs, kept_u, 0, 1, threads, False)
        sweep_split(s["tx"], s["ty"], s["tz"], s["inv_w"], sb, split_u, 0, threads)
        from_split(split_u, back)
        same = {"sweep": bool(np.array_equal(kept_u, back))}
        kept_u, split_u = start.copy(), split(start)  # and two sweeps in one pass
        lines.line_gauss_seidel(lv.tx, lv.ty, lv.tz, lv.inv_w, rhs, kept_u, 0, 2, threads, False)
        sweeps_split(s["tx"], s["ty"], s["tz"], s["inv_w"], sb, split_u, 0, 2, threads)
        from_split(split_u, back)
        same["two sweeps in one pass"] = bool(np.array_equal(kept_u, back))
        pairs = {"sweep": (
            lambda: lines.line_gauss_seidel(lv.tx, lv.ty, lv.tz, lv.inv_w, rhs, u, 0, 1, threads, False),
            lambda: sweep_split(s["tx"], s["ty"], s["tz"], s["inv_w"], sb, su, 0, threads)),
            "two sweeps in one pass": (
            lambda: lines.line_gauss_seidel(lv.tx, lv.ty, lv.tz, lv.inv_w, rhs, u, 0, 2, threads, False),
            lambda: sweeps_split(s["tx"], s["ty"], s["tz"], s["inv_w"], sb, su, 0, 2, threads))}
        if level == 0:
            coarse = h.levels[1]
            rc = np.empty(coarse.shape, dtype=h.dtype)
            rct = np.empty((coarse.shape[0], coarse.shape[2], coarse.shape[1]), dtype=h.dtype)
            pairs["residual and restriction"] = (
                lambda: stencil.residual_restrict(lv.tx, lv.ty, lv.tz, lv.diag, rhs, u, lv.step,
                                                  lv.agg, rc),
                lambda: (residual_restrict_split(s["tx"], s["ty"], s["tz"], s["diag"], sb, su,
                                                 lv.step, lv.agg, rct), swap_yz(rct, rc)))
            free = split(lv.free, h.dtype)
            pairs["prolongation"] = (
                lambda: stencil.prolong_add(rc, lv.free, lv.step, lv.agg, 1.0, u),
                lambda: (swap_yz(rc, rct), prolong_add_split(rct, free, lv.step, lv.agg, 1.0, su)))
            p64 = r.copy()
            out = np.empty_like(p64)
            op = SplitOperator(fine)
            ps = split(p64)
            pairs["operator (float64, CG's)"] = (
                lambda: stencil.apply_dot(fine.tx, fine.ty, fine.tz, fine.diag, p64, out),
                lambda: op.apply_dot(ps))
        for name, (kept, new) in pairs.items():
            tk = timing.median(kept, repeats, cb.CLOCK)
            ts = timing.median(new, repeats, cb.CLOCK)
            rows.append(dict(case=case, n=n, level=level, shape="x".join(map(str, lv.shape)),
                             kernel=name, kept=tk / unit, split=ts / unit,
                             same=("yes" if same[name] else "no") if name in same else "-"))
            print(f"{case} {n} level {level} {name:32s} kept {tk / unit:6.3f} WU  "
                  f"split {ts / unit:6.3f} WU", flush=True)
    return rows


def _clock_words(short: bool = False) -> str:
    """How the run was timed: one thread in CPU seconds, or ``--threads`` in wall seconds."""
    threads = numba.get_num_threads()
    if threads == 1:
        return "CPU seconds" if short else "one numba thread, CPU seconds of this process"
    return "wall seconds" if short else f"{threads} numba threads, wall seconds"


def report(solves: list[dict], parts: list[dict], info: dict, command: str) -> str:
    out = ["# Colour-split storage for the z-line sweep (a prototype)", "",
           f"Written by `{command}` on {info['date']}; every number below comes from that run. "
           "Do not edit by hand: run the command again.", "",
           f"gmg-CG from zero to rtol 1e-8, {_clock_words()}, the "
           "designs alternating (best of the repeats). *kept* = `sevenfold.solvers.gmg`'s "
           "hierarchy (W(2,2) z-line Gauss-Seidel, scaled aggregation, float32 levels, finest "
           "level smoothed on a float32 copy); *split finest level* = the same hierarchy and "
           "cycle whose finest level is stored split by colour with z in the middle, CG's "
           "vectors and operator included; *every level split* = every smoothed level so "
           "stored, the coarsest level's LU in the kept layout (see the docstring of "
           "`benchmarks/split_bench.py`). Their sweeps are the kept sweeps to rounding (the "
           "Thomas form of the recurrences, where the kept sweep now runs L D L^T), so the "
           "iterations must match *kept*'s. *W(3,3)*: the same with three sweeps "
           "before and after each coarse correction instead of two. *split finest level, CG "
           "kept*: the finest level split, CG's vectors and operator kept, r and z transposed "
           "each iteration; a product would pay its splitting (it replaces the float32 copy), "
           "so its measure is the total WU. *work units* (WU) = seconds / one float64 "
           "application of the finest operator in the kept layout (median around the solves); "
           "*splitting* = the prototype's transposition of the levels' arrays into the split "
           "layout, part of its set-up, which levels built split (assembly and the Galerkin "
           "product writing that layout) would not pay: *built split* = the total less it; "
           "*residual* = the true relative residual of the returned solution, in the kept "
           "layout.", "",
           "*levels split*: how many levels, from the finest, the design stored split (only a "
           "run of levels with an even ny and y pairs can be).", "",
           "| case | cells | design | levels split | iterations | set-up WU | of which splitting | "
           "CG WU | total WU | built split WU | built split / kept | residual |",
           "|---|---|---|---|---|---|---|---|---|---|---|---|"]
    for r in solves:
        kept = next(x for x in solves if x["case"] == r["case"] and x["n"] == r["n"]
                    and x["design"] == "kept")
        total = (r["setup"] + r["cg"]) / r["unit"]
        built = total - r["splitting"] / r["unit"]
        ktotal = (kept["setup"] + kept["cg"]) / kept["unit"]
        out.append(f"| {r['case']} | {r['n']}^3 | {r['design']} | {r['split']} | {r['iterations']}"
                   f"{'' if r['converged'] else ' (not converged)'} | {r['setup'] / r['unit']:.1f} | "
                   f"{r['splitting'] / r['unit']:.1f} | {r['cg'] / r['unit']:.1f} | {total:.1f} | "
                   f"{built:.1f} | {built / ktotal:.2f} | {r['residual']:.1e} |")
    out += ["", "## The kernels alone", "",
            f"The kept hierarchy's arrays of the layered problem; {_clock_words(short=True)} of one call "
            "(median of 5, kept and split alternating) in work units. A sweep is both colours; "
            "*two sweeps in one pass*: the kept sweep's wavefront (lines.line_gauss_seidel with "
            "two sweeps) against the split one's (`sweeps_split`), the form both cycles "
            "run; the operator is CG's (float64, with p . A p). *bit for bit*: the same sweeps "
            "from the same random u give the same numbers in both layouts.", "",
            "| cells | level | shape | kernel | kept WU | split WU | split / kept | "
            "bit for bit |", "|---|---|---|---|---|---|---|---|"]
    for p in parts:
        out.append(f"| {p['n']}^3 | {p['level']} | {p['shape']} | {p['kernel']} | "
                   f"{p['kept']:.3f} | {p['split']:.3f} | {p['split'] / p['kept']:.2f} | "
                   f"{p['same']} |")
    out += [""] + wall_bench.machine_table(info)
    return "\n".join(out) + "\n"


def main(argv=None) -> int:
    import argparse

    parser = argparse.ArgumentParser(description="benchmarks/split_bench.py: colour-split storage")
    parser.add_argument("--sizes", type=int, nargs="+", default=[128, 256])
    parser.add_argument("--cases", nargs="+", default=["column", "layered", "inclusions", "constant"])
    parser.add_argument("--repeats", type=int, default=2)
    parser.add_argument("--designs", nargs="+", default=list(DESIGNS), choices=list(DESIGNS),
                        help="the designs to time (kept is always among them)")
    parser.add_argument("--results", default=str(HERE / "RESULTS_SPLIT.md"))
    parser.add_argument("--threads", type=int, default=1,
                        help="numba threads; above 1 every time is wall seconds (CPU time would "
                             "add the threads up)")
    args = parser.parse_args(argv)
    numba.set_num_threads(args.threads)
    if args.threads > 1:
        cb.CLOCK = time.perf_counter
    info = wall_bench.run_info()
    run_case(24, "column", 1)  # compile every kernel before timing
    components(24, "layered", 1)
    print("timed runs", flush=True)
    parts, solves = [], []
    for n in args.sizes:
        parts += components(n, "layered")
        for case in args.cases:
            solves += run_case(n, case, args.repeats, ["kept"] + [d for d in args.designs if d != "kept"])
    command = wall_bench.finish_info(info, "split_bench.py", argv)
    Path(args.results).write_text(report(solves, parts, info, command))
    print("wrote", args.results)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
