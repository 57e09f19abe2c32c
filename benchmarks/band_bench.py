"""The coarsest level factored as a banded Cholesky factor against the sparse LU, and whole
jobs in a resident process against an earlier revision.

    python benchmarks/band_bench.py --against REVISION [--sizes 32 128 256]
        [--cases layered inclusions constant column "graded job"] [--rounds 3]
        [--jobs column:128 column:256 inclusions:128]

gmg's coarsest level (at most 16^3 cells) was factored by scipy's sparse LU (SuperLU, minimum
degree on A^T + A, symmetric mode); it is now a banded Cholesky factor (LAPACK's pbtrf through
``scipy.linalg.cholesky_banded`` when this was written, our own kernel since:
coarsest_kernel_bench.py), cells numbered with the longest axis outermost, and a gmg run no
longer imports scipy.sparse. ``solvers.coarsest.CoarsestSolver`` keeps the LU for wide
bands, so ``BAND_ENTRIES = 0`` gives the LU exactly as the product ran it before.

1. *The coarsest level alone*, for each job of ``cycle_bench.problem_level`` (as in
   restrict_bench.py): the factor and one solve (a random float32 right-hand side, as the
   cycle passes it), band and LU alternating, best of 7 per round; the largest difference of
   the two solutions relative to the LU's largest value.
2. *Warm gmg set-up + solve* (one untimed solve, then the best of two, as ``speed.warm_gmg``),
   band and LU alternating ``--rounds`` times, best of; the iterations and the final residual
   must match (to rounding: the coarsest solve's differences are of the float32 output's
   size). Work units: seconds over one two-thread float64 operator application.
3. *Whole jobs in a resident process* (``--jobs``): each job run three times by ``run_job`` in
   one child process, the third run's job time (what a queue worker's slot sees: modules
   imported, kernels loaded), children of the working tree and of ``REVISION`` (checked out
   in a temporary worktree, its own kernel cache) alternating ``--rounds`` times, best of.
   This part carries everything between ``REVISION`` and the working tree.

This process and its children run BLAS on one thread, as the `sevenfold` command does
(``run.py`` sets it on import; benchmarks/RESULTS_BLAS_THREADS.md).

Writes benchmarks/RESULTS_COARSEST_BAND.md.
"""

from __future__ import annotations

import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import run as engine  # noqa: E402  (first: BLAS on one thread, as the command runs it)

import numpy as np  # noqa: E402

import cycle_bench as cb  # noqa: E402
import restrict_bench as rb  # noqa: E402
import timing  # noqa: E402

RESIDENT = """
import sys
from sevenfold.runner import run_job
for _ in range(3):
    seconds = run_job(sys.argv[1]).seconds
print(seconds["job"], seconds["solve"], seconds["setup"])
"""


def level_pair(n: int, case: str, rounds: int) -> dict[str, float]:
    """Factor and solve seconds of the job's coarsest level, band and LU."""
    from sevenfold.solvers import coarsest
    from sevenfold.solvers.gmg import DEFAULTS, Hierarchy

    fine, _ = cb.problem_level(n, case)
    level = Hierarchy(fine, **{k: v for k, v in DEFAULTS.items() if k != "start"}).levels[-1]
    b = np.random.default_rng(0).standard_normal(level.shape).astype(np.float32)
    solutions = {}
    times: dict[str, list[float]] = {}
    for _ in range(rounds):
        for name, entries in (("lu", 0), ("band", coarsest.BAND_ENTRIES)):
            kept = coarsest.BAND_ENTRIES
            coarsest.BAND_ENTRIES = entries
            try:
                factor = timing.best(lambda: coarsest.CoarsestSolver(level), 7, time.perf_counter)
                solver = coarsest.CoarsestSolver(level)
            finally:
                coarsest.BAND_ENTRIES = kept
            assert solver.kind == name
            u = np.empty(level.shape, dtype=np.float32)
            solve = timing.best(lambda: solver.solve(b, u), 21, time.perf_counter)
            solutions[name] = u
            times.setdefault(f"factor {name}", []).append(factor)
            times.setdefault(f"solve {name}", []).append(solve)
    out = {key: min(v) for key, v in times.items()}
    out["difference"] = float(np.abs(solutions["band"] - solutions["lu"]).max()
                              / np.abs(solutions["lu"]).max())
    out["shape"] = "x".join(map(str, level.shape))
    return out


