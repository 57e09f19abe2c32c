"""Work units on one thread against two, and the coarsest level's LU in float32.

    python benchmarks/thread_units.py [--sizes 128 256] [--patterns layered inclusions constant] [--rounds 2]

RESULTS.md counts gmg's warm set-up and solve in units of one operator application, both on
the machine's two threads. Where the operator's arrays fit in the cache the two cores share,
the unit shrinks more with two threads than the solve does, and the parts that do not spread
(the coarsest level's LU, small levels, Python) count double. This file measures that in one
process: for each speed-suite job, the threads alternating 2, 1, 2, 1, ... (``--rounds``
pairs), the warm gmg set-up + solve (``speed.warm_gmg``: one untimed solve, best of two) and
one operator application (``speed.kernel_times``: best of many), wall seconds.

It also factors the job's own coarsest level (``gmg.Hierarchy``'s matrix, MMD on A^T + A with
symmetric pivoting, as the solver does) with ``scipy.sparse.linalg.splu`` in float64 (kept)
and float32, best of 7, and solves with each: the work units a float32 LU would save.

Writes benchmarks/RESULTS_THREAD_UNITS.md.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import run as engine  # noqa: E402
import speed  # noqa: E402
import timing  # noqa: E402


def units(job: Path, threads: int) -> dict[str, float]:
    """Warm set-up + solve and one operator application on ``threads`` numba threads."""
    import numba

    numba.set_num_threads(threads)
    warm = speed.warm_gmg(job)
    apply, _, _, _ = speed.kernel_times(job, 20)
    return {"solve": warm["setup"] + warm["solve"], "apply": apply, "iterations": warm["iterations"]}


def coarsest_lu(job: Path) -> dict[str, float]:
    """Factor and solve seconds of the job's coarsest level in float64 and float32."""
    import scipy.sparse.linalg as sla

    from sevenfold.problem import build_problem
    from sevenfold.solvers.gmg import DEFAULTS, Hierarchy, fine_level
    from sevenfold.spec import load_job

    fine, _ = fine_level(build_problem(load_job(job)))
    options = {k: v for k, v in DEFAULTS.items() if k != "start"}  # the solver's hierarchy
    matrix = Hierarchy(fine, **options).levels[-1].to_csr().tocsc()
    b = np.random.default_rng(0).standard_normal(matrix.shape[0])
    out: dict[str, float] = {"cells": float(matrix.shape[0])}
    for dtype in (np.float64, np.float32):
        a = matrix.astype(dtype)

        def factor(a=a):
            return sla.splu(a, permc_spec="MMD_AT_PLUS_A", options={"SymmetricMode": True})

        lu = factor()
        name = np.dtype(dtype).name
        out[f"factor {name}"] = timing.best(factor, 7)
        out[f"solve {name}"] = timing.best(lambda lu=lu, bb=b.astype(dtype): lu.solve(bb), 21)
        x = lu.solve(b.astype(dtype)).astype(np.float64)
        out[f"residual {name}"] = float(np.linalg.norm(matrix @ x - b) / np.linalg.norm(b))
    return out


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--sizes", type=int, nargs="+", default=[128, 256])
    p.add_argument("--patterns", nargs="+", default=["layered", "inclusions", "constant"],
                   choices=speed.PATTERNS)
    p.add_argument("--rounds", type=int, default=2, help="pairs of (2 threads, 1 thread) runs")
    p.add_argument("--results", type=Path, default=HERE / "RESULTS_THREAD_UNITS.md")
    args = p.parse_args(argv)
    lines, info = engine.report_head("thread_units.py", argv, "Work units on one thread against two")
    lines += [engine.description(__doc__).replace("\n", " "), "",
              "*solve* = warm set-up + solve (s), *apply* = one operator application (ms), *WU* = "
              "solve / apply; the best of the rounds for each thread count. *solve 1 / 2* and "
              "*apply 1 / 2* = how much faster two threads are than one.", "",
              "| job | cells | iterations | solve s, 2 threads | apply ms, 2 | WU, 2 | solve s, 1 thread | "
              "apply ms, 1 | WU, 1 | solve 1 / 2 | apply 1 / 2 |", "|" + "---|" * 11]
    lu_rows = []
    with tempfile.TemporaryDirectory(prefix="sevenfold-threads-") as tmp:
        for n in args.sizes:
            for pattern in args.patterns:
                job = Path(tmp) / f"speed-{pattern}-{n}.toml"
                job.write_text(speed.job_text(n, pattern, f"speed-{pattern}-{n}.zarr"))
                runs: dict[int, list[dict[str, float]]] = {2: [], 1: []}
                for _ in range(args.rounds):
                    for threads in (2, 1):
                        runs[threads].append(units(job, threads))
                best = {t: {k: min(r[k] for r in rs) for k in ("solve", "apply")} for t, rs in runs.items()}
                two, one = best[2], best[1]
                lines.append(
                    f"| {pattern} | {n}^3 | {int(runs[2][0]['iterations'])} | {two['solve']:.3f} | "
                    f"{two['apply'] * 1e3:.2f} | {two['solve'] / two['apply']:.1f} | {one['solve']:.3f} | "
                    f"{one['apply'] * 1e3:.2f} | {one['solve'] / one['apply']:.1f} | "
                    f"{one['solve'] / two['solve']:.2f} | {one['apply'] / two['apply']:.2f} |")
                print(lines[-1], flush=True)
                lu = coarsest_lu(job)
                lu_rows.append(
                    f"| {pattern} | {n}^3 | {int(lu['cells'])} | {lu['factor float64'] * 1e3:.1f} | "
                    f"{lu['factor float32'] * 1e3:.1f} | {lu['factor float32'] / lu['factor float64']:.2f} | "
                    f"{lu['solve float64'] * 1e3:.2f} | {lu['solve float32'] * 1e3:.2f} | "
                    f"{(lu['factor float64'] - lu['factor float32']) / two['apply']:.1f} | "
                    f"{lu['residual float64']:.1e} | {lu['residual float32']:.1e} |")
                print(lu_rows[-1], flush=True)
    lines += ["", "## The coarsest level's LU, float64 (kept) and float32", "",
              "The job's coarsest level (float32 hierarchy, its matrix in float64 as the solver "
              "factors it), `splu` with MMD on A^T + A and symmetric pivoting, best of 7 factors "
              "and 21 solves; *factor WU saved* = the factor time saved over the two-thread "
              "operator application above; *residual* = ||A x - b|| / ||b|| of one solve, in "
              "float64.", "",
              "| job | cells | coarsest unknowns | factor ms, float64 | factor ms, float32 | "
              "float32 / float64 | solve ms, float64 | solve ms, float32 | factor WU saved | "
              "residual float64 | residual float32 |", "|" + "---|" * 11, *lu_rows]
    engine.write_report(args.results, lines, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
