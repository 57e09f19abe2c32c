"""Interpolation that follows the operator, with Galerkin coarse operators: a prototype study.

    python benchmarks/odi_bench.py [--sizes 64 128 256] [--cases column] [--reference layered:128]

Issue 10's 1000:1 column takes 7 CG iterations at 128^3 and 9 at 256^3 with the kept cycle
(W(2,2) z-line Gauss-Seidel over piecewise-constant pairs, scaled Galerkin 7-point coarse
operators), against 5 on layered media. Piecewise-constant aggregation ignores the operator
when it interpolates; the designs here interpolate through the operator and take the coarse
operators as Galerkin products P^T A P (wider stencils: 27-point for vertex-type coarsening;
33-point here for cell pairs, see below):

* *kept*: `sevenfold.solvers.gmg` as `solve_levels` runs it (finest level on a float32 copy).
* *pyamg RS*: classical algebraic multigrid, Ruge and Stüben 1987 (pyamg's
  `ruge_stuben_solver` defaults: classical strength theta 0.25, RS splitting, classical
  interpolation), V(1,1) symmetric Gauss-Seidel (one forward and one backward sweep each
  side); also as a W-cycle, for a cycle as strong as the kept W.
* *pyamg SA*: smoothed aggregation, Vaněk, Mandel and Brezina 1996 (pyamg's
  `smoothed_aggregation_solver` defaults: symmetric strength, standard aggregation, tentative
  prolongator smoothed once by Jacobi with omega 4/3 over the estimated spectral radius of
  D^-1 A), V(1,1) symmetric Gauss-Seidel; the same solver as benchmarks/baseline.py.
* *pairs SA* (ours): the kept pairs (2 cells per axis, every axis, down to at most
  gmg.COARSEST_CELLS cells, sparse LU there) with the prolongator smoothed once by damped
  Jacobi, P = (I - omega D^-1 A) P0, omega = 2/3 (= 4 / (3 rho) with Gershgorin's bound rho <= 2
  for D^-1 A of a diagonally dominant M-matrix; the smoothing rule as in smoothed aggregation,
  from memory), A_c = P^T A P in scipy CSR. A smoothed pair's prolongator reaches one cell
  past its pair along each axis (4 cells wide), so A_c couples aggregates up to two apart
  along an axis: 27 + 6 = 33 points, the distance-two couplings along z inside each z-line
  (pentadiagonal lines), and each further level widens again (139 points on average on the
  second coarse level at 64^3, in a trial run). z-line Gauss-Seidel on every level: zebra
  (two colours, as the kept sweep) on the 7-point finest level, elsewhere lines coloured by
  (i, j) modulo the stencil's reach + 1 (nine colours on the first coarse level) so that no
  two lines of one colour couple, colours in order before and in reverse after the coarse correction (a
  symmetric cycle).
* *even cells, collapsed P* (ours): vertex-type coarsening of the cell grid (the coarse cells
  are the fine cells with even i, j, k, every axis halved, down to at most
  gmg.COARSEST_CELLS cells), operator-dependent interpolation by collapsed stencils as in
  Dendy's black-box multigrid (1982; from memory, see :func:`collapsed_interpolation`),
  A_c = P^T A P: 27-point on every coarse level. Same scipy z-line smoother (zebra on the
  7-point finest level, four colours on the 27-point levels, tridiagonal lines) and cycles as
  the pairs designs.
* *pairs P0, scipy (check)*: the same scipy machinery with the kept transfer and coarse
  operator (P0, A_c = P0^T A P0 / 2: the kept per-axis scaling when every axis is paired),
  W(2,2): it should need about the kept iterations (the check that the scipy cycle is a fair
  stand-in for ours: the same zebra sweeps, in float64 instead of float32).

Every design preconditions the same CG (`sevenfold.solvers.cg.pcg` on the kept float64
operator `gmg.FineOperator`) on the same matrix and right-hand side, to rtol 1e-8 of the true
residual, which is checked again here from the returned x with the CSR matrix. One numba
thread; CPU seconds of this process (the machine is shared). *WU per iteration* = solve CPU
seconds / iterations / one float64 application of the finest operator in our kernel
(`cycle_bench.unit_seconds`); the scipy and pyamg cycles are not our kernels, so their WU are
upper bounds of what the design would cost in ours: the evidence is iterations and complexity.

At the largest size a design runs only when its time at the size before, times 9, is under
LIMIT_SECONDS and its levels' bytes, times 8 and a margin of 3, fit in the memory available.

Writes benchmarks/RESULTS_ODI.md (and the rows as RESULTS_ODI.json).
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import json  # noqa: E402
import sys  # noqa: E402
from pathlib import Path  # noqa: E402
from typing import Callable  # noqa: E402

import numba  # noqa: E402
import numpy as np  # noqa: E402
import pyamg  # noqa: E402
import scipy.linalg as sl  # noqa: E402
import scipy.sparse as sp  # noqa: E402
import scipy.sparse.linalg as sla  # noqa: E402

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import cycle_bench as cb  # noqa: E402
import wall_bench  # noqa: E402

from sevenfold.errors import SolverError  # noqa: E402
from sevenfold.solvers import gmg  # noqa: E402
from sevenfold.solvers.cg import pcg  # noqa: E402

LIMIT_SECONDS = 300.0
OMEGA = 2.0 / 3.0
SWEEPS = 2


# ---------------------------------------------------------------- our structured prototype
def pairs(shape: tuple[int, int, int]) -> tuple[sp.csr_matrix, tuple[int, int, int]]:
    """P0: each cell to its aggregate of 2 x 2 x 2 cells (C order, z fastest)."""
    cshape = tuple((n + 1) // 2 for n in shape)
    i, j, k = np.meshgrid(*(np.arange(n) // 2 for n in shape), indexing="ij")
    coarse = ((i * cshape[1] + j) * cshape[2] + k).ravel()
    n = coarse.size
    return sp.csr_matrix((np.ones(n), (np.arange(n), coarse)), shape=(n, int(np.prod(cshape)))), cshape


class LineSmoother:
    """z-line Gauss-Seidel on a CSR matrix of a structured grid (z fastest): lines in two
    colours (i + j even or odd, as the kept sweep) where the stencil has no diagonal xy
    couplings (7-point), else in (rx + 1) (ry + 1) colours (i mod rx + 1, j mod ry + 1; rx, ry
    the stencil's reach along x and y, read from the matrix), so that no two lines of one
    colour couple; each colour's
    lines are solved together, their block banded (the bandwidth read from it: the stencil's
    reach along z), Cholesky-factorised once."""

    def __init__(self, A: sp.csr_matrix, shape: tuple[int, int, int]) -> None:
        rows_of = np.repeat(np.arange(A.shape[0]), np.diff(A.indptr))
        (ri, rj, _), (ci, cj, _) = (np.unravel_index(v, shape) for v in (rows_of, A.indices))
        mx, my = int(np.abs(ri - ci).max()) + 1, int(np.abs(rj - cj).max()) + 1
        i, j = np.meshgrid(np.arange(shape[0]), np.arange(shape[1]), indexing="ij")
        if mx == my == 2 and not ((ri != ci) & (rj != cj)).any():  # no diagonal xy couplings
            colour, colours = (i + j) % 2, 2  # zebra, as the kept sweep
        else:
            colour, colours = my * (i % mx) + j % my, mx * my
        colour = np.repeat(colour.ravel(), shape[2])
        self.parts = []
        for c in range(colours):
            idx = np.flatnonzero(colour == c)
            if idx.size == 0:
                continue
            rows = A[idx]
            block = rows[:, idx].tocoo()
            lines = idx // shape[2]
            if (lines[block.row] != lines[block.col]).any():
                raise ValueError("lines of one colour are coupled: more colours needed")
            width = int(np.abs(block.row - block.col).max())
            bands = np.zeros((width + 1, idx.size))
            block = block.tocsr()
            for d in range(width + 1):
                bands[d, : idx.size - d] = block.diagonal(-d)
            self.parts.append((idx, rows, sl.cholesky_banded(bands, lower=True)))
        self.colours = len(self.parts)

    def sweep(self, b: np.ndarray, x: np.ndarray, order: range) -> None:
        for c in order:
            idx, rows, factor = self.parts[c]
            x[idx] += sl.cho_solve_banded((factor, True), b[idx] - rows @ x)

    def nbytes(self) -> int:
        return sum(csr_bytes(rows) + idx.nbytes for idx, rows, _ in self.parts)


def csr_bytes(A: sp.spmatrix) -> int:
    A = A.tocsr()
    return A.data.nbytes + A.indices.nbytes + A.indptr.nbytes


def collapsed_interpolation(A: sp.csr_matrix, shape: tuple[int, int, int]
                            ) -> tuple[sp.csr_matrix, tuple[int, int, int]]:
    """Operator-dependent interpolation onto the cells with even (i, j, k), in the manner of
    Dendy's black-box multigrid (1982; from memory, not its exact formulas): a cell with
    odd indices along the axes S is interpolated from its neighbours along S only, with the
    stencil collapsed onto S (each coupling moved to the neighbour its offset projects to on S;
    offsets with no part along S join the centre, boundary excess included), in the order of
    |S| = 1, 2, 3, each from the rows already built. A coarse cell's interpolation then spans
    its 3 x 3 x 3 fine neighbourhood, so P^T A P of a 7- or 27-point A is 27-point."""
    cshape = tuple((n + 1) // 2 for n in shape)
    rows = np.repeat(np.arange(A.shape[0]), np.diff(A.indptr))
    r = np.array(np.unravel_index(rows, shape))
    c = np.array(np.unravel_index(A.indices, shape))
    odd = r % 2
    target = np.ravel_multi_index(r + (c - r) * odd, shape)
    level = odd.sum(axis=0)  # each row's count of odd indices (repeated per entry)
    centre = np.bincount(rows, weights=np.where(target == rows, A.data, 0.0), minlength=A.shape[0])
    n = A.shape[0]
    cells = np.array(np.unravel_index(np.arange(n), shape))
    coarse = (cells % 2 == 0).all(axis=0)
    cidx = np.ravel_multi_index(cells[:, coarse] // 2, cshape)
    P = sp.csr_matrix((np.ones(cidx.size), (np.flatnonzero(coarse), cidx)), shape=(n, cidx.size))
    for k in (1, 2, 3):
        keep = (level == k) & (target != rows)
        W = sp.csr_matrix((-A.data[keep] / centre[rows[keep]], (rows[keep], target[keep])),
                          shape=(n, n))
        P = (P + W @ P).tocsr()
    return P, cshape


class PairsHierarchy:
    """Levels halved in every axis down to gmg.COARSEST_CELLS cells. ``smoothed``: True,
    pairs with P = (I - omega D^-1 A) P0 and A_c = P^T A P; False, P0 and A_c = P0^T A P0 / 2
    (the kept scaled operator); "collapsed", :func:`collapsed_interpolation` and P^T A P."""

    def __init__(self, A: sp.csr_matrix, shape: tuple[int, int, int], smoothed: bool | str,
                 cycle: str) -> None:
        self.gamma = 2 if cycle == "W" else 1
        self.A, self.P, self.smoothers, self.shapes = [A], [], [], [shape]
        while int(np.prod(shape)) > gmg.COARSEST_CELLS:
            A = self.A[-1]
            if smoothed == "collapsed":
                P, shape = collapsed_interpolation(A, shape)
                Ac = (P.T @ (A @ P)).tocsr()
            elif smoothed:
                P0, shape = pairs(shape)
                P = (P0 - OMEGA * sp.diags(1.0 / A.diagonal()) @ (A @ P0)).tocsr()
                Ac = (P.T @ (A @ P)).tocsr()
            else:
                P0, shape = pairs(shape)
                P, Ac = P0, (0.5 * (P0.T @ A @ P0)).tocsr()
            Ac = (0.5 * (Ac + Ac.T)).tocsr()  # symmetric to rounding
            Ac.eliminate_zeros()
            self.smoothers.append(LineSmoother(A, self.shapes[-1]))
            self.P.append(P)
            self.A.append(Ac)
            self.shapes.append(shape)
        self.coarsest = sla.splu(self.A[-1].tocsc())

    def cycle(self, level: int, b: np.ndarray, x: np.ndarray) -> None:
        if level == len(self.A) - 1:
            x[...] = self.coarsest.solve(b)
            return
        smoother = self.smoothers[level]
        for _ in range(SWEEPS):
            smoother.sweep(b, x, range(smoother.colours))
        P = self.P[level]
        rc = P.T @ (b - self.A[level] @ x)
        ec = np.zeros(rc.size)
        for _ in range(self.gamma if level + 2 < len(self.A) else 1):
            self.cycle(level + 1, rc, ec)
        x += P @ ec
        for _ in range(SWEEPS):
            smoother.sweep(b, x, range(smoother.colours - 1, -1, -1))

    def __call__(self, r: np.ndarray) -> np.ndarray:
        x = np.zeros(r.size)
        self.cycle(0, r, x)
        return x

    def nnz(self) -> list[int]:
        return [A.nnz for A in self.A]

    def nbytes(self) -> int:
        return (sum(csr_bytes(A) for A in self.A[1:]) + sum(csr_bytes(P) for P in self.P)
                + sum(s.nbytes() for s in self.smoothers))


# ---------------------------------------------------------------- the designs
def kept_nnz(shape: tuple[int, ...]) -> int:
    """Stored couplings of a 7-point level (to_csr's count): cells + 2 per interior face."""
    n = int(np.prod(shape))
    return n + 2 * sum(n // m * (m - 1) for m in shape)


def visits(levels: int, gamma: int) -> list[int]:
    """How often each level is visited per cycle (the coarsest's parent calls it once)."""
    v = [1]
    for level in range(levels - 1):
        v.append(v[-1] * (gamma if level + 2 < levels else 1))
    return v


def setup_design(design: str, fine, A: sp.csr_matrix) -> tuple[Callable, dict]:
    """The preconditioner and its hierarchy's description (nnz and cells per level, visits)."""
    if design == "kept":
        h = gmg.Hierarchy(fine, out=None, finest="copy",
                          **{k: v for k, v in gmg.DEFAULTS.items() if k != "start"})
        cells = [int(np.prod(s)) for s in h.shapes]
        return h, dict(nnz=[kept_nnz(s) for s in h.shapes], cells=cells,
                       visits=visits(len(cells), h.gamma),
                       nbytes=sum(a.nbytes for lv in h.levels for a in (lv.tx, lv.ty, lv.tz, lv.diag)),
                       levels=" > ".join("x".join(map(str, s)) for s in h.shapes))
    if design.startswith("pyamg"):
        ml = (pyamg.ruge_stuben_solver(A) if "RS" in design
              else pyamg.smoothed_aggregation_solver(A))
        gamma = 2 if "W(" in design else 1
        M = ml.aspreconditioner(cycle="W" if gamma == 2 else "V")
        mats = [lv.A for lv in ml.levels]
        extra = [getattr(lv, k) for lv in ml.levels[:-1] for k in ("P", "R") if hasattr(lv, k)]
        return M.matvec, dict(nnz=[m.nnz for m in mats], cells=[m.shape[0] for m in mats],
                              visits=visits(len(mats), gamma),  # as pyamg's cycle
                              nbytes=sum(csr_bytes(m) for m in mats[1:] + extra),
                              levels=" > ".join(str(m.shape[0]) for m in mats))
    smoothed, cycle = DESIGNS[design]
    h = PairsHierarchy(A, fine.shape, smoothed, cycle)
    return h, dict(nnz=h.nnz(), cells=[int(np.prod(s)) for s in h.shapes],
                   visits=visits(len(h.A), h.gamma), nbytes=h.nbytes(),
                   levels=" > ".join("x".join(map(str, s)) for s in h.shapes))


DESIGNS: dict[str, tuple[bool | str, str] | None] = {
    "kept": None,
    "pyamg RS, V(1,1) sym. GS": None,
    "pyamg RS, W(1,1) sym. GS": None,
    "pyamg SA, V(1,1) sym. GS": None,
    "pairs P0, scipy W(2,2) (check)": (False, "W"),
    "pairs SA, V(2,2) z-line": (True, "V"),
    "pairs SA, W(2,2) z-line": (True, "W"),
    "even cells, collapsed P, V(2,2) z-line": ("collapsed", "V"),
    "even cells, collapsed P, W(2,2) z-line": ("collapsed", "W"),
}


def run_design(design: str, fine, b: np.ndarray, A: sp.csr_matrix, unit: float) -> dict:
    t0 = cb.CLOCK()
    precondition, info = setup_design(design, fine, A)
    t1 = cb.CLOCK()
    try:
        result = pcg(gmg.FineOperator(fine), b, precondition, cb.RTOL, cb.MAX_ITERATIONS, method=design)
        x, iterations, converged = result.x, result.iterations, result.converged
    except SolverError as error:
        partial = getattr(error, "partial", None)
        x = partial.x if partial is not None else np.zeros_like(b)
        iterations, converged = len(error.history) - 1, False
    t2 = cb.CLOCK()
    true = float(np.linalg.norm(b - A @ x) / np.linalg.norm(b))
    nnz, cells, v = info["nnz"], info["cells"], info["visits"]
    return dict(design=design, iterations=iterations, converged=converged and true <= cb.RTOL,
                true=true, setup=t1 - t0, solve=t2 - t1, unit=unit,
                grid=sum(cells) / cells[0], operator=sum(nnz) / nnz[0],
                cycle=sum(n * k for n, k in zip(nnz, v)) / nnz[0],
                nbytes=info["nbytes"], levels=info["levels"])


def available_bytes() -> int:
    for line in Path("/proc/meminfo").read_text().splitlines():
        if line.startswith("MemAvailable:"):
            return int(line.split()[1]) * 1024
    return 0


def run_case(n: int, case: str, designs, before: dict | None) -> list[dict]:
    """Every design on one problem; ``before``: each design's row at the size below, which
    decides whether it is run here (time x 9 under LIMIT_SECONDS, levels x 8 x 3 in memory)."""
    fine, b = cb.problem_level(n, case)
    b = b.ravel()
    A = fine.to_csr()
    rows = []
    for design in designs:
        prev = (before or {}).get(design)
        if prev is not None and n > 128:
            guess = 9 * (prev["setup"] + prev["solve"])
            need = 24 * prev["nbytes"]
            if guess > LIMIT_SECONDS or need > available_bytes():
                rows.append(dict(design=design, case=case, n=n, skipped=(
                    f"skipped: {guess:.0f} s estimated (9 x {prev['n']}^3's), levels "
                    f"{need / 2**30:.1f} GiB with margin against {available_bytes() / 2**30:.1f} available")))
                print(rows[-1], flush=True)
                continue
        unit = cb.unit_seconds(fine)
        row = run_design(design, fine, b, A, unit)
        row["unit"] = float(np.median([unit, cb.unit_seconds(fine)]))
        row.update(case=case, n=n, skipped="")
        rows.append(row)
        print(f"{case:8s} {n:4d} {design:32s} it {row['iterations']:3d} true {row['true']:.1e} "
              f"oc {row['operator']:.2f} setup {row['setup']:6.1f} solve {row['solve']:6.1f} "
              f"wu/it {row['solve'] / row['unit'] / max(row['iterations'], 1):6.1f}", flush=True)
    return rows


# ---------------------------------------------------------------- report
def projection(rows: list[dict], n: int) -> list[str]:
    """Iterations x kept WU per iteration x complexity ratio, at n^3 on the column."""
    here = [r for r in rows if r["case"] == "column" and r["n"] == n]
    kept = next((r for r in here if r["design"] == "kept" and not r["skipped"]), None)
    if kept is None:
        return []
    wu_it = kept["solve"] / kept["unit"] / kept["iterations"]
    out = [f"## Projection: the column at {n}^3 in our kernels", "",
           f"Kept in this run: {kept['iterations']} iterations, {wu_it:.1f} WU per iteration, "
           f"unit {kept['unit'] * 1e3:.1f} ms, solve {kept['solve']:.2f} s (CPU). A design in our "
           "kernels is projected at *iterations x kept WU per iteration x ratio x unit*, with "
           "ratio = its operator complexity / kept's (the brief's rule) and, stricter, its cycle "
           "complexity / kept's (nonzeros times visits per cycle: the kept W-cycle visits level "
           "l 2^l times, a V-cycle once). Setup is not projected. Designs not run at this size "
           "take their iterations and complexities from the largest size they ran at. *kept's* = the "
           "projection over the kept solve's CPU seconds in this run.", "",
           "| design | from | iterations | operator complexity ratio | projected solve s | "
           "/ kept's | cycle complexity ratio | projected solve s | / kept's |",
           "|---|---|---|---|---|---|---|---|---|"]
    for design in DESIGNS:
        if design == "kept":
            continue
        runs = [r for r in rows if r["case"] == "column" and r["design"] == design
                and not r["skipped"] and r["n"] <= n]
        if not runs:
            continue
        r = max(runs, key=lambda r: r["n"])
        ro, rc = r["operator"] / kept["operator"], r["cycle"] / kept["cycle"]
        cost = r["iterations"] * wu_it * kept["unit"]
        k = kept["solve"]
        out.append(f"| {design} | {r['n']}^3 | {r['iterations']} | {ro:.2f} | {cost * ro:.2f} | "
                   f"{cost * ro / k:.2f} | {rc:.2f} | {cost * rc:.2f} | {cost * rc / k:.2f} |")
    return out + [""]


def report(rows: list[dict], info: dict, command: str) -> str:
    out = ["# Interpolation that follows the operator (a prototype study)", "",
           f"Written by `{command}` on {info['date']}; every number below comes from that run. "
           "Do not edit by hand: run the command again.", "",
           "Designs and sources: see the docstring of `benchmarks/odi_bench.py`. CG (sevenfold's "
           "`pcg`, float64 7-point operator) to rtol 1e-8; *true* = ||b - A x|| / ||b|| of the "
           "returned x, recomputed here with the CSR matrix. *grid* / *operator* complexity = "
           "cells / nonzeros of all levels over the finest level's; *cycle* complexity = nonzeros "
           "times visits per cycle over the finest's. CPU seconds, one numba thread. *WU/it* = "
           "solve seconds / iterations / one float64 application of the finest operator in our "
           "kernel (*unit*); for pyamg and the scipy cycles an upper bound of the design's cost "
           "in our kernels. *levels MiB* = the coarse levels' matrices, transfers and smoother "
           "copies (kept: all face arrays of the preconditioner's levels).", "",
           "| case | cells | design | iterations | true | grid | operator | cycle | setup s | "
           "solve s | WU/it | unit ms | levels MiB | levels |",
           "|---|---|---|---|---|---|---|---|---|---|---|---|---|---|"]
    for r in rows:
        if r["skipped"]:
            out.append(f"| {r['case']} | {r['n']}^3 | {r['design']} | {r['skipped']} |"
                       + " |" * 10)
            continue
        it = f"{r['iterations']}" + ("" if r["converged"] else " (not converged)")
        out.append(f"| {r['case']} | {r['n']}^3 | {r['design']} | {it} | {r['true']:.1e} | "
                   f"{r['grid']:.3f} | {r['operator']:.3f} | {r['cycle']:.2f} | {r['setup']:.2f} | "
                   f"{r['solve']:.2f} | {r['solve'] / r['unit'] / max(r['iterations'], 1):.1f} | "
                   f"{r['unit'] * 1e3:.2f} | {r['nbytes'] / 2**20:.0f} | {r['levels']} |")
    out += [""]
    sizes = sorted({r["n"] for r in rows if r["case"] == "column"})
    if sizes:
        out += projection(rows, sizes[-1])
    out += wall_bench.machine_table(info)
    return "\n".join(out) + "\n"


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[64, 128, 256])
    parser.add_argument("--cases", nargs="+", default=["column"])
    parser.add_argument("--reference", nargs="*", default=["layered:128"],
                        help="case:size pairs run after the sizes")
    parser.add_argument("--designs", nargs="+", default=list(DESIGNS))
    parser.add_argument("--results", default=str(HERE / "RESULTS_ODI.md"))
    args = parser.parse_args(argv)
    numba.set_num_threads(1)
    info = wall_bench.run_info()
    info["pyamg"] = pyamg.__version__
    run_case(24, "column", args.designs, None)  # compile every kernel before timing
    run_case(48, "column", ["kept"], None)  # (and the kept kernels' multi-level variants)
    print("timed runs", flush=True)
    rows: list[dict] = []
    for case in args.cases:
        before: dict = {}
        for n in sorted(args.sizes):
            here = run_case(n, case, args.designs, before)
            rows += here
            before = {r["design"]: r for r in here if not r["skipped"]} | {
                d: r for d, r in before.items() if d not in {x["design"] for x in here}}
    for pair in args.reference:
        case, n = pair.split(":")
        rows += run_case(int(n), case, args.designs, None)
    command = wall_bench.finish_info(info, "odi_bench.py", argv)
    Path(args.results).write_text(report(rows, info, command))
    Path(args.results).with_suffix(".json").write_text(json.dumps(dict(rows=rows, info=info, command=command)))
    print("wrote", args.results)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
