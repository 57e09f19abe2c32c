"""The coarsest level's banded Cholesky factor as our own kernel against LAPACK's through
scipy.linalg, alone and in whole `sevenfold run` processes.

    python benchmarks/coarsest_kernel_bench.py --against REVISION [--rounds 5]
        [--levels column:128 inclusions:128 "graded job:128"] [--jobs column:32 column:128 inclusions:128]

gmg factors its coarsest level (at most 16^3 cells) as a banded Cholesky factor. It used
LAPACK's pbtrf and pbtrs through ``scipy.linalg.cholesky_banded`` and ``cho_solve_banded``;
it now uses ``kernels.band``, so that a gmg run does not import scipy.linalg.

1. *The coarsest level alone*, for each job of ``--levels`` (the level gmg builds for it):
   the factor and one solve (a float64 right-hand side), LAPACK, the kernel and the kernel as
   it was at ``REVISION`` (*then*) in turn, best of 7 per round, ``--rounds`` rounds; the
   largest difference of the kernel's solution from LAPACK's relative to LAPACK's largest
   value, and whether the factor is the one *then* gave bit for bit. BLAS on one thread, as
   the command runs it.
2. *Whole processes*: ``sevenfold run --here --no-progress`` (``cli.program``) on the working
   tree and on ``REVISION`` (checked out in a temporary worktree, with its own kernel cache),
   one untimed run each per job (the kernels compiled), then ``--rounds`` rounds, the order
   of the two rotating. *whole* = the process's wall seconds; *job* = its own clock (`job X
   s`, job file read to result written).

Writes benchmarks/RESULTS_COARSEST_KERNEL.md.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import run as engine  # noqa: E402  (first: BLAS on one thread, as the command runs it)

import numpy as np  # noqa: E402

import cycle_bench as cb  # noqa: E402
import timing  # noqa: E402
import wall_bench  # noqa: E402
import whole_bench  # noqa: E402

def level_pair(n: int, case: str, rounds: int, then) -> dict[str, float | str]:
    """Milliseconds of factoring and solving the job's coarsest level: LAPACK, the kernel and
    ``then`` (``kernels.band`` at another revision)."""
    from scipy.linalg import cho_solve_banded, cholesky_banded

    from sevenfold.kernels.band import band_cholesky, band_cholesky_solve
    from sevenfold.solvers.gmg import DEFAULTS, Hierarchy

    fine, _ = cb.problem_level(n, case)
    level = Hierarchy(fine, **{k: v for k, v in DEFAULTS.items() if k != "start"}).levels[-1]
    band, _ = level.to_band()
    b = np.random.default_rng(0).standard_normal(band.shape[0])
    lapack_band = np.ascontiguousarray(band.T)
    factors = {"lapack": cholesky_banded(lapack_band, lower=True, check_finite=False)}
    factors["kernel"] = band.copy()
    assert band_cholesky(factors["kernel"]) == 0
    factors["then"] = band.copy()
    assert then.band_cholesky(factors["then"]) == 0

    factor = {"lapack": lambda: cholesky_banded(lapack_band, lower=True, check_finite=False),
              "kernel": lambda: band_cholesky(band.copy()),
              "then": lambda: then.band_cholesky(band.copy())}
    solve = {"lapack": lambda: cho_solve_banded((factors["lapack"], True), b, check_finite=False),
             "kernel": lambda: band_cholesky_solve(factors["kernel"], b.copy()),
             "then": lambda: then.band_cholesky_solve(factors["then"], b.copy())}
    copy = timing.best(lambda: band.copy(), 7, time.perf_counter)  # the kernel's copy of the band
    vector_copy = timing.best(lambda: b.copy(), 21, time.perf_counter)
    times: dict[str, list[float]] = {}
    for i in range(rounds):
        for side in engine.rotation(["lapack", "kernel", "then"], i):
            f = timing.best(factor[side], 7, time.perf_counter)
            s = timing.best(solve[side], 21, time.perf_counter)
            if side != "lapack":  # the kernels work in place: their input's copy is not their cost
                f, s = f - copy, s - vector_copy
            times.setdefault(f"factor {side}", []).append(f)
            times.setdefault(f"solve {side}", []).append(s)
    out: dict[str, float | str] = {key: min(v) * 1e3 for key, v in times.items()}
    x = b.copy()
    band_cholesky_solve(factors["kernel"], x)
    reference = solve["lapack"]()
    out["difference"] = float(np.abs(x - reference).max() / np.abs(reference).max())
    out["same"] = "yes" if np.array_equal(factors["kernel"], factors["then"]) else "no"
    out["shape"] = "x".join(map(str, level.shape))
    out["band"] = "x".join(map(str, band.shape))
    return out


def main(argv: list[str] | None = None) -> int:
    p = engine.ab_parser(__doc__, "RESULTS_COARSEST_KERNEL.md", rounds=5)
    p.add_argument("--against", required=True, metavar="REVISION")
    p.add_argument("--levels", nargs="*", default=["column:128", "inclusions:128", "graded job:128"])
    p.add_argument("--jobs", nargs="*", default=["column:32", "column:128", "inclusions:128"])
    args = p.parse_args(argv)
    lines, info = engine.report_head("coarsest_kernel_bench.py", argv,
                                     "The coarsest level's factor: our kernel against LAPACK's and its own past")
    then = wall_bench.kernels_at(args.against, "sevenfold.kernels.band")
    lines += engine.opening(
        __doc__, "## 1. The coarsest level alone\n\nMilliseconds, best over the rounds; ratios = "
        f"kernel / LAPACK and kernel / *then* ({args.against}).",
        ["job", "cells", "coarsest", "band (n x w)", "factor LAPACK", "factor then", "factor kernel",
         "kernel / LAPACK", "kernel / then", "same factor as then", "solve LAPACK", "solve kernel",
         "ratio", "difference"])
    for item in args.levels:
        case, n = item.rsplit(":", 1)
        c = level_pair(int(n), case, args.rounds, then)
        lines.append(
            f"| {case} | {n}^3 | {c['shape']} | {c['band']} | {c['factor lapack']:.2f} | "
            f"{c['factor then']:.2f} | {c['factor kernel']:.2f} | "
            f"{c['factor kernel'] / c['factor lapack']:.2f} | {c['factor kernel'] / c['factor then']:.2f} | "
            f"{c['same']} | {c['solve lapack']:.3f} | {c['solve kernel']:.3f} | "
            f"{c['solve kernel'] / c['solve lapack']:.2f} | {c['difference']:.1e} |")
        print(lines[-1], flush=True)
    if args.jobs:
        lines += whole_bench.section(f"## 2. Whole `sevenfold run` processes, against {args.against}",
                                     args.jobs, args.against, args.rounds)
    engine.write_report(args.results, lines, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
