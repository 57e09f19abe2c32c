"""The coarsest level's factor front by front in nested-dissection order against the banded
factor it replaced: the level alone, warm gmg solves in one process, and whole processes.

    python benchmarks/fronts_bench.py --against REVISION [--rounds 5]
        [--levels column:128 inclusions:128 layered:128 "graded job:128"]
        [--solves layered:128 inclusions:128 constant:128 "graded job:128" layered:256]
        [--jobs column:128 inclusions:128] [--results benchmarks/RESULTS_FRONTS.md]

``REVISION`` is one whose ``kernels.band`` has the whole-band factor and its solve
(``band_cholesky(a)``, ``band_cholesky_solve``; 0870c98 and before); *band* is that factor on
the level numbered longest axis outermost, as ``solvers.coarsest`` did then (its
``Level.to_band``, copied below).

1. *The coarsest level alone*, for each job of ``--levels`` (the level gmg builds for it): the
   factor (the whole solver's set-up: for *fronts* the tree, cached per shape as in a run,
   and the factor, on two threads as in a run where numba has them and the level is large
   enough; for *band* the band's assembly and the factor) and one solve of a float64
   right-hand side, best of 7 per round, the two alternating over ``--rounds`` rounds; the
   largest difference of the two solutions relative to the largest value.
2. *Warm gmg solves* (``gmg.solve_levels`` as the speed suite's warm column runs it: set-up
   and solve to 1e-8 after one untimed solve, two numba threads), the hierarchy's coarsest
   solver the fronts' or the band's, alternating; work units = seconds / one float64
   operator application on the finest level (restrict_bench.apply_seconds), timed in each
   round, then one untimed solve. BLAS on one thread, as the command runs it.
3. *Whole processes* (``--jobs``): ``sevenfold run`` on the working tree and on ``REVISION``
   (benchmarks/whole_bench.py).

Writes benchmarks/RESULTS_FRONTS.md.
"""

from __future__ import annotations

import gc
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import run as engine  # noqa: E402  (first: BLAS on one thread, as the command runs it)

import numpy as np  # noqa: E402

import restrict_bench as rb  # noqa: E402
import timing  # noqa: E402
import wall_bench  # noqa: E402
import whole_bench  # noqa: E402


def to_band(level) -> tuple[np.ndarray, tuple[int, ...]]:
    """The level's matrix in lower band storage, cells numbered in C order of the grid
    transposed to axes longest first (``Level.to_band`` as of 0870c98)."""
    order = tuple(int(a) for a in np.argsort(level.shape, kind="stable")[::-1])
    sides = tuple(level.shape[a] for a in order)
    stride = {order[0]: sides[1] * sides[2], order[1]: sides[2], order[2]: 1}
    band = np.zeros((level.diag.size, sides[1] * sides[2] + 1))
    band[:, 0] = level.diag.transpose(order).ravel()
    for axis, t in enumerate((level.tx, level.ty, level.tz)):
        if level.shape[axis] > 1:
            band[:, stride[axis]] -= t.transpose(order).ravel()
    return band, order


def band_solver(then):
    """A coarsest solver with ``CoarsestSolver``'s interface on the band kernels ``then``."""

    class BandSolver:
        kind = "band"

        def __init__(self, level) -> None:
            self.shape = level.shape
            self._factor, self._order = to_band(level)
            if then.band_cholesky(self._factor) != 0:
                raise RuntimeError("the band factor failed")

        def solve(self, b: np.ndarray, u: np.ndarray) -> None:
            x = b.transpose(self._order).astype(np.float64).ravel()
            then.band_cholesky_solve(self._factor, x)
            u.transpose(self._order)[...] = x.reshape(tuple(self.shape[a] for a in self._order))

    return BandSolver


def coarsest_level(job):
    from sevenfold.solvers import gmg

    fine, _ = gmg.fine_level(job)
    options = {k: v for k, v in gmg.DEFAULTS.items() if k != "start"}
    return gmg.Hierarchy(fine, **options).levels[-1]


def level_pair(n: int, case: str, rounds: int, band) -> dict[str, float | str]:
    """Milliseconds of the two solvers' set-up and one solve on the job's coarsest level."""
    from sevenfold.solvers.coarsest import CoarsestSolver

    level = coarsest_level(rb.problem(n, case))
    solvers = {"fronts": CoarsestSolver, "band": band}
    built = {side: make(level) for side, make in solvers.items()}
    assert built["fronts"].kind == "fronts"
    b = np.random.default_rng(0).standard_normal(level.shape)
    u = {side: np.empty(level.shape) for side in solvers}
    times: dict[str, list[float]] = {}
    for i in range(rounds):
        for side in engine.rotation(list(solvers), i):
            times.setdefault(f"factor {side}", []).append(
                timing.best(lambda: solvers[side](level), 7, time.perf_counter))
            times.setdefault(f"solve {side}", []).append(
                timing.best(lambda: built[side].solve(b, u[side]), 21, time.perf_counter))
    out: dict[str, float | str] = {key: min(v) * 1e3 for key, v in times.items()}
    out["difference"] = float(np.abs(u["fronts"] - u["band"]).max() / np.abs(u["band"]).max())
    out["shape"] = "x".join(map(str, level.shape))
    return out


