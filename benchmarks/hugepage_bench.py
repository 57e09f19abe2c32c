"""Whole `sevenfold run` processes with numpy's transparent huge pages on and off.

    python benchmarks/hugepage_bench.py [--jobs column:128 inclusions:128 column:256 layered:256]
        [--rounds 5] [--resident] [--memory as-found reclaimed backed]

numpy asks Linux for transparent huge pages on every large array (madvise). The first
reading of this benchmark blamed the kernel compacting memory at the page fault ("defrag" on
madvise) for the slow first touch of a fresh process's huge pages; the counts of
``--memory`` (RESULTS_PAGES.md) found no compaction stall and no fallback at all, and the cause
in a virtual machine whose balloon reports free pages: the host had taken the free blocks
back and faulted them in again. A sevenfold job touches all its arrays once (assembly,
set-up), so such faults land in its own time; huge pages make later passes faster (fewer TLB
misses).

For each job, whole processes alternate ``NUMPY_MADVISE_HUGEPAGE=1`` (numpy's default) and
``=0`` (``--rounds`` each); the table gives each side's job time from the summary line
(median and best) and its parts, and the whole process's wall time. With ``--resident``, also
the job's time in a process that ran it before (``column.RESIDENT``: the third of three runs,
what a worker's slot sees), alternating the same way, median. Writes
benchmarks/RESULTS_HUGEPAGES.md.

``--memory`` says what state the machine's free memory is in when each run starts:
*as-found* (the runs one after another, as above); *reclaimed* (a pause of
:data:`RECLAIM_PAUSE` s first: in a virtual machine whose balloon device reports free pages
to the hypervisor, the guest hands free 2 MB blocks back after about 2 s, and the hypervisor
must fault them in again at their next first touch); *backed* (a process that fills
:data:`BACKING_BYTES` of huge pages and exits just before: the run finds free memory the host
still backs, as every machine without free-page reporting does). Each run's faults that fell
back from a huge page or stalled on compaction are counted from /proc/vmstat.
"""

from __future__ import annotations

import os
import re
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
import speed  # noqa: E402

PARTS = ("assembly", "setup", "solve", "write")
RECLAIM_PAUSE = 6.0  # s, three times the guest's page-reporting delay
BACKING_BYTES = 3 << 30  # more than a 256^3 job's peak
BACKER = f"import numpy as np; np.empty({BACKING_BYTES // 8}).fill(0.0)"
COUNTERS = ("compact_stall", "thp_fault_fallback")


def vmstat() -> dict[str, int]:
    found = dict(line.split() for line in Path("/proc/vmstat").read_text().splitlines())
    return {name: int(found.get(name, 0)) for name in COUNTERS}


def prepare(memory: str) -> None:
    """Put free memory in the state ``memory`` names (see the module's docstring)."""
    if memory == "reclaimed":
        time.sleep(RECLAIM_PAUSE)
    elif memory == "backed":
        subprocess.run([sys.executable, "-c", BACKER], check=True,
                       env=dict(os.environ, NUMPY_MADVISE_HUGEPAGE="1"))


def job_file(folder: Path, pattern: str, n: int) -> Path:
    path = folder / f"{pattern}-{n}.toml"
    out = folder / f"{pattern}-{n}.zarr"
    path.write_text(column.job_text(n, out) if pattern == "column" else speed.job_text(n, pattern, str(out)))
    return path


def one_run(job: Path, huge: bool) -> dict[str, float]:
    """One whole `sevenfold run` process: wall seconds, the job's seconds and its parts."""
    env = dict(os.environ, NUMPY_MADVISE_HUGEPAGE="1" if huge else "0")
    before = vmstat()
    t = time.perf_counter()
    command = str(Path(sys.executable).parent / "sevenfold")  # (the installed command)
    done = subprocess.run([command, "run", str(job), "--here"],
                          capture_output=True, text=True, env=env, check=True)
    wall = time.perf_counter() - t
    after = vmstat()
    found = re.search(r"job ([0-9.]+) s \(assembly ([0-9.]+) s, setup ([0-9.]+) s, "
                      r"solve ([0-9.]+) s, write ([0-9.]+) s\)", done.stdout)
    if found is None:
        raise RuntimeError(f"no summary line in:\n{done.stdout}\n{done.stderr}")
    values = [float(x) for x in found.groups()]
    return ({"wall": wall, "job": values[0]} | dict(zip(PARTS, values[1:]))
            | {name: after[name] - before[name] for name in COUNTERS})


