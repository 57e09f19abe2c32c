"""Three z-line sweeps each side on the finest level against the kept two, as the product runs:
numba's two threads, wall seconds, the two designs alternating.

    python benchmarks/finest_sweeps_bench.py [--sizes 128 256] [--rounds 4]

cycle_bench.py's "finest level W(3,3)" design measures CPU seconds on one thread, where it
saves an iteration's time on the column; this measures what a run sees. For each problem
(cycle_bench.py's) and size: one untimed solve of each design, then ``rounds`` rounds of one
solve each, alternating; setup + solve seconds as the solve's own record gives them. Writes
benchmarks/RESULTS_FINEST_SWEEPS.md.
"""

from __future__ import annotations

import gc
import sys
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent / "tests"))

import run as engine  # noqa: E402
from cycle_bench import patched, problem_level  # noqa: E402

from sevenfold.solvers.gmg import solve_levels  # noqa: E402

RTOL = 1e-8


def solve(level, b, finest: int | None) -> tuple[float, int]:
    """gmg's defaults (float32 levels), ``finest`` sweeps each side on the finest level."""
    with patched(finest_sweeps=finest):
        result = solve_levels(level, b, RTOL, 300, precision="float32")[0]
    if not result.converged:
        raise SystemExit("a solve did not converge")
    return result.setup_seconds + result.solve_seconds, result.iterations


def compare(n: int, case: str, rounds: int) -> dict:
    level, b = problem_level(n, case)
    designs = {"kept": None, "three": 3}
    seconds: dict[str, list[float]] = {d: [] for d in designs}
    iterations = {d: solve(level, b, s)[1] for d, s in designs.items()}  # untimed
    for _ in range(rounds):
        for d, s in designs.items():
            t, it = solve(level, b, s)
            assert it == iterations[d]
            seconds[d].append(t)
            gc.collect()
    ratios = [t3 / t2 for t3, t2 in zip(seconds["three"], seconds["kept"])]
    return {"n": n, "case": case, "iterations": iterations, "seconds": seconds,
            "best": min(seconds["three"]) / min(seconds["kept"]), "median": float(np.median(ratios))}


def report(rows: list[dict]) -> list[str]:
    out = engine.opening(
        __doc__, "*best ratio* = the three-sweep design's best seconds over the kept design's; "
        "*median ratio* = the median over rounds of each round's ratio.",
        ["case", "cells", "iterations, kept / three", "kept s (best)", "three s (best)",
         "best ratio", "median ratio"])
    return out + [f"| {r['case']} | {r['n']}^3 | {r['iterations']['kept']} / {r['iterations']['three']} | "
                  f"{min(r['seconds']['kept']):.3f} | {min(r['seconds']['three']):.3f} | {r['best']:.3f} | "
                  f"{r['median']:.3f} |" for r in rows]


def main(argv=None) -> int:
    parser = engine.ab_parser(__doc__, "RESULTS_FINEST_SWEEPS.md", 4)
    parser.add_argument("--sizes", type=int, nargs="+", default=[128, 256])
    parser.add_argument("--cases", nargs="+", default=["column", "inclusions", "layered", "constant"])
    args = parser.parse_args(argv)
    lines, info = engine.report_head("finest_sweeps_bench.py", argv,
                                     "Three finest sweeps against two, on two threads")
    rows = []
    for n in args.sizes:
        for case in args.cases:
            rows.append(compare(n, case, args.rounds))
            print(f"{case} {n}^3: best {rows[-1]['best']:.3f}, median {rows[-1]['median']:.3f}", flush=True)
    engine.write_report(args.results, lines + report(rows), info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