def warm_solves(n: int, case: str, rounds: int, band) -> dict[str, list]:
    """Work units and iterations of warm set-up + solve, fronts and band alternating."""
    from sevenfold.solvers import coarsest, gmg, hierarchy

    fine, b = gmg.fine_level(rb.problem(n, case))
    solvers = {"fronts": coarsest.CoarsestSolver, "band": band}
    out: dict[str, list] = {}
    try:
        for side in solvers:  # untimed: kernels loaded, memory touched
            hierarchy.CoarsestSolver = solvers[side]
            gmg.solve_levels(fine, b, 1e-8, 100)
        for i in range(rounds):
            unit = rb.apply_seconds(fine)
            # untimed: the first solve after the unit's arrays are freed took 1.6-1.8x the others
            # at 256^3 (page faults, by the look of it), whichever solver went first
            first = engine.rotation(list(solvers), i)[0]
            hierarchy.CoarsestSolver = solvers[first]
            gmg.solve_levels(fine, b, 1e-8, 100)
            gc.collect()
            for side in engine.rotation(list(solvers), i):
                hierarchy.CoarsestSolver = solvers[side]
                result, levels = gmg.solve_levels(fine, b, 1e-8, 100)
                assert levels.coarsest.kind == side
                out.setdefault(side, []).append(
                    ((result.setup_seconds + result.solve_seconds) / unit, result.iterations))
                del result, levels
                gc.collect()
    finally:
        hierarchy.CoarsestSolver = coarsest.CoarsestSolver
    return out


def main(argv: list[str] | None = None) -> int:
    p = engine.ab_parser(__doc__, "RESULTS_FRONTS.md", rounds=5)
    p.add_argument("--against", required=True, metavar="REVISION")
    p.add_argument("--levels", nargs="*",
                   default=["column:128", "inclusions:128", "layered:128", "graded job:128"])
    p.add_argument("--solves", nargs="*", default=["layered:128", "inclusions:128", "constant:128",
                                                   "graded job:128", "layered:256"])
    p.add_argument("--jobs", nargs="*", default=["column:128", "inclusions:128"])
    args = p.parse_args(argv)
    lines, info = engine.report_head("fronts_bench.py", argv,
                                     "The coarsest level: fronts in nested-dissection order against the band")
    band = band_solver(wall_bench.kernels_at(args.against, "sevenfold.kernels.band"))
    lines += engine.opening(
        __doc__, "## 1. The coarsest level alone\n\nMilliseconds, best over the rounds; ratio = "
        f"fronts / band (the band kernels of {args.against}).",
        ["job", "cells", "coarsest", "set-up band", "set-up fronts", "ratio", "solve band",
         "solve fronts", "ratio", "difference"])
    for item in args.levels:
        case, n = item.rsplit(":", 1)
        c = level_pair(int(n), case, args.rounds, band)
        lines.append(
            f"| {case} | {n}^3 | {c['shape']} | {c['factor band']:.2f} | {c['factor fronts']:.2f} | "
            f"{c['factor fronts'] / c['factor band']:.2f} | {c['solve band']:.3f} | "
            f"{c['solve fronts']:.3f} | {c['solve fronts'] / c['solve band']:.2f} | {c['difference']:.1e} |")
        print(lines[-1], flush=True)
    if args.solves:
        lines += ["", "## 2. Warm gmg solves, two numba threads", "",
                  "Work units (set-up + solve) of each round, then the median and the ratio of the "
                  "medians, fronts / band; iterations of every round.", "",
                  "| job | cells | band WU | fronts WU | band median | fronts median | ratio | iterations band / fronts |",
                  "|---|---|---|---|---|---|---|---|"]
        for item in args.solves:
            case, n = item.rsplit(":", 1)
            w = warm_solves(int(n), case, args.rounds, band)
            med = {side: float(np.median([x for x, _ in w[side]])) for side in w}
            lines.append(
                f"| {case} | {n}^3 | {', '.join(f'{x:.1f}' for x, _ in w['band'])} | "
                f"{', '.join(f'{x:.1f}' for x, _ in w['fronts'])} | {med['band']:.1f} | "
                f"{med['fronts']:.1f} | {med['fronts'] / med['band']:.2f} | "
                f"{sorted({k for _, k in w['band']})} / {sorted({k for _, k in w['fronts']})} |")
            print(lines[-1], flush=True)
    if args.jobs:
        lines += whole_bench.section(f"## 3. Whole `sevenfold run` processes, against {args.against}",
                                     args.jobs, args.against, args.rounds)
    engine.write_report(args.results, lines, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
