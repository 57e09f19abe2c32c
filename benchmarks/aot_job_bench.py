"""Kernels compiled ahead of time on a speed-suite job: fresh `sevenfold run` processes on the
jit kernels against the same on serial AOT builds, and the job resident on one and two threads.

    python benchmarks/aot_job_bench.py                      # 128^3 inclusions; RESULTS_AOT_JOB.md
    python benchmarks/aot_job_bench.py --cells 128 --pattern column --output benchmarks/RESULTS_AOT_COLUMN.md

aot_bench.py measured the AOT prototype on a 32^3 job, where one thread is as fast as two. A
speed-suite job is where the own-time targets are (RESULTS.md), and there the AOT builds being
serial (numba.pycc has no ``parallel=True``) costs something. Steps, in one invocation:

1. the job's kernels built ahead of time for this CPU (``aot_bench.py --build``: the kernels
   and signatures a run of this job calls, recorded from such a run);
2. alternating rounds of fresh processes: ``sevenfold run JOB`` on the jit kernels (numba's
   cache warm) and the same through aot_launch.py (numba never imported, every kernel serial);
   the job's own seconds from its summary line (job file read to result written) and the
   process's wall seconds;
3. in a process of its own, the job resident (``runner.run_job`` after one unmeasured run, so
   kernels are loaded and memory mapped) with numba on two threads and on one, alternating:
   what threads are worth once nothing loads;
4. the two fresh runs' solutions compared; the file written.
"""

from __future__ import annotations

import argparse
import os
import re
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))
from start_bench import load_average, revision, timed  # noqa: E402  (also sets SEVENFOLD_HOME)

PY = sys.executable
JOB_SECONDS = re.compile(r"job ([0-9.]+) s \(assembly ([0-9.]+) s, setup ([0-9.]+) s, "
                         r"solve ([0-9.]+) s, write ([0-9.]+) s\)")


def job_file(folder: Path, n: int, pattern: str) -> Path:
    """The speed suite's job for ``pattern`` (speed.py), or issue 10's 1000:1 column (column.py)."""
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "job.toml"
    if pattern == "column":
        import column

        path.write_text(column.job_text(n, folder / "result.zarr"))
    else:
        import speed

        path.write_text(speed.job_text(n, pattern, str(folder / "result.zarr")))
    return path


def fresh(argv: list[str], job: Path, env: dict[str, str]) -> dict[str, float]:
    """One fresh process: wall seconds and the summary line's seconds."""
    import shutil

    shutil.rmtree(job.parent / "result.zarr", ignore_errors=True)
    wall, cpu, out = timed([*argv, "run", str(job)], env)
    found = JOB_SECONDS.search(out)
    if found is None:
        raise SystemExit(f"no summary line in:\n{out}")
    job_s, assembly, setup, solve, write = map(float, found.groups())
    return dict(wall=wall, cpu=cpu, job=job_s, assembly=assembly, setup=setup, solve=solve, write=write)


def resident(job: Path, rounds: int) -> None:
    """Step 3 (in its own process): the job resident on two threads and on one, alternating."""
    import numba

    from sevenfold.runner import run_job

    run_job(job)
    times: dict[int, list[float]] = {2: [], 1: []}
    for _ in range(rounds):
        for threads in (2, 1):
            numba.set_num_threads(threads)
            t0 = time.perf_counter()
            run_job(job)
            times[threads].append(time.perf_counter() - t0)
    for threads, ts in times.items():
        print(f"resident_{threads}_min={min(ts):.4f}")
        print(f"resident_{threads}_median={statistics.median(ts):.4f}")