def resident_run(job: Path, huge: bool) -> float:
    """The job's own seconds in a process that has run it twice before."""
    env = dict(os.environ, NUMPY_MADVISE_HUGEPAGE="1" if huge else "0")
    done = subprocess.run([sys.executable, "-c", column.RESIDENT, str(job)], capture_output=True,
                          text=True, env=env, check=True, cwd=job.parent)
    return float(done.stdout.split()[-1])


def main(argv: list[str] | None = None) -> int:
    p = engine.ab_parser(__doc__, "RESULTS_HUGEPAGES.md", rounds=5)
    p.add_argument("--jobs", nargs="+", default=["column:128", "inclusions:128", "column:256",
                                                  "layered:256"])
    p.add_argument("--resident", action="store_true")
    p.add_argument("--memory", nargs="+", default=["as-found"],
                   choices=["as-found", "reclaimed", "backed"])
    args = p.parse_args(argv)
    lines, info = engine.report_head("hugepage_bench.py", argv,
                                     "Whole runs with numpy's transparent huge pages on and off")
    setting = {name: Path(f"/sys/kernel/mm/transparent_hugepage/{name}").read_text().strip()
               for name in ("enabled", "defrag")}
    from sevenfold import reports_free_pages

    lines += engine.opening(
        __doc__, f"This host: enabled = `{setting['enabled']}`, defrag = `{setting['defrag']}`; "
        f"a balloon device reporting free pages to the hypervisor: {'yes' if reports_free_pages() else 'no'}. "
        "Seconds; *median* and *best* of the rounds; parts are medians; *fallbacks, stalls*: "
        "huge-page faults that fell back to small pages and compaction stalls, summed over the "
        "side's timed runs.",
        ["job", "cells", "memory", "huge pages", "job s median", "job s best", "assembly", "setup",
         "solve", "write", "wall s median", "job median, off / on", "fallbacks, stalls",
         "resident job s median", "resident, off / on"])
    with tempfile.TemporaryDirectory() as tmp:
        for spec in args.jobs:
            pattern, n = spec.split(":")
            job = job_file(Path(tmp), pattern, int(n))
            one_run(job, True)  # (loads the kernels' cache and the files once)
            for memory in args.memory:
                runs: dict[bool, list[dict[str, float]]] = {True: [], False: []}
                for _ in range(args.rounds):
                    for huge in (True, False):
                        prepare(memory)
                        runs[huge].append(one_run(job, huge))
                resident: dict[bool, list[float]] = {True: [], False: []}
                for _ in range(args.rounds if args.resident else 0):
                    for huge in (True, False):
                        resident[huge].append(resident_run(job, huge))
                med = {h: {k: statistics.median(r[k] for r in runs[h]) for k in runs[h][0]} for h in runs}
                res = {h: statistics.median(resident[h]) if resident[h] else float("nan") for h in resident}
                for huge in (True, False):
                    m = med[huge]
                    lines.append(
                        f"| {pattern} | {n}^3 | {memory} | {'on' if huge else 'off'} | {m['job']:.2f} | "
                        f"{min(r['job'] for r in runs[huge]):.2f} | "
                        + " | ".join(f"{m[k]:.2f}" for k in PARTS)
                        + f" | {m['wall']:.2f} | "
                        + (f"{med[False]['job'] / med[True]['job']:.2f}" if not huge else "")
                        + " | " + ", ".join(str(sum(r[c] for r in runs[huge])) for c in COUNTERS)
                        + f" | {res[huge]:.2f} | "
                        + (f"{res[False] / res[True]:.2f} |" if not huge else "|"))
                    print(lines[-1], flush=True)
    engine.write_report(args.results, lines, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
