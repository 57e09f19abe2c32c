"""A sweep in a worker's slot, with the slot keeping the memory its jobs free and without.

    python benchmarks/heap_bench.py [--jobs column:256 column:128] [--batch 4] [--rounds 2]

A worker's slot process runs job after job. By default glibc's malloc maps every array
larger than 32 MB afresh and unmaps it when freed, so each job of a 256^3 sweep first-touches
about 2.3 GB of new memory (15 arrays of 128 MB and 6 of 64 MB, counted with strace), and on
a shared host that first touch is slow and uneven (more so on huge pages, which the kernel
may have to compact). A slot now keeps what its jobs free
(``sevenfold.memory.KEEP_FREED_MEMORY`` in its environment) and gives it back when idle
(``sevenfold.queue.child.IDLE_RELEASE``) or before a smaller job.

For each job size, a one-slot ``sevenfold worker`` is started with the slot's settings as
shipped (*keep*) and with glibc's defaults put back in its environment (*default*:
``MALLOC_MMAP_MAX_=65536``, ``MALLOC_TRIM_THRESHOLD_=131072``), alternating (which goes
first alternates too: the first worker after another's exit was slower), ``--rounds`` each;
``--batch`` copies of the job are submitted at once (``sevenfold submit``, what a sweep does)
and each job's own seconds are read from its result. Also the slot's resident memory
(VmRSS) a second after the batch ended: what it holds while idle. Writes
benchmarks/RESULTS_HEAP.md.
"""

from __future__ import annotations

import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import column  # noqa: E402
import run as engine  # noqa: E402
from handed import Worker  # noqa: E402

SIDES = {"keep": {},
         "default": {"MALLOC_MMAP_MAX_": "65536", "MALLOC_TRIM_THRESHOLD_": str(128 * 1024)}}


def slot_rss_mib(worker: Worker) -> float:
    """Resident MiB of the worker's slot process (its one child, started by the slot's thread)."""
    children = [c for task in Path(f"/proc/{worker.proc.pid}/task").iterdir()
                for c in (task / "children").read_text().split()]
    for line in Path(f"/proc/{children[0]}/status").read_text().splitlines():
        if line.startswith("VmRSS:"):
            return int(line.split()[1]) / 1024
    return float("nan")


def batch(side: str, n: int, count: int) -> tuple[list[float], float]:
    """``count`` copies of the n^3 column job submitted at once to a fresh one-slot worker
    with ``side``'s malloc settings: each job's own seconds, and the slot's idle MiB after."""
    import zarr

    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        worker = Worker(folder, SIDES[side])
        try:
            worker.wait_ready()
            results = [folder / f"column-{i}.zarr" for i in range(count)]
            jobs = []
            for i, result in enumerate(results):
                jobs.append(folder / f"column-{i}.toml")
                jobs[-1].write_text(column.job_text(n, result))
            subprocess.run(engine.sevenfold_command() + ["submit", "--home", str(worker.home), "-q",
                                                         *map(str, jobs)], check=True, capture_output=True)
            seconds = []
            for result in results:
                while True:
                    try:
                        attrs = dict(zarr.open_group(str(result), mode="r").attrs)
                        if "seconds" in attrs:
                            break
                    except (FileNotFoundError, KeyError, ValueError):
                        pass
                    if worker.proc.poll() is not None:
                        raise RuntimeError(f"the worker ended: {Path(worker.log.name).read_text()}")
                    time.sleep(0.1)
                if not attrs.get("converged"):
                    raise RuntimeError(f"{result} did not converge")
                seconds.append(float(attrs["seconds"]["job"]))
            time.sleep(1.0 + 0.5)  # the slot gives back its free memory after IDLE_RELEASE s
            return seconds, slot_rss_mib(worker)
        finally:
            worker.stop()


def main(argv: list[str] | None = None) -> int:
    p = engine.ab_parser(__doc__, "RESULTS_HEAP.md", rounds=2)
    p.add_argument("--jobs", nargs="+", default=["column:256", "column:128"])
    p.add_argument("--batch", type=int, default=4)
    args = p.parse_args(argv)
    lines, info = engine.report_head("heap_bench.py", argv, "A sweep in a worker's slot: freed memory kept or not")
    lines += engine.opening(
        __doc__, "Seconds: each job's own time (job file read to result written) in the slot; "
        "*later jobs* = the batch's jobs after its first, median over the rounds.",
        ["job", "cells", "slot", "rounds: job seconds in order", "first job, median", "later jobs, median",
         "later, keep / default", "slot MiB idle after"])
    for spec in args.jobs:
        pattern, n = spec.split(":")
        if pattern != "column":
            raise SystemExit("heap_bench.py runs the column job (column:N)")
        runs: dict[str, list[list[float]]] = {side: [] for side in SIDES}
        idle: dict[str, list[float]] = {side: [] for side in SIDES}
        for r in range(args.rounds):
            for side in list(SIDES)[::1 if r % 2 == 0 else -1]:  # the order alternates too
                seconds, rss = batch(side, int(n), args.batch)
                runs[side].append(seconds)
                idle[side].append(rss)
                print(side, n, " ".join(f"{s:.2f}" for s in seconds), f"idle {rss:.0f} MiB", flush=True)
        later = {side: statistics.median(s for r in runs[side] for s in r[1:]) for side in SIDES}
        for side in SIDES:
            lines.append(
                f"| {pattern} | {n}^3 | {side} | "
                + "; ".join(" ".join(f"{s:.2f}" for s in r) for r in runs[side])
                + f" | {statistics.median(r[0] for r in runs[side]):.2f} | {later[side]:.2f} | "
                + (f"{later['keep'] / later['default']:.2f}" if side == "keep" else "")
                + f" | {max(idle[side]):.0f} |")
    engine.write_report(args.results, lines, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
