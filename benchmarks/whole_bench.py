"""Whole `sevenfold run` processes: the working tree against a revision, alternating.

    python benchmarks/whole_bench.py --against REVISION [--rounds 5]
        [--jobs column:32 inclusions:128 inclusions:256] [--resident]
        [--results benchmarks/RESULTS_WHOLE.md]

Each job (``pattern:n``: ``column`` is issue 10's 1000:1 column, the others the speed suite's
patterns, benchmarks/band_bench.py's ``job_file``) runs as ``sevenfold run --here
--no-progress`` (``cli.program``, the installed command's entry point) on the package in
``src/`` and on ``REVISION`` (checked out in a temporary worktree, with its own kernel
cache): one untimed run each (the kernels compiled), then ``--rounds`` rounds, the order of
the two rotating. *whole* = the process's wall seconds; *job* = its own clock (`job X s`,
job file read to result written); *write* = the write's share of it (`write X s`); *peak
RSS* from /usr/bin/time. With ``--resident``, each job's time in a resident process too
(``band_bench.resident``: the third ``run_job`` in one child, as a worker's slot runs it),
the two sides alternating the same way.
"""

from __future__ import annotations

import os
import re
import statistics
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import run as engine  # noqa: E402  (first: BLAS on one thread, as the command runs it)

import band_bench  # noqa: E402
import speed  # noqa: E402

COMMAND = "from sevenfold import cli; cli.program()"
COLUMNS = ["job", "cells", "code", "whole s", "job s", "write s", "whole min s", "peak RSS MiB",
           "ratio whole", "ratio job", "whole s, every round"]


def whole_run(folder: Path, source: Path, job: Path) -> dict[str, float]:
    """One ``sevenfold run`` process on the package at ``source``: wall, job and write
    seconds, peak RSS in bytes."""
    r = engine.run_process([sys.executable, "-c", COMMAND, "run", "--here", "--no-progress", str(job)],
                           folder, env={**os.environ, "PYTHONPATH": str(source)})
    write = re.search(r"write\s+([0-9.]+)\s*s", " ".join(r.stdout.split()))
    return {"whole": r.wall, "job": speed.required_job_seconds(r.stdout, str(source)),
            "write": float(write.group(1)) if write else float("nan"), "peak": r.peak_rss}


def compare(jobs: list[str], against: str, rounds: int) -> list[str]:
    """Table rows (two per job: the working tree, then ``against``), medians of the rounds."""
    rows = []
    with tempfile.TemporaryDirectory() as tmp, engine.revision_tree(against, Path(tmp)) as then:
        folder = Path(tmp)
        sources = {"now": HERE.parent / "src", "then": then}
        for item in jobs:
            pattern, n = item.rsplit(":", 1)
            job = band_bench.job_file(folder, pattern, int(n))
            for source in sources.values():
                whole_run(folder, source, job)  # untimed: the kernels compiled
            runs: dict[str, list[dict[str, float]]] = {side: [] for side in sources}
            for i in range(rounds):
                for side in engine.rotation(list(sources), i):
                    runs[side].append(whole_run(folder, sources[side], job))
                    print(item, side, " ".join(f"{k} {v:.2f}" for k, v in runs[side][-1].items()
                                               if k != "peak"), flush=True)
            med = {s: {k: statistics.median(r[k] for r in rs) for k in rs[0]} for s, rs in runs.items()}
            for side, rs in runs.items():
                m = med[side]
                ratios = (f"{m['whole'] / med['then']['whole']:.2f} | {m['job'] / med['then']['job']:.2f}"
                          if side == "now" else " | ")
                rows.append(f"| {pattern} | {n}^3 | {'working tree' if side == 'now' else against} | "
                            f"{m['whole']:.2f} | {m['job']:.2f} | {m['write']:.2f} | "
                            f"{min(r['whole'] for r in rs):.2f} | {m['peak'] / 2**20:,.0f} | {ratios} | "
                            + " ".join(f"{r['whole']:.2f}" for r in rs) + " |")
    return rows


def section(heading: str, jobs: list[str], against: str, rounds: int) -> list[str]:
    """A result file's section of whole processes (:func:`compare`), with its heading and
    how to read it."""
    return (["", heading, "", "Medians of the rounds (every round's whole seconds in order in "
             "the last column); ratio = now / then (benchmarks/whole_bench.py).", "",
             "| " + " | ".join(COLUMNS) + " |", "|" + "---|" * len(COLUMNS)]
            + compare(jobs, against, rounds))


def compare_resident(jobs: list[str], against: str, rounds: int) -> list[str]:
    """Table rows of the jobs' time in a resident process (``band_bench.resident``: the third
    ``run_job`` in one child, what a worker's slot sees), the working tree and ``against``
    alternating, medians."""
    rows = []
    with tempfile.TemporaryDirectory() as tmp, engine.revision_tree(against, Path(tmp)) as then:
        sources = {"now": HERE.parent / "src", "then": then}
        for item in jobs:
            pattern, n = item.rsplit(":", 1)
            job = band_bench.job_file(Path(tmp), pattern, int(n))
            runs: dict[str, list[float]] = {side: [] for side in sources}
            for i in range(rounds):
                for side in engine.rotation(list(sources), i):
                    runs[side].append(band_bench.resident(sources[side], job)[0])
                    print(item, side, f"resident job {runs[side][-1]:.3f}", flush=True)
            now, was = (statistics.median(runs[side]) for side in ("now", "then"))
            rows.append(f"| {pattern} | {n}^3 | {now:.3f} | {was:.3f} | {now / was:.2f} | "
                        + " ".join(f"{t:.3f}" for t in runs["now"]) + " | "
                        + " ".join(f"{t:.3f}" for t in runs["then"]) + " |")
    return rows


def main(argv: list[str] | None = None) -> int:
    p = engine.ab_parser(__doc__, "RESULTS_WHOLE.md", rounds=5)
    p.add_argument("--against", required=True, metavar="REVISION")
    p.add_argument("--jobs", nargs="+", default=["column:32", "inclusions:128", "inclusions:256"])
    p.add_argument("--resident", action="store_true",
                   help="also the jobs' time in a resident process (a worker's slot)")
    args = p.parse_args(argv)
    lines, info = engine.report_head("whole_bench.py", argv, "Whole `sevenfold run` processes, A/B")
    lines += engine.opening(
        __doc__, f"Against {args.against}: seconds and peak RSS, medians of {args.rounds} rounds "
        "(every round's whole seconds in order in the last column); ratio = now / then.", COLUMNS)
    lines += compare(args.jobs, args.against, args.rounds)
    if args.resident:
        lines += ["", "## In a resident process", "",
                  "The job's own seconds in the third `run_job` of one child (modules imported, "
                  f"kernels loaded, as in a worker's slot), medians of {args.rounds} rounds "
                  "alternating; ratio = now / then.", "",
                  f"| job | cells | job s now | job s {args.against} | ratio | every round, now | "
                  "every round, then |", "|" + "---|" * 7]
        lines += compare_resident(args.jobs, args.against, args.rounds)
    engine.write_report(args.results, lines, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