def resident(source: Path, job: Path) -> tuple[float, float, float]:
    """(job, solve, set-up) seconds of the third run of ``job`` in one child on ``source``, in
    a worker slot's environment (every core, malloc keeping the memory the last job freed:
    without it, glibc's trimming between runs refaulted 9,000 pages more per 128^3 column run
    on one side of an A/B, an allocation order's accident that no slot sees)."""
    from sevenfold.queue.worker import cores, slot_environment

    env = {**slot_environment(cores()), "PYTHONPATH": str(source)}
    out = subprocess.run([sys.executable, "-c", RESIDENT, str(job)], cwd=job.parent, env=env,
                         capture_output=True, text=True)
    if out.returncode != 0:
        raise RuntimeError(f"the resident run of {job} on {source} failed:\n{out.stderr}")
    job_s, solve, setup = map(float, out.stdout.split()[-3:])
    return job_s, solve, setup


def job_file(folder: Path, pattern: str, n: int) -> Path:
    import column
    import speed

    path = folder / f"{pattern}{n}.toml"
    output = folder / f"{pattern}{n}.zarr"
    path.write_text(column.job_text(n, output) if pattern == "column"
                    else speed.job_text(n, pattern, str(output)))
    return path


def main(argv: list[str] | None = None) -> int:
    import argparse

    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--against", required=True, metavar="REVISION")
    p.add_argument("--sizes", type=int, nargs="+", default=[32, 128, 256])
    p.add_argument("--cases", nargs="+", default=list(rb.CASES), choices=rb.CASES)
    p.add_argument("--rounds", type=int, default=3)
    p.add_argument("--jobs", nargs="*", default=["column:128", "column:256", "inclusions:128"])
    p.add_argument("--results", type=Path, default=HERE / "RESULTS_COARSEST_BAND.md")
    args = p.parse_args(argv)
    from sevenfold.solvers import coarsest

    lines, info = engine.report_head("band_bench.py", argv,
                                     "The coarsest level as a banded Cholesky factor")
    lines += [engine.description(__doc__), "",
              "## 1-2. The coarsest level alone, and warm gmg solves", "",
              "*factor*, *solve*: milliseconds; *WU* = seconds over one two-thread float64 operator "
              "application of the job's grid (*apply*); *solve s*: warm gmg set-up + solve, wall "
              "seconds, two threads.", "",
              "| job | cells | coarsest | factor LU | factor band | band / LU | solve LU | solve band "
              "| band / LU | difference | iterations LU / band | residual LU / band | solve s LU "
              "| solve s band | band / LU | WU LU | WU band |", "|" + "---|" * 17]
    for n in args.sizes:
        for case in (["column"] if n < 64 else args.cases):
            c = level_pair(n, case, args.rounds)
            job = rb.problem(n, case)
            from sevenfold.solvers.gmg import fine_level

            apply = rb.apply_seconds(fine_level(job)[0])
            s = rb.solve_pair(job, {(coarsest, "BAND_ENTRIES"): 0}, args.rounds)
            del job
            lines.append(
                f"| {case} | {n}^3 | {c['shape']} | {c['factor lu'] * 1e3:.1f} | "
                f"{c['factor band'] * 1e3:.1f} | {c['factor band'] / c['factor lu']:.2f} | "
                f"{c['solve lu'] * 1e3:.3f} | {c['solve band'] * 1e3:.3f} | "
                f"{c['solve band'] / c['solve lu']:.2f} | {c['difference']:.1e} | "
                f"{int(s['iterations then'])} / {int(s['iterations now'])} | "
                f"{s['residual then']:.2e} / {s['residual now']:.2e} | {s['then']:.3f} | "
                f"{s['now']:.3f} | {s['now'] / s['then']:.2f} | {s['then'] / apply:.1f} | "
                f"{s['now'] / apply:.1f} |")
            print(lines[-1], flush=True)
    if args.jobs:
        lines += ["", f"## 3. Whole jobs in a resident process, against {args.against}", "",
                  "Seconds of the third `run_job` in one child (job = job file read to result "
                  "written; solve and set-up as the job records them), best of "
                  f"{args.rounds} children each, alternating.", "",
                  f"| job | cells | job s {args.against} | job s now | now / then | solve s then | "
                  "solve s now | set-up s then | set-up s now |", "|" + "---|" * 9]
        with tempfile.TemporaryDirectory() as tmp, engine.revision_tree(args.against, Path(tmp)) as then:
            for item in args.jobs:
                pattern, n = item.split(":")
                job = job_file(Path(tmp), pattern, int(n))
                runs: dict[str, list[tuple[float, float, float]]] = {"then": [], "now": []}
                for _ in range(args.rounds):
                    runs["then"].append(resident(then, job))
                    runs["now"].append(resident(HERE.parent / "src", job))
                then_best, now = min(runs["then"]), min(runs["now"])
                lines.append(f"| {pattern} | {n}^3 | {then_best[0]:.3f} | {now[0]:.3f} | "
                             f"{now[0] / then_best[0]:.2f} | {then_best[1]:.3f} | {now[1]:.3f} | "
                             f"{then_best[2]:.3f} | {now[2]:.3f} |")
                print(lines[-1], flush=True)
    engine.write_report(args.results, lines, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
