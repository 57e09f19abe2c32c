"""The coarse operator's Galerkin product, accumulated cell by cell (kept) or through row
buffers that vectorise (a prototype): its time in the set-up and its first compile.

    python benchmarks/galerkin_bench.py [--sizes 128 256] [--cases inclusions "graded job"]
        [--repeats 5] [--compiles 3] [--results benchmarks/RESULTS_GALERKIN.md]

`multigrid.galerkin_scaled` builds each coarse level once per solve. It walks a fine row
along z and adds every cell into its aggregate as it goes, with branches for the cell's place
in its aggregate and for held cells, so the loop does not vectorise: at 256^3 it took about
2 work units of a solve's 55-65. The prototype below computes each fine row's contributions
into row buffers with 0/1 factors instead of branches (the loop vectorises) and then sums the
buffers pairwise into the aggregates.

For each job (``cycle_bench.problem_level``'s), on the solver's float32 copy of the finest
level with the aggregation gmg chooses for it, both kernels alternating, best of
``--repeats``: wall seconds over one float64 operator application (work units), and the
largest difference of their coarse arrays relative to each array's largest value. Then the
first compile of each for that signature (float32 level) in fresh processes, alternating,
``--compiles`` each: the time a first run after installation pays.

Writes benchmarks/RESULTS_GALERKIN.md.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
from numba import njit, prange

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))


@njit
def _row(tx, txm, ty, tym, tz, diag, free, hxm, hym, xfirst, xlast, yfirst, ylast, fx, fy, fz,
         zfirst, zlast, zhas, rows):
    """One fine row's contributions (t and diag along z; 0/1 factors for where its cells lie)."""
    for m in range(diag.shape[0]):
        xm = hxm * txm[m]
        ym = hym * tym[m]
        zm = zhas[m] * tz[max(m - 1, 0)]
        xp, yp, zp = tx[m], ty[m], tz[m]
        excess = diag[m] - (xm + xp + ym + yp + zm + zp)
        mx = (1.0 if xm == 0.0 else 0.0) + (1.0 if xp == 0.0 else 0.0)
        my = (1.0 if ym == 0.0 else 0.0) + (1.0 if yp == 0.0 else 0.0)
        mz = (1.0 if zm == 0.0 else 0.0) + (1.0 if zp == 0.0 else 0.0)
        missing = mx + my + mz
        share = (excess / max(missing, 1.0) * (mx * fx + my * fy + mz * fz)
                 if missing > 0.0 else excess * (fx + fy + fz) / 3.0)
        a = (share + fx * (xfirst * xm + xlast * xp) + fy * (yfirst * ym + ylast * yp)
             + fz * (zfirst[m] * zm + zlast[m] * zp))
        f = free[m]
        rows[0, m] = a if f else 0.0
        rows[1, m] = xlast * xp if f else 0.0
        rows[2, m] = ylast * yp if f else 0.0
        rows[3, m] = zlast[m] * zp if f else 0.0
        rows[4, m] = 1.0 if f else 0.0


