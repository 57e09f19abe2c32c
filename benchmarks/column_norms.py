"""Why the 1000:1 column takes 7 gmg-CG iterations where constant k takes 5: counts, not times.

    python benchmarks/column_norms.py [--sizes 128 256]

The stopping test is the relative residual in the 2-norm, ||b - A x|| / ||b|| <= 1e-8, and CG
minimises the error in the A-norm. Where k is 1000 times larger the residual of the same error
weighs about 1000 times more, so this script reports, per iteration:

- CG's relative residual with the kept preconditioner (gmg's defaults: W(2,2) zebra z-line
  sweeps, scaled aggregation, float32 levels, walls kept between aggregates) and the share of
  ||r||^2 that lies in the column's cells;
- the relative residual of right-preconditioned GMRES over the same Krylov space
  (x in span{M^-1 r0, M^-1 A M^-1 r0, ...}), which minimises exactly ||b - A x|| there
  (Saad, Iterative Methods for Sparse Linear Systems, 2nd ed., section 9.3.2, from memory): no
  Krylov method on this preconditioner can stop earlier than its first iteration under 1e-8;
- CG's residual with three sweeps each side instead of two, and with the kept two plus one
  more sweep pair on the finest level's column lines alone (a prototype below, on copies of
  the block: before the coarse correction after the kept sweeps, after it before them, so the
  cycle stays symmetric);
- the extremes of the preconditioned spectrum, from CG's own coefficients (the Lanczos
  tridiagonal matrix built from CG's alphas and betas; Saad, chapter 6, from memory).

CG here is written out in numpy with the product's operator and preconditioner; its residuals
are checked against the product's own solve (``gmg.solve_levels``): the script fails if they
differ by more than 1e-3 relative (the float32 levels round the two runs' sums apart: 1e-4 by
the seventh iteration) or cross 1e-8 at different iterations. Writes benchmarks/RESULTS_COLUMN_NORMS.md.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent / "tests"))

import run as engine  # noqa: E402
from cycle_bench import problem_level  # noqa: E402

from sevenfold.kernels import lines  # noqa: E402
from sevenfold.solvers import gmg  # noqa: E402
from sevenfold.solvers.hierarchy import Hierarchy  # noqa: E402

RTOL = 1e-8
ITERATIONS = 8  # past the kept solve's 7 on the column, so every design's crossing shows
HIGH_K = 100.0  # a cell is in the column when its diagonal is this many times the median


def preconditioner(level, box=None, **options):
    """The kept hierarchy on ``level`` (gmg's defaults, float32 levels as the column's
    contrast gets) as x -> M^-1 x in float64, with ``options`` overriding the defaults;
    ``box``: :class:`ColumnSweeps` on those lines."""
    opts = {**gmg.DEFAULTS, "precision": "float32", **options}
    opts.pop("start")
    hierarchy = (Hierarchy if box is None else ColumnSweeps)(level, **opts)
    hierarchy.box = box
    return lambda r: np.array(hierarchy(r), dtype=np.float64)


class ColumnSweeps(Hierarchy):
    """The kept hierarchy with one more zebra z-line sweep pair on the finest level's lines
    in ``box`` = (i0, i1, j0, j1), the other lines held: their couplings go to the block's
    right-hand side."""

    box: tuple[int, int, int, int] = (0, 0, 0, 0)

    def _block_sweep(self, lv, b, u, first: int) -> None:
        i0, i1, j0, j1 = self.box
        block = (slice(i0, i1), slice(j0, j1))
        rhs = np.array(b[block])
        rhs[0] += lv.tx[i0 - 1, j0:j1] * u[i0 - 1, j0:j1]
        rhs[-1] += lv.tx[i1 - 1, j0:j1] * u[i1, j0:j1]
        rhs[:, 0] += lv.ty[i0:i1, j0 - 1] * u[i0:i1, j0 - 1]
        rhs[:, -1] += lv.ty[i0:i1, j1 - 1] * u[i0:i1, j1]
        tx, ty = np.array(lv.tx[block]), np.array(lv.ty[block])
        tx[-1], ty[:, -1] = 0.0, 0.0  # (those couplings are in rhs)
        tz, inv_w, v = np.array(lv.tz[block]), np.array(lv.inv_w[block]), np.array(u[block])
        for colour in (first, 1 - first):
            lines.line_gauss_seidel_colour(tx, ty, tz, inv_w, rhs, v, (colour + i0 + j0) % 2)
        u[block] = v

    def _smooth(self, lv, b, u, first, zero=False):
        if lv is not self.levels[0]:
            return super()._smooth(lv, b, u, first, zero)
        if first == 1:
            self._block_sweep(lv, b, u, 1)
        super()._smooth(lv, b, u, first, zero)
        if first == 0:
            self._block_sweep(lv, b, u, 0)


def cg(A, M, b, column, iterations):
    """Preconditioned CG from 0: relative residuals, the column's share of ||r||^2, and the
    Ritz values (extremes of M^-1 A's spectrum seen so far)."""
    nb = np.linalg.norm(b)
    x, r = np.zeros_like(b), b.copy()
    z = M(r)
    p, rz = z.copy(), r @ z
    residuals, shares, alphas, betas = [], [], [], []
    for _ in range(iterations):
        q = A(p)
        alpha = rz / (p @ q)
        x += alpha * p
        r -= alpha * q
        residuals.append(np.linalg.norm(r) / nb)
        shares.append(float((r[column] ** 2).sum() / (r @ r)))
        z = M(r)
        rz, old = r @ z, rz
        alphas.append(alpha)
        betas.append(rz / old)
        p = z + betas[-1] * p
    k = len(alphas)
    diagonal = [1 / alphas[j] + (betas[j - 1] / alphas[j - 1] if j else 0.0) for j in range(k)]
    off = [np.sqrt(betas[j]) / alphas[j] for j in range(k - 1)]
    ritz = np.linalg.eigvalsh(np.diag(diagonal) + np.diag(off, 1) + np.diag(off, -1))
    return residuals, shares, (float(ritz[0]), float(ritz[-1]))


def gmres(A, M, b, iterations):
    """Right-preconditioned GMRES from 0 (Arnoldi with twice-applied modified Gram-Schmidt):
    the true relative residual of each iterate."""
    nb = np.linalg.norm(b)
    V, Z = [b / nb], []
    H = np.zeros((iterations + 1, iterations))
    residuals = []
    for j in range(iterations):
        Z.append(M(V[j]))
        w = A(Z[j])
        for _ in range(2):
            for i in range(j + 1):
                h = V[i] @ w
                H[i, j] += h
                w -= h * V[i]
        H[j + 1, j] = np.linalg.norm(w)
        V.append(w / H[j + 1, j])
        e1 = np.zeros(j + 2)
        e1[0] = nb
        y = np.linalg.lstsq(H[:j + 2, :j + 1], e1, rcond=None)[0]
        x = sum(c * v for c, v in zip(y, Z))
        residuals.append(np.linalg.norm(b - A(x)) / nb)
    return residuals


def crossing(residuals) -> str:
    hit = [i + 1 for i, r in enumerate(residuals) if r <= RTOL]
    return str(hit[0]) if hit else f"> {len(residuals)}"


def study(n: int, case: str) -> dict:
    level, b = problem_level(n, case)
    b = b.ravel().astype(np.float64)
    operator = gmg.FineOperator(level)
    A = lambda v: operator.apply_dot(v)[0].copy()  # noqa: E731 (the product's buffer is reused)
    diag = level.diag.ravel()
    column = diag > HIGH_K * np.median(diag)
    kept, shares, spectrum = cg(A, preconditioner(level), b, column, ITERATIONS)
    product = gmg.solve_levels(level, b.reshape(level.shape), RTOL, ITERATIONS,
                               precision="float32")[0].history[1:]
    mismatch = max(abs(a - c) / c for a, c in zip(product, kept))
    if mismatch > 1e-3 or crossing(kept) != str(len(product)):
        raise SystemExit(f"{case} {n}^3: numpy CG differs from the product's by {mismatch:.1e} "
                         f"(1e-8 at {crossing(kept)} against {len(product)} iterations)")
    inside = [np.nonzero(column.reshape(level.shape).any(axis=axes))[0] for axes in ((1, 2), (0, 2))]
    box = None if not column.any() else (inside[0][0], inside[0][-1] + 1, inside[1][0], inside[1][-1] + 1)
    return {"n": n, "case": case, "cg": kept, "shares": shares, "spectrum": spectrum,
            "column cells": float(column.mean()), "product": len(product),
            "gmres": gmres(A, preconditioner(level), b, ITERATIONS),
            "three": cg(A, preconditioner(level, smoothing=3), b, column, ITERATIONS)[0],
            "block": (cg(A, preconditioner(level, box), b, column, ITERATIONS)[0] if box
                      else [float("nan")] * ITERATIONS)}


def report(rows: list[dict]) -> list[str]:
    """The result file's body: the summary table, then each case's residuals."""
    out = engine.opening(
        __doc__, "Counts and residuals do not depend on the host's speed. *column share* = the "
        "share of ||r||^2 in cells whose diagonal exceeds 100 times the median (the k = 1000 "
        "cells; on constant k none). *spectrum* = the smallest and largest Ritz values after "
        f"{ITERATIONS} CG iterations.",
        ["case", "cells", "column cells", "iterations to 1e-8: CG (the product)",
         "right-preconditioned GMRES, same Krylov space", "CG, three sweeps",
         "CG, a sweep pair more on the column", "spectrum of M^-1 A"])
    for r in rows:
        out.append(f"| {r['case']} | {r['n']}^3 | {r['column cells']:.1%} | {crossing(r['cg'])} "
                   f"({r['product']}) | {crossing(r['gmres'])} | {crossing(r['three'])} | "
                   f"{crossing(r['block']) if r['column cells'] else 'n/a'} | "
                   f"{r['spectrum'][0]:.3f} to {r['spectrum'][1]:.3f} |")
    for r in rows:
        out += ["", f"## {r['case']}, {r['n']}^3", "",
                "| iteration | CG | column share | GMRES, same space | CG, three sweeps | CG, a sweep pair more on the column |",
                "|---|---|---|---|---|---|"]
        out += [f"| {i + 1} | {c:.2e} | {s:.1%} | {g:.2e} | {t:.2e} | {'n/a' if k != k else f'{k:.2e}'} |"
                for i, (c, s, g, t, k) in enumerate(zip(r["cg"], r["shares"], r["gmres"], r["three"], r["block"]))]
    return out


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[128, 256])
    parser.add_argument("--cases", nargs="+", default=["column", "constant"])
    parser.add_argument("--results", type=Path, default=HERE / "RESULTS_COLUMN_NORMS.md")
    args = parser.parse_args(argv)
    lines, info = engine.report_head("column_norms.py", argv,
                                     "The column's iterations: which norm the stopping test weighs")
    rows = []
    for n in args.sizes:
        for case in args.cases:
            rows.append(study(n, case))
            print(n, case, crossing(rows[-1]["cg"]), crossing(rows[-1]["gmres"]), flush=True)
    engine.write_report(args.results, lines + report(rows), info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