def solutions_differ(a: Path, b: Path) -> float:
    import numpy as np
    import zarr

    ua = np.asarray(zarr.open_group(str(a), mode="r")["u"])
    ub = np.asarray(zarr.open_group(str(b), mode="r")["u"])
    return float(np.abs(ua - ub).max() / np.abs(ua).max())


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--cells", type=int, default=128)
    p.add_argument("--pattern", default="inclusions",
                   help="a speed-suite pattern (speed.py) or column (column.py)")
    p.add_argument("--rounds", type=int, default=6, help="alternating rounds of fresh processes")
    p.add_argument("--resident-rounds", type=int, default=5)
    p.add_argument("--output", default=str(HERE / "RESULTS_AOT_JOB.md"))
    p.add_argument("--resident", metavar="JOB", help=argparse.SUPPRESS)
    args = p.parse_args()
    if args.resident:
        return resident(Path(args.resident), args.resident_rounds)

    load_start = load_average()
    work = Path(tempfile.mkdtemp(prefix="aot-job-bench-"))
    env = {**os.environ, "PYTHONPATH": str(ROOT / "src")}
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    n, pattern = args.cells, args.pattern
    jobs = {kind: job_file(work / kind, n, pattern) for kind in ("record", "jit", "aot")}
    jit = [PY, "-m", "sevenfold.cli"]
    aot = [PY, str(HERE / "aot_launch.py"), str(work / "aot-build" / "host")]
    timed([*jit, "run", "-q", str(jobs["jit"])], env)  # compiles if numba's cache is cold
    t0 = time.perf_counter()
    out = subprocess.run([PY, str(HERE / "aot_bench.py"), "--build", str(work / "aot-build"),
                          str(jobs["record"]), "--cpus", "host"], env=env, capture_output=True, text=True)
    if out.returncode != 0:
        raise SystemExit(f"the AOT build failed:\n{out.stdout[-3000:]}\n{out.stderr[-3000:]}")
    build_seconds = time.perf_counter() - t0
    compile_seconds = float(re.search(r"compile_seconds_host=([0-9.]+)", out.stdout).group(1))
    fresh(jit, jobs["jit"], env), fresh(aot, jobs["aot"], env)  # one unmeasured round
    rows: dict[str, list[dict[str, float]]] = {"jit": [], "aot": []}
    for _ in range(args.rounds):
        rows["jit"].append(fresh(jit, jobs["jit"], env))
        rows["aot"].append(fresh(aot, jobs["aot"], env))
    differ = solutions_differ(work / "jit" / "result.zarr", work / "aot" / "result.zarr")
    _, _, res_out = timed([PY, __file__, "--resident", str(jobs["jit"]),
                           "--resident-rounds", str(args.resident_rounds)], env)
    res = {k: float(v) for k, v in re.findall(r"(resident_\w+)=([0-9.]+)", res_out)}
    load_end = load_average()
    text = report(args, rows, res, differ, build_seconds, compile_seconds, load_start, load_end,
                  (work / "aot-build" / "signatures.txt").read_text().splitlines())
    Path(args.output).write_text(text)
    print(text)


def report(args, rows, res, differ, build_seconds, compile_seconds, load_start, load_end,
           signatures) -> str:
    from run import machine

    m = machine()

    n, pattern = args.cells, args.pattern
    cmd = " ".join(["python benchmarks/aot_job_bench.py", *sys.argv[1:]])
    w = [f"# Kernels compiled ahead of time on the {n}^3 {pattern} job (benchmarks/aot_job_bench.py)", "",
         f"Written by `{cmd}`; every number below comes from that run. Do not edit by hand: run the command again.", "",
         f"Revision {revision()}; {m['date']}. Machine: {m['cpu']}, {m['cores']} cores, {m['memory']}; "
         f"{m['os']}; Python {m['python']}, numpy {m['numpy']}, numba {m['numba']}. "
         f"Load average at start {load_start}, at end {load_end} (shared machine: compare within this file).", "",
         f"The AOT build (this CPU, {len(signatures)} signatures, serial): {compile_seconds:.1f} s of pycc "
         f"compile, {build_seconds:.1f} s with the recording run.", "",
         f"## Fresh processes ({args.rounds} alternating rounds after one unmeasured round)", "",
         "*job* = the job's own seconds from its summary line (job file read to result written); "
         "*whole* = the process's wall seconds. jit: numba's kernels from its warm cache, two threads; "
         "AOT: the same kernels built ahead of time, serial, numba never imported (aot_launch.py).", "",
         "| kernels | job min (s) | job median (s) | assembly | setup | solve | write | whole min (s) | whole median (s) |",
         "|---|---:|---:|---:|---:|---:|---:|---:|---:|"]
    for kind, label in (("jit", "jit (numba)"), ("aot", "AOT (serial)")):
        r = rows[kind]
        med = {k: statistics.median(x[k] for x in r) for k in r[0]}
        w.append(f"| {label} | {min(x['job'] for x in r):.2f} | {med['job']:.2f} | {med['assembly']:.2f} | "
                 f"{med['setup']:.2f} | {med['solve']:.2f} | {med['write']:.2f} | "
                 f"{min(x['wall'] for x in r):.3f} | {med['wall']:.3f} |")
    ratios = [a["job"] / j["job"] for j, a in zip(rows["jit"], rows["aot"])]
    w += ["", f"AOT job / jit job, round by round: median {statistics.median(ratios):.2f} "
          f"(range {min(ratios):.2f}-{max(ratios):.2f}). Summary-line seconds have two decimals.", "",
          f"Solutions: max |u_aot - u_jit| / max |u_jit| = {differ:.1e}.", "",
          f"## The job resident ({args.resident_rounds} alternating rounds in one process, after one unmeasured run)", "",
          "| numba threads | job min (s) | job median (s) |", "|---|---:|---:|",
          f"| 2 | {res['resident_2_min']:.3f} | {res['resident_2_median']:.3f} |",
          f"| 1 | {res['resident_1_min']:.3f} | {res['resident_1_median']:.3f} |", "",
          f"One thread / two, resident: {res['resident_1_min'] / res['resident_2_min']:.2f} (minima)."]
    return "\n".join(w) + "\n"


if __name__ == "__main__":
    main()
