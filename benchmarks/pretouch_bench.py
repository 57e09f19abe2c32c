"""A prototype: a fresh `sevenfold run` that first-touches its memory on both cores while it
imports, against the command as shipped.

    python benchmarks/pretouch_bench.py [--jobs column:128 column:256 inclusions:256] [--rounds 5]

A fresh 256^3 process touches about 2 GB for the first time (627,000 minor faults and
1.6-1.7 s of system time for the layered job), and about 40 % of those faults fall in numpy's
one-threaded loops. *pre-touched*: malloc keeps what is freed (``memory.KEEP_FREED_MEMORY``,
the slot's setting: arrays from the heap, never unmapped), and before the run two threads
allocate and fill the bytes the job will need (the shipped run's peak RSS, measured first,
less the interpreter's 250 MiB; `check`'s estimate would stand for it in a product) while the
main thread imports what the run imports (the CLI, the runner, numba, the gmg solver, zarr);
the threads free the memory, which stays in the heap, touched, and the run's arrays reuse it.
*shipped*: the same command, nothing touched ahead.

Sides alternate, the first side alternating by round. *whole* = the process's wall seconds,
*job* = its own clock (not comparable between the sides: the pre-touched side imports before
the clock starts), *peak* = its peak RSS (/usr/bin/time).
Writes benchmarks/RESULTS_PRETOUCH.md.
"""

from __future__ import annotations

import statistics
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import column  # noqa: E402
import run as engine  # noqa: E402
import speed  # noqa: E402

PRETOUCH = """
import os, sys, threading
import numpy as np
need = int(os.environ["PRETOUCH_BYTES"]) // 16  # float64 entries per thread (two threads)
held = []
def touch():
    a = np.empty(need)
    a.fill(0.0)  # numpy lets go of the GIL for the fill
    held.append(a)
threads = [threading.Thread(target=touch) for _ in range(2)]
for t in threads:
    t.start()
from sevenfold import cli, runner  # noqa: F401  what the run imports, while the threads touch
import numba, zarr  # noqa: F401
from sevenfold.solvers import gmg  # noqa: F401
for t in threads:
    t.join()
held.clear()  # freed into the heap (malloc keeps it), touched
cli.program()
"""
INTERPRETER = 250 << 20  # bytes of a run's peak RSS that are not its arrays (imports, libraries)


def one_run(folder: Path, side: str, job: Path, touch: int) -> tuple[engine.ProcessRun, float]:
    """One ``sevenfold run`` process of ``side`` and its job seconds."""
    r = _process(folder, side, job, touch)
    return r, speed.required_job_seconds(r.stdout, side)


def _process(folder: Path, side: str, job: Path, touch: int) -> engine.ProcessRun:
    import os

    from sevenfold.memory import KEEP_FREED_MEMORY

    args = ["run", "--here", "--no-progress", str(job)]
    if side == "shipped":
        return engine.run_process(engine.sevenfold_command() + args, folder)
    # small pages, as the shipped command asks for before numpy loads (here numpy loads first)
    env = {**os.environ, **KEEP_FREED_MEMORY, "NUMPY_MADVISE_HUGEPAGE": "0", "PRETOUCH_BYTES": str(touch)}
    return engine.run_process([sys.executable, "-c", PRETOUCH] + args, folder, env)


def main(argv: list[str] | None = None) -> int:
    p = engine.ab_parser(__doc__, "RESULTS_PRETOUCH.md", rounds=5)
    p.add_argument("--jobs", nargs="+", default=["column:128", "column:256", "inclusions:256"])
    args = p.parse_args(argv)
    lines, info = engine.report_head("pretouch_bench.py", argv, "A fresh run's memory touched ahead, on both cores")
    lines += engine.opening(
        __doc__, "Seconds and MiB, medians of the rounds (every round's whole seconds in order in the last column).",
        ["job", "cells", "side", "touched ahead MiB", "whole s", "job s", "peak MiB", "pre-touched / shipped, whole",
         "whole s, every round"])
    sides = ["shipped", "pre-touched"]
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        for spec in args.jobs:
            pattern, n = spec.split(":")
            n = int(n)
            job = folder / f"{pattern}-{n}.toml"
            out = str(folder / f"{pattern}-{n}.zarr")
            job.write_text(column.job_text(n, Path(out)) if pattern == "column" else speed.job_text(n, pattern, out))
            first, _ = one_run(folder, "shipped", job, 0)  # untimed: the kernels' cache, the peak
            touch = max(first.peak_rss - INTERPRETER, 0)
            runs: dict[str, list[tuple[engine.ProcessRun, float]]] = {s: [] for s in sides}
            for i in range(args.rounds):
                for side in engine.rotation(sides, i):
                    runs[side].append(one_run(folder, side, job, touch))
                    r, job_s = runs[side][-1]
                    print(spec, side, f"{r.wall:.2f} {job_s:.2f} {r.peak_rss / 2**20:.0f}", flush=True)
            whole = {s: statistics.median(r.wall for r, _ in runs[s]) for s in sides}
            own = {s: statistics.median(job_s for _, job_s in runs[s]) for s in sides}
            for s in sides:
                peak = statistics.median(r.peak_rss for r, _ in runs[s]) / 2**20
                ratio = f"{whole[s] / whole['shipped']:.2f}" if s != "shipped" else ""
                lines.append(f"| {pattern} | {n}^3 | {s} | {touch / 2**20 if s != 'shipped' else 0:.0f} | "
                             f"{whole[s]:.2f} | {own[s]:.2f} | {peak:.0f} | {ratio} | "
                             + " ".join(f"{r.wall:.2f}" for r, _ in runs[s]) + " |")
    engine.write_report(args.results, lines, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
