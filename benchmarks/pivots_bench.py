"""Where the z-line pivots come from: stored, factored in blocks of columns, or computed in
the sweep itself.

    python benchmarks/pivots_bench.py [--sizes 128 256 512] [--repeats 5] [--results FILE]

Times, in this process and on every numba thread, on a random diagonally dominant level
(float32 faces as on the copy path, float64 as on the lean path):

* ``line_factor`` (kept: columns in blocks of LINE_BLOCK, the recurrence across the block)
  against the same recurrence one column at a time (the version before);
* one ``line_gauss_seidel`` sweep with stored pivots (kept) against a sweep that computes the
  pivots on the fly from diag (no pivot array: 4 bytes per cell less on every level, for a
  division in the recurrence's dependency chain).

Writes RESULTS_PIVOTS.md (or ``--results``); ratios are against the kept kernel in the same run.
"""

from __future__ import annotations

import argparse
import platform
import subprocess
import sys
from datetime import datetime, timezone
from pathlib import Path

import numba
import numpy as np
from numba import njit, prange

from sevenfold.kernels import lines

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
from timing import best  # noqa: E402
LB = lines.LINE_BLOCK


@njit(parallel=True)
def factor_per_column(tz, diag, inv_w):
    """The version before: one column at a time, a division chain per column."""
    nx, ny, nz = diag.shape
    for i in prange(nx):
        for j in range(ny):
            w = diag[i, j, 0]
            inv_w[i, j, 0] = 1.0 / w
            for m in range(1, nz):
                t = tz[i, j, m - 1]
                w = diag[i, j, m] - t * t / w
                inv_w[i, j, m] = 1.0 / w


