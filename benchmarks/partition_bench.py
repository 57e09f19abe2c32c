"""Contact planes of both parities along x: aggregates of one or two cells (a prototype).

    python benchmarks/partition_bench.py [--sizes 64 128] [--rounds 2]

gmg keeps contact planes between aggregates by shifting the pairs, one shift per level and
axis (`solvers.levels.aligned_pairs`). Planes of both parities along z keep z whole (the z-lines
solve along it), but along x or y only the majority's parity is kept apart, and the job pays in
iterations (three contacts at 10, 17 and 23 of 32 cells: 18 iterations across x, 5 across z).
Here every coarsened axis is cut into pairs with a cell left alone wherever the next pair would
hold a plane (:func:`partition`), so every plane lies between aggregates on every level. The
prototype's transfer and Galerkin kernels take a fine-to-coarse map per axis (plain loops, the
restriction serial); smoothing, the coarsest solve and CG are the product's, as are the
Galerkin product's scales (2 / (the two aggregates' sizes summed) per coupling, 1 / size per
boundary share).

For each job, in one process, the best of ``--rounds`` warm gmg set-up + solves (two threads,
wall seconds) of: *kept* (the product, its shifted pairs), *kept, no planes* (the product not
told of the contacts: pairs (0, 1), ... everywhere), *prototype, kept pairs* (this file's
kernels on those same pairs: it must take *kept, no planes*' iterations, the check of the
kernels), *singletons* (this file's partition). The *z* row is the same job turned so its
contacts lie across z, the product's best case.

Writes benchmarks/RESULTS_PARTITION.md.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
from numba import njit, prange

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import run as engine  # noqa: E402

from sevenfold.kernels import multigrid, stencil  # noqa: E402
from sevenfold.solvers import gmg  # noqa: E402
from sevenfold.solvers.coarsest import CoarsestSolver  # noqa: E402
from sevenfold.solvers.levels import Level, coarsening_step  # noqa: E402

RTOL, MAX_ITERATIONS = 1e-8, 200


def partition(n: int, planes, singletons: bool) -> tuple[np.ndarray, tuple[int, ...]]:
    """Fine-to-coarse map along one axis and the planes' coarse positions: pairs (0, 1), ...,
    with, when ``singletons``, a cell alone wherever the pair would hold a plane (else the
    product's pairs: ``planes`` then dropped where they fall inside one)."""
    cut = set(planes)
    agg = np.empty(n, dtype=np.int64)
    i = coarse = 0
    while i < n:
        agg[i] = coarse
        if i + 1 < n and not (singletons and i + 1 in cut):
            agg[i + 1] = coarse
            i += 1
        i += 1
        coarse += 1
    return agg, tuple(sorted({int(agg[b]) for b in planes if agg[b] != agg[b - 1]}))


def scales(agg: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per aggregate: 1 / its size, and its coupling's scale to the next, 2 / (sizes summed)."""
    size = np.bincount(agg).astype(float)
    return 1.0 / size, np.append(2.0 / (size[:-1] + size[1:]), 1.0 / size[-1])


@njit(parallel=True)  # (no cache: a cached kernel re-imports this module)
def galerkin_mapped(tx, ty, tz, diag, free, ax, ay, az, inv_x, inv_y, inv_z, gx, gy, gz,
                    xs, txc, tyc, tzc, diagc, freec):
    """multigrid.galerkin_scaled over aggregates given by a map per axis (``xs``: each coarse
    x-plane's first fine plane, and the end)."""
    nx, ny, nz = diag.shape
    ncx, ncy, ncz = diagc.shape
    for I in prange(ncx):
        d = np.zeros((ncy, ncz))
        nfree = np.zeros((ncy, ncz), dtype=np.int64)
        for J in range(ncy):
            for K in range(ncz):
                txc[I, J, K] = tyc[I, J, K] = tzc[I, J, K] = 0.0
        gxm = gx[I - 1] if I > 0 else inv_x[I]
        for i in range(xs[I], xs[I + 1]):
            for j in range(ny):
                J = ay[j]
                gym = gy[J - 1] if J > 0 else inv_y[J]
                for m in range(nz):
                    if not free[i, j, m]:
                        continue
                    K = az[m]
                    gzm = gz[K - 1] if K > 0 else inv_z[K]
                    nfree[J, K] += 1
                    txm = tx[i - 1, j, m] if i > 0 else 0.0
                    tym = ty[i, j - 1, m] if j > 0 else 0.0
                    tzm = tz[i, j, m - 1] if m > 0 else 0.0
                    txp, typ, tzp = tx[i, j, m], ty[i, j, m], tz[i, j, m]
                    excess = diag[i, j, m] - (txm + txp + tym + typ + tzm + tzp)
                    mx = (1 if txm == 0.0 else 0) + (1 if txp == 0.0 else 0)
                    my = (1 if tym == 0.0 else 0) + (1 if typ == 0.0 else 0)
                    mz = (1 if tzm == 0.0 else 0) + (1 if tzp == 0.0 else 0)
                    if mx + my + mz > 0:
                        a = excess / (mx + my + mz) * (mx * inv_x[I] + my * inv_y[J] + mz * inv_z[K])
                    else:
                        a = excess * (inv_x[I] + inv_y[J] + inv_z[K]) / 3.0
                    if i == 0 or ax[i - 1] != I:
                        a += gxm * txm
                    if i + 1 == nx or ax[i + 1] != I:
                        a += gx[I] * txp
                        txc[I, J, K] += gx[I] * txp
                    if j == 0 or ay[j - 1] != J:
                        a += gym * tym
                    if j + 1 == ny or ay[j + 1] != J:
                        a += gy[J] * typ
                        tyc[I, J, K] += gy[J] * typ
                    if m == 0 or az[m - 1] != K:
                        a += gzm * tzm
                    if m + 1 == nz or az[m + 1] != K:
                        a += gz[K] * tzp
                        tzc[I, J, K] += gz[K] * tzp
                    d[J, K] += a
        for J in range(ncy):
            for K in range(ncz):
                freec[I, J, K] = nfree[J, K] > 0
                diagc[I, J, K] = d[J, K] if nfree[J, K] > 0 else 1.0


@njit(parallel=True)
def restrict_mapped(r, ax, ay, az, xs, rc):
    """rc = P^T r for the aggregates of the maps (each coarse x-plane one thread's)."""
    ny, nz = r.shape[1], r.shape[2]
    for I in prange(rc.shape[0]):
        rc[I] = 0.0
        for i in range(xs[I], xs[I + 1]):
            for j in range(ny):
                J = ay[j]
                for m in range(nz):
                    rc[I, J, az[m]] += r[i, j, m]


@njit(parallel=True)
def prolong_mapped(ec, free, ax, ay, az, u):
    """u += P ec on the free cells."""
    nx, ny, nz = u.shape
    for i in prange(nx):
        for j in range(ny):
            for m in range(nz):
                if free[i, j, m]:
                    u[i, j, m] += ec[ax[i], ay[j], az[m]]


class PartitionHierarchy(gmg.Hierarchy):
    """The product's W(2,2) z-line cycle in float32 on aggregates of one or two cells."""

    def __init__(self, fine: Level, planes, singletons: bool, out: np.ndarray | None = None):
        self.dtype = np.dtype(np.float32)
        self.transfer, self.smoother, self.overcorrection = "scaled", "line", 1.0
        self.gamma, self.sweeps = 2, (2, 2)
        self._whole_z: list[int] = []
        top = fine.astype(self.dtype)
        self.levels = [top]
        nominal = top.shape
        while int(np.prod(nominal)) > gmg.COARSEST_CELLS:
            lv = self.levels[-1]
            lv.lines = True
            step = coarsening_step(lv, True)
            if not (step > 1).any():
                break
            maps, coarse_planes = [], []
            for a in range(3):
                if step[a] == 1:
                    maps.append(np.arange(lv.shape[a], dtype=np.int64))
                    coarse_planes.append(tuple(planes[a]))
                else:
                    agg, at = partition(lv.shape[a], planes[a], singletons)
                    maps.append(agg)
                    coarse_planes.append(at)
            planes = coarse_planes
            nominal = tuple(-(-n // s) for n, s in zip(nominal, step))
            cshape = tuple(int(m[-1]) + 1 for m in maps)
            (inv_x, gx), (inv_y, gy), (inv_z, gz) = (scales(m) for m in maps)
            xs = np.searchsorted(maps[0], np.arange(cshape[0] + 1)).astype(np.int64)
            arrays = [np.empty(cshape, dtype=self.dtype) for _ in range(4)]
            freec = np.empty(cshape, dtype=np.bool_)
            galerkin_mapped(lv.tx, lv.ty, lv.tz, lv.diag, lv.free, *maps, inv_x, inv_y, inv_z,
                            gx, gy, gz, xs, *arrays, freec)
            lv.maps, lv.xs = maps, xs
            lv.r = np.empty(lv.shape, dtype=self.dtype)
            coarse = Level(*arrays, freec, np.ones(3, dtype=np.int64))
            coarse.e, coarse.b = (np.empty(cshape, dtype=self.dtype) for _ in range(2))
            self.levels.append(coarse)
        self._out = out.reshape(fine.shape) if out is not None else np.empty(fine.shape)
        halves = self._out.reshape(-1).view(np.float32)
        n = top.diag.size
        top.e = halves[n:].reshape(top.shape)
        top.b = halves[:n].reshape(top.shape)
        self._refactor = False
        for lv in self.levels[:-1]:
            lv.inv_w = np.empty(lv.shape, dtype=self.dtype)
            multigrid.line_factor(lv.tz, lv.diag, lv.inv_w)
        self.coarsest = CoarsestSolver(self.levels[-1])

    def shift_note(self) -> str:
        return ""

    def cycle(self, level: int, b: np.ndarray, u: np.ndarray) -> None:
        lv = self.levels[level]
        if level == len(self.levels) - 1:
            self.coarsest.solve(b, u)
            return
        coarse = self.levels[level + 1]
        self._smooth(lv, b, u, 0)
        stencil.residual(lv.tx, lv.ty, lv.tz, lv.diag, b, u, lv.r)
        restrict_mapped(lv.r, *lv.maps, lv.xs, coarse.b)
        coarse.e[...] = 0.0
        for _ in range(self.gamma if level + 2 < len(self.levels) else 1):
            self.cycle(level + 1, coarse.b, coarse.e)
        prolong_mapped(coarse.e, lv.free, *lv.maps, u)
        self._smooth(lv, b, u, 1)


def contact_job(n: int, axis: str):
    """k = 1, a unit source, three contacts across ``axis`` at boundaries round(0.3 n),
    round(0.5 n) (+1 where needed for both parities), round(0.72 n), each 1000 times a cell's
    own resistance at n = 64 ... see the table; u = 1 at x_min, 0 at x_max, exchange at z_max."""
    from sevenfold.problem import build_problem
    from sevenfold.spec import parse_job

    at = [round(f * n) for f in (0.3, 0.5, 0.72)]
    at[1] += at[0] % 2 == at[1] % 2
    table = {"name": f"partition-{axis}-{n}", "grid": {"cells": [n, n, n], "size": [1.0, 1.0, 1.0]},
             "material": {"value": 1.0}, "source": {"value": 1.0},
             "contact": [{"axis": axis, "at": b / n, "resistance": 15.6} for b in at],
             "boundary": {"x_min": {"type": "dirichlet", "value": 1.0},
                          "x_max": {"type": "dirichlet", "value": 0.0},
                          "z_max": {"type": "robin", "coefficient": 10.0, "reference": 0.0}},
             "solver": {"method": "gmg"}}
    return build_problem(parse_job(table, "partition_bench")), at


def solve(problem, design: str):
    """Warm set-up + solve with the product ("kept") or the prototype; (result, seconds)."""
    fine, b = gmg.fine_level(problem)
    planes = gmg.contact_planes(problem) if design != "kept, no planes" else ((), (), ())
    kept = gmg.Hierarchy
    if not design.startswith("kept"):
        singletons = design == "singletons"
        gmg.Hierarchy = lambda fine, out=None, **_: PartitionHierarchy(fine, planes, singletons, out)
    try:
        t = time.perf_counter()
        result, hierarchy = gmg.solve_levels(fine, b, RTOL, MAX_ITERATIONS, planes=planes)
        return result, time.perf_counter() - t, hierarchy
    finally:
        gmg.Hierarchy = kept


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--sizes", type=int, nargs="+", default=[64, 128])
    p.add_argument("--rounds", type=int, default=2)
    p.add_argument("--results", type=Path, default=HERE / "RESULTS_PARTITION.md")
    args = p.parse_args(argv)
    lines, info = engine.report_head("partition_bench.py", argv,
                                     "Contact planes of both parities: aggregates of one or two cells")
    lines += [__doc__.split("\n\n", 2)[2].split("\n\nWrites")[0], "",
              "| contacts across | cells | boundaries | design | iterations | relative residual | "
              "set-up + solve s | / kept | levels |", "|" + "---|" * 9]
    designs = ("kept", "kept, no planes", "prototype, kept pairs", "singletons")
    for n in args.sizes:
        for axis, todo in (("x", designs), ("z", ("kept",))):
            problem, at = contact_job(n, axis)
            best: dict[str, tuple] = {}
            for _ in range(args.rounds + 1):  # (the first round compiles)
                for design in todo:
                    result, seconds, h = solve(problem, design)
                    if design not in best or seconds < best[design][1]:
                        best[design] = (result, seconds, h)
            for design in todo:
                result, seconds, h = best[design]
                levels = " > ".join("x".join(map(str, s)) for s in h.shapes) + h.shift_note()
                lines.append(f"| {axis} | {n}^3 | {', '.join(map(str, at))} | {design} | "
                             f"{result.iterations} | {result.final_relative_residual:.2e} | "
                             f"{seconds:.3f} | {seconds / best['kept'][1]:.2f} | {levels} |")
                print(lines[-1], flush=True)
    engine.write_report(args.results, lines, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
