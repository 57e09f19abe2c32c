"""BLAS on one thread (the `sevenfold` command's default) against BLAS on every core (the
OpenBLAS default the command had before), in whole runs and in warm gmg solves.

    python benchmarks/blas_bench.py [--jobs column:32 inclusions:128 layered:128 column:128
        column:256 inclusions:256] [--rounds 5]

sevenfold's kernels run on numba's threads, one per core. A BLAS call (numpy's norm of a
long vector, the dense blocks of scipy's sparse LU, LAPACK's banded Cholesky) wakes
OpenBLAS's own threads, which then spin beside numba's for a while: on two cores they take
time from the next kernels. `sevenfold.one_blas_thread` sets ``OPENBLAS_NUM_THREADS`` (and
``MKL_NUM_THREADS``) to 1 unless the environment already says, before numpy loads.

For each job, alternating ``--rounds`` times, best of:

* *whole runs*: `sevenfold run --here --no-progress` as its own process, with the variables unset (the
  command's default now: one thread) and with them set to the cores this process may use (the
  OpenBLAS default before): wall seconds of the process and the job's own time from its
  summary line;
* *warm solves*: a child process that builds the job and runs gmg's set-up + solve in its own
  process (one untimed solve, then the best of three, ``restrict_bench.warm_gmg``), with each
  setting; work units = those seconds over one two-thread float64 operator application timed
  in the same child (which imports numpy before sevenfold, so "one" is set for it).

Writes benchmarks/RESULTS_BLAS_THREADS.md.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import run as engine  # noqa: E402
import speed  # noqa: E402

CHILD = """
import json, sys
sys.path.insert(0, sys.argv[3])
import restrict_bench as rb
from sevenfold.solvers.gmg import fine_level
job = rb.problem(int(sys.argv[1]), sys.argv[2])
apply = rb.apply_seconds(fine_level(job)[0])
row = rb.warm_gmg(job, timed=3)
print(json.dumps({**row, "apply": apply}))
"""
SETTINGS = ("one", "cores")


def environment(setting: str, command: bool) -> dict[str, str]:
    """The child's environment: for the command (``command``) "one" leaves the variables
    unset (the command sets them); a warm-solve child imports numpy before sevenfold, so it is
    given them."""
    env = {k: v for k, v in engine.GIVEN_ENVIRONMENT.items()
           if k not in ("OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")}
    threads = str(len(os.sched_getaffinity(0))) if setting == "cores" else None if command else "1"
    if threads is not None:
        env.update(OPENBLAS_NUM_THREADS=threads, MKL_NUM_THREADS=threads)
    env["SEVENFOLD_HOME"] = os.environ["SEVENFOLD_HOME"]  # (run.py's: no worker to hand to)
    return env


def whole(job: Path, setting: str) -> tuple[float, float]:
    t = time.perf_counter()
    out = subprocess.run(engine.sevenfold_command() + ["run", "--here", "--no-progress", str(job)],
                         cwd=job.parent, env=environment(setting, True), capture_output=True, text=True)
    wall = time.perf_counter() - t
    if out.returncode != 0:
        raise RuntimeError(f"{job} failed:\n{out.stderr}")
    return wall, speed.sevenfold_job_seconds(out.stdout)


def warm(pattern: str, n: int, setting: str) -> dict[str, float]:
    out = subprocess.run([sys.executable, "-c", CHILD, str(n), pattern, str(HERE)],
                         env=environment(setting, False), capture_output=True, text=True)
    if out.returncode != 0:
        raise RuntimeError(f"the warm solve of {pattern} {n}^3 failed:\n{out.stderr}")
    return json.loads(out.stdout.strip().splitlines()[-1])


def main(argv: list[str] | None = None) -> int:
    p = engine.ab_parser(__doc__, "RESULTS_BLAS_THREADS.md", rounds=5)
    p.add_argument("--jobs", nargs="+", default=["column:32", "inclusions:128", "layered:128",
                                                   "column:128", "column:256", "inclusions:256"])
    args = p.parse_args(argv)
    lines, info = engine.report_head("blas_bench.py", argv, "BLAS on one thread")
    lines += engine.opening(
        __doc__, "*one* = the variables unset (the command sets 1), *cores* = set to "
        f"{len(os.sched_getaffinity(0))}; seconds, best of {args.rounds}.",
        ["job", "cells", "whole s cores", "whole s one", "one / cores", "own s cores", "own s one", "one / cores",
         "warm solve s cores", "warm solve s one", "one / cores", "iterations", "WU cores", "WU one"])
    with tempfile.TemporaryDirectory() as tmp:
        for item in args.jobs:
            pattern, n = item.split(":")
            job = Path(tmp) / f"{pattern}{n}.toml"
            output = Path(tmp) / f"{pattern}{n}.zarr"
            if pattern == "column":
                import column

                job.write_text(column.job_text(int(n), output))
            else:
                job.write_text(speed.job_text(int(n), pattern, str(output)))
            whole(job, "one")  # untimed: the OS file cache, numba's cache
            runs: dict[str, list] = {s: [] for s in SETTINGS}
            solves: dict[str, list] = {s: [] for s in SETTINGS}
            for r in range(args.rounds):
                for setting in (SETTINGS if r % 2 == 0 else SETTINGS[::-1]):
                    runs[setting].append(whole(job, setting))
                    solves[setting].append(warm(pattern, int(n), setting))
            w = {s: min(x[0] for x in runs[s]) for s in SETTINGS}
            o = {s: min(x[1] for x in runs[s]) for s in SETTINGS}
            best = {s: min(solves[s], key=lambda row: row["seconds"]) for s in SETTINGS}
            its = {int(best[s]["iterations"]) for s in SETTINGS}
            lines.append(
                f"| {pattern} | {n}^3 | {w['cores']:.3f} | {w['one']:.3f} | {w['one'] / w['cores']:.2f} | "
                f"{o['cores']:.3f} | {o['one']:.3f} | {o['one'] / o['cores']:.2f} | "
                f"{best['cores']['seconds']:.3f} | {best['one']['seconds']:.3f} | "
                f"{best['one']['seconds'] / best['cores']['seconds']:.2f} | "
                f"{' / '.join(map(str, sorted(its)))} | "
                f"{best['cores']['seconds'] / best['cores']['apply']:.1f} | "
                f"{best['one']['seconds'] / best['one']['apply']:.1f} |")
            print(lines[-1], flush=True)
    engine.write_report(args.results, lines, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