@njit
def _aggregate(rows, sz, sums):
    """sums[:, K] += rows[:, m] over the cells m of aggregate K along z (sz = 1 or 2)."""
    nz = rows.shape[1]
    for q in range(rows.shape[0]):
        if sz == 2:
            for k in range(nz // 2):
                sums[q, k] += rows[q, 2 * k] + rows[q, 2 * k + 1]
            if nz % 2:
                sums[q, nz // 2] += rows[q, nz - 1]
        else:
            for m in range(nz):
                sums[q, m] += rows[q, m]


@njit(parallel=True)
def galerkin_rows(tx, ty, tz, diag, free, step, txc, tyc, tzc, diagc, freec):
    """``multigrid.galerkin_scaled``'s result through row buffers (steps of 1 or 2)."""
    nx, ny, nz = diag.shape
    sx, sy, sz = step[0], step[1], step[2]
    fx, fy, fz = 1.0 / sx, 1.0 / sy, 1.0 / sz
    ncx, ncy, ncz = diagc.shape
    zhas, zfirst, zlast = np.empty(nz), np.empty(nz), np.empty(nz)
    for m in range(nz):
        zhas[m] = 1.0 if m > 0 else 0.0
        zfirst[m] = 1.0 if m % sz == 0 else 0.0
        zlast[m] = 1.0 if m % sz == sz - 1 or m == nz - 1 else 0.0
    for I in prange(ncx):
        sums = np.zeros((5, ncy, ncz))
        rows = np.empty((5, nz))
        i0 = I * sx
        i1 = min(i0 + sx, nx)
        for i in range(i0, i1):
            im = max(i - 1, 0)
            hxm = 1.0 if i > 0 else 0.0
            xfirst = 1.0 if i == i0 else 0.0
            xlast = 1.0 if i + 1 == i1 else 0.0
            for j in range(ny):
                J = j // sy
                jm = max(j - 1, 0)
                _row(tx[i, j], tx[im, j], ty[i, j], ty[i, jm], tz[i, j], diag[i, j], free[i, j],
                     hxm, 1.0 if j > 0 else 0.0, xfirst, xlast, 1.0 if j == J * sy else 0.0,
                     1.0 if j + 1 == min(J * sy + sy, ny) else 0.0, fx, fy, fz, zfirst, zlast,
                     zhas, rows)
                _aggregate(rows, sz, sums[:, J])
        for J in range(ncy):
            for K in range(ncz):
                n = sums[4, J, K]
                freec[I, J, K] = n > 0
                diagc[I, J, K] = sums[0, J, K] if n > 0 else 1.0
                txc[I, J, K] = fx * sums[1, J, K]
                tyc[I, J, K] = fy * sums[2, J, K]
                tzc[I, J, K] = fz * sums[3, J, K]


def _signature_arrays():
    f32 = np.float32
    level = [np.ones((4, 4, 4), f32) for _ in range(4)] + [np.ones((4, 4, 4), np.bool_)]
    coarse = [np.ones((2, 2, 2), f32) for _ in range(4)] + [np.ones((2, 2, 2), np.bool_)]
    return (*level, np.array([2, 2, 2], dtype=np.int64), *coarse)


def compile_seconds(which: str) -> float:
    """One compile of ``which`` ("kept", uncached, or "rows") for a float32 level, in this
    (fresh) process: numba's own start included, as on a first run."""
    import numba

    if which == "kept":
        import wall_bench

        kernel = wall_bench.module_at("HEAD", "sevenfold.kernels.multigrid", edit=lambda s: s.replace(
            "cache=True", "cache=False")).galerkin_scaled
    else:
        kernel = galerkin_rows
    signature = tuple(numba.typeof(a) for a in _signature_arrays())
    t = time.perf_counter()
    kernel.compile(signature)
    return time.perf_counter() - t


def compare(n: int, case: str, repeats: int) -> dict:
    import cycle_bench as cb
    import restrict_bench as rb
    import timing
    from sevenfold.kernels import multigrid
    from sevenfold.solvers.levels import coarsening_step, pairs

    fine, _ = cb.problem_level(n, case)
    apply = rb.apply_seconds(fine)
    level = fine.astype(np.float32)
    step = coarsening_step(level, True)
    coarse = tuple(-(-a // s) for a, s in zip(level.shape, step))
    outs = {k: [np.empty(coarse, np.float32) for _ in range(4)] + [np.empty(coarse, np.bool_)]
            for k in ("kept", "rows")}
    args = (level.tx, level.ty, level.tz, level.diag, level.free, step)
    agg = pairs(level.shape, step)
    calls = {"kept": lambda: multigrid.galerkin_scaled(*args[:-1], agg, *outs["kept"]),
             "rows": lambda: galerkin_rows(*args, *outs["rows"])}
    best = {k: np.inf for k in calls}
    for _ in range(repeats):
        for k, call in calls.items():
            best[k] = min(best[k], timing.best(call, 3, time.perf_counter))
    difference = max(float(np.abs(a.astype(float) - b).max() / max(float(np.abs(a).max()), 1e-300))
                     for a, b in zip(outs["kept"][:4], outs["rows"][:4]))
    return {"case": case, "n": n, "step": step, "apply": apply, **best, "difference": difference,
            "free equal": bool(np.array_equal(outs["kept"][4], outs["rows"][4]))}


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--sizes", type=int, nargs="+", default=[128, 256])
    p.add_argument("--cases", nargs="+", default=["inclusions", "graded job"])
    p.add_argument("--repeats", type=int, default=5)
    p.add_argument("--compiles", type=int, default=3)
    p.add_argument("--results", type=Path, default=HERE / "RESULTS_GALERKIN.md")
    p.add_argument("--compile-one", choices=["kept", "rows"], help=argparse.SUPPRESS)
    args = p.parse_args(argv)
    if args.compile_one:
        print(compile_seconds(args.compile_one))
        return 0
    import run as engine

    lines, info = engine.report_head("galerkin_bench.py", argv,
                                     "The Galerkin product through row buffers")
    lines += engine.opening(
        __doc__, "*kept* = `multigrid.galerkin_scaled` as committed, *rows* = the prototype in this script; "
        "*WU* = wall seconds over one two-thread float64 operator application of the job's grid (*apply*).",
        ["job", "cells", "step", "apply ms", "kept WU", "rows WU", "rows / kept", "largest difference",
         "free cells equal"])
    for n in args.sizes:
        for case in args.cases:
            r = compare(n, case, args.repeats)
            lines.append(
                f"| {case} | {n}^3 | {'x'.join(map(str, r['step']))} | {r['apply'] * 1e3:.2f} | "
                f"{r['kept'] / r['apply']:.2f} | {r['rows'] / r['apply']:.2f} | "
                f"{r['rows'] / r['kept']:.2f} | {r['difference']:.1e} | "
                f"{'yes' if r['free equal'] else 'NO'} |")
            print(lines[-1], flush=True)
    seconds: dict[str, list[float]] = {"kept": [], "rows": []}
    for _ in range(args.compiles):
        for which in seconds:
            out = subprocess.run([sys.executable, __file__, "--compile-one", which], check=True,
                                 capture_output=True, text=True).stdout
            seconds[which].append(float(out.split()[-1]))
    lines += ["", "First compile, one float32 signature, fresh processes alternating (numba's own "
              "start included), seconds:", "", "| kernel | compiles | min | max |", "|---|---|---|---|"]
    lines += [f"| {k} | {', '.join(f'{s:.2f}' for s in v)} | {min(v):.2f} | {max(v):.2f} |"
              for k, v in seconds.items()]
    print("\n".join(lines[-4:]), flush=True)
    engine.write_report(args.results, lines, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