@njit
def _plane_on_the_fly(tx, ty, tz, diag, b, u, i, colour, y, w, t):
    """lines._line_plane with w gathered from diag and inverted inside the recurrence."""
    nx, ny, nz = u.shape
    im, ip = max(i - 1, 0), min(i + 1, nx - 1)
    itm = i - 1 if i > 0 else nx - 1
    j0 = (i + colour) & 1
    while j0 < ny:
        nb = min(LB, (ny - j0 + 1) // 2)
        for c in range(nb):
            j = j0 + 2 * c
            jm, jp = max(j - 1, 0), min(j + 1, ny - 1)
            jtm = j - 1 if j > 0 else ny - 1
            for m in range(nz):
                y[m * LB + c] = (b[i, j, m] + tx[itm, j, m] * u[im, j, m] + tx[i, j, m] * u[ip, j, m]
                                 + ty[i, jtm, m] * u[i, jm, m] + ty[i, j, m] * u[i, jp, m])
                w[m * LB + c] = diag[i, j, m]
                t[m * LB + c] = tz[i, j, m]
        for c in range(nb, LB):
            for m in range(nz):
                y[m * LB + c], w[m * LB + c], t[m * LB + c] = 0.0, 1.0, 0.0
        for c in range(LB):
            w[c] = 1.0 / w[c]
            y[c] = y[c] * w[c]
        for m in range(1, nz):
            at, prev = m * LB, (m - 1) * LB
            for c in range(LB):
                tp = t[prev + c]
                wi = 1.0 / (w[at + c] - tp * tp * w[prev + c])
                w[at + c] = wi
                y[at + c] = (y[at + c] + tp * y[prev + c]) * wi
        for m in range(nz - 2, -1, -1):
            at, nxt = m * LB, (m + 1) * LB
            for c in range(LB):
                y[at + c] += t[at + c] * w[at + c] * y[nxt + c]
        for c in range(nb):
            for m in range(nz):
                u[i, j0 + 2 * c, m] = y[m * LB + c]
        j0 += 2 * LB


@njit(parallel=True)
def sweep_on_the_fly(tx, ty, tz, diag, b, u, first, chunks):
    """lines.line_gauss_seidel's one-pass wavefront with _plane_on_the_fly."""
    nx, nz = u.shape[0], u.shape[2]
    chunks = max(1, min(chunks, nx))
    second = 1 - first
    for k in prange(chunks):
        y = np.empty(nz * LB, dtype=u.dtype)
        w = np.empty(nz * LB, dtype=u.dtype)
        t = np.empty(nz * LB, dtype=u.dtype)
        lo, hi = k * nx // chunks, (k + 1) * nx // chunks
        for i in range(lo, hi):
            for s in range(2):
                plane, colour = (i, first) if s == 0 else (i - 1, second)
                if s == 0 or plane > lo:
                    _plane_on_the_fly(tx, ty, tz, diag, b, u, plane, colour, y, w, t)
    for k in prange(chunks):
        y = np.empty(nz * LB, dtype=u.dtype)
        w = np.empty(nz * LB, dtype=u.dtype)
        t = np.empty(nz * LB, dtype=u.dtype)
        lo, hi = k * nx // chunks, (k + 1) * nx // chunks
        for s in range(2):
            plane = lo if s == 0 else hi - 1
            if s == 0 or plane > lo:
                _plane_on_the_fly(tx, ty, tz, diag, b, u, plane, second, y, w, t)


def level(n: int, dtype):
    """Random couplings in [0.5, 2], zero on the last planes, diag = their sum + 0.1."""
    rng = np.random.default_rng(0)
    tx, ty, tz = (rng.uniform(0.5, 2.0, (n, n, n)).astype(dtype) for _ in range(3))
    tx[-1], ty[:, -1], tz[:, :, -1] = 0, 0, 0
    diag = tx + ty + tz + dtype(0.1)
    diag[1:] += tx[:-1]
    diag[:, 1:] += ty[:, :-1]
    diag[:, :, 1:] += tz[:, :, :-1]
    return tx, ty, tz, diag, rng.standard_normal((n, n, n)).astype(dtype)


def measure(n: int, dtype, repeats: int, threads: int) -> tuple:
    """One row: (n, faces, factor kept, factor before, pivot diff, sweep stored, sweep on the
    fly, sweep diff); seconds."""
    tx, ty, tz, diag, b = level(n, dtype)
    kept, before = (np.empty((n, n, n), np.float32) for _ in range(2))
    lines.line_factor(tz, diag, kept)
    factor_per_column(tz, diag, before)
    pivots_diff = float(np.abs(kept / before - 1.0).max())
    t_kept = best(lambda: lines.line_factor(tz, diag, kept), repeats)
    t_before = best(lambda: factor_per_column(tz, diag, before), repeats)
    u1, u2 = (np.zeros((n, n, n), np.float32) for _ in range(2))
    lines.line_gauss_seidel(tx, ty, tz, kept, b, u1, 0, 1, threads, False)
    sweep_on_the_fly(tx, ty, tz, diag, b, u2, 0, threads)
    sweep_diff = float(np.abs(u1 - u2).max() / np.abs(u1).max())
    t_stored = best(lambda: lines.line_gauss_seidel(tx, ty, tz, kept, b, u1, 0, 1, threads, False), repeats)
    t_fly = best(lambda: sweep_on_the_fly(tx, ty, tz, diag, b, u2, 0, threads), repeats)
    row = (n, np.dtype(dtype).name, t_kept, t_before, pivots_diff, t_stored, t_fly, sweep_diff)
    print(row, flush=True)
    return row


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[128, 256, 512])
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--results", default=str(HERE / "RESULTS_PIVOTS.md"))
    args = parser.parse_args(argv)
    threads = numba.get_num_threads()
    rows = [measure(n, dtype, args.repeats, threads) for n in args.sizes
            for dtype in (np.float32, np.float64)]
    rev = subprocess.run(["git", "-C", str(HERE), "rev-parse", "--short", "HEAD"], capture_output=True,
                         text=True).stdout.strip()
    command = "python benchmarks/pivots_bench.py " + " ".join(
        ["--sizes", *map(str, args.sizes), "--repeats", str(args.repeats)])
    load = open("/proc/loadavg").read().split()[:3]
    out = [
        "# z-line pivots: blocked factorisation, stored or computed in the sweep", "",
        f"Written by `{command}` on {datetime.now(timezone.utc):%Y-%m-%d %H:%M} UTC at revision {rev} "
        f"(+ working tree); {platform.processor() or platform.machine()}, {threads} numba threads, load "
        f"{' '.join(load)}; every number below comes from that run. Do not edit by hand: run the command again.", "",
        "Best of the repeats, milliseconds. *faces* = the level's float type (float32: the copy path and "
        "coarse levels; float64: the finest level on the lean path, where the pivots are refactored every "
        "cycle). Pivots are float32 in both.", "",
        "| cells | faces | factor, blocks (kept) | factor, one column at a time | ratio | pivots max rel. diff "
        "| sweep, stored pivots (kept) | sweep, pivots on the fly | ratio | sweep max rel. diff |",
        "|---|---|---:|---:|---:|---:|---:|---:|---:|---:|",
    ]
    for n, name, tk, tb, pd, ts, tf, sd in rows:
        out.append(f"| {n}^3 | {name} | {tk * 1e3:.1f} | {tb * 1e3:.1f} | {tk / tb:.2f} | {pd:.1e} "
                   f"| {ts * 1e3:.1f} | {tf * 1e3:.1f} | {tf / ts:.2f} | {sd:.1e} |")
    out += ["", "Reading: the blocked factorisation is kept (the pivots of both versions agree to "
            "rounding). Computing the pivots inside the sweep would save the pivot array but puts a "
            "division into the recurrence's dependency chain; it is kept out where the ratio column "
            "shows it slower. The lean path instead refactors its pivots once per cycle into a buffer "
            "it borrows (RESULTS_FINEST.md).", ""]
    Path(args.results).write_text("\n".join(out))
    print("\n".join(out))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
