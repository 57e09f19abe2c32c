"""Speed of the workstation queue: per-job overhead and throughput of small jobs.

    python benchmarks/queue_bench.py [--jobs 100] [--overhead-runs 10] [--results PATH]

One invocation, in a fresh queue home under a temporary folder:

1. cold start: a draining worker on an empty queue compiles the kernels into the home's
   numba cache (the one-time cost of a new home);
2. per-job overhead, warm: one ``worker --slots 1`` waits idle; each of ``--overhead-runs``
   small jobs is submitted and timed from the start of the submit to the moment its first
   CG iteration appears in the residual log. Measured twice: submitting through the API in
   this process (the queue's own cost), and through a ``sevenfold submit`` process (what a
   user at a shell sees, interpreter start included);
3. throughput: ``--jobs`` small jobs (24^3 cells, AMG-CG) are queued, then one
   ``worker --slots 2 --drain`` runs them on this 2-core machine. Jobs per minute are
   counted from the first job's start to the last job's end (events in the queue's
   database), and over the worker's whole life (warm-up included);
4. for reference, the same jobs run one after another by ``run_job`` in one process with
   no queue, the cost of the solves themselves;
5. writes benchmarks/RESULTS_QUEUE.md.

The machine is shared: the numbers are of one run; compare them within the run.
"""

from __future__ import annotations

import argparse
import datetime
import json
import os
import platform
import signal
import sqlite3
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
OVERHEAD_TARGET = 1.0  # s, submit to first iteration with a warm cache
THROUGHPUT_TARGET = 100.0  # small jobs per minute through 2 slots on 2 cores
SMALL_CELLS = 24

JOB = """name = "{name}"
physics = "heat"
[grid]
cells = [{n}, {n}, {n}]
size = [0.024, 0.024, 0.024]
[material]
value = 20.0
[[material.region]]
box = {{ min = [0.0, 0.0, 0.0], max = [0.012, 0.024, 0.024] }}
value = {k}
[source]
value = 1.0e5
[boundary]
x_min = {{ type = "dirichlet", value = 300.0 }}
z_max = {{ type = "robin", coefficient = 50.0, reference = 290.0 }}
[solver]
method = "{method}"
rtol = 1e-8
[output]
path = "results/{{name}}.zarr"
"""


def write_job(folder: Path, name: str, k: float = 5.0, method: str = "amg", n: int = SMALL_CELLS) -> Path:
    path = folder / f"{name}.toml"
    path.write_text(JOB.format(name=name, n=n, k=k, method=method))
    return path


def sevenfold(*args: str) -> list[str]:
    return [sys.executable, "-m", "sevenfold.cli", *args]


class Worker:
    def __init__(self, home: Path, *args: str) -> None:
        home.mkdir(parents=True, exist_ok=True)
        self.out = home / f"bench-worker-{time.monotonic_ns()}.out"
        self._fh = open(self.out, "w")
        self.proc = subprocess.Popen(sevenfold("worker", "--home", str(home), *args),
                                     stdout=self._fh, stderr=subprocess.STDOUT)

    def wait_ready(self, slots: int, timeout: float = 900.0) -> None:
        deadline = time.monotonic() + timeout
        while self.out.read_text().count(": ready,") < slots:
            if self.proc.poll() is not None or time.monotonic() > deadline:
                raise SystemExit(f"the worker did not get ready:\n{self.out.read_text()}")
            time.sleep(0.05)

    def wait(self, timeout: float = 3600.0) -> int:
        code = self.proc.wait(timeout)
        self._fh.close()
        return code

    def stop(self) -> None:
        self.proc.send_signal(signal.SIGTERM)
        self.wait(120)


def first_iteration(log: Path, deadline: float) -> float:
    """Poll a residual log until a record of iteration >= 1 appears; its monotonic time."""
    while time.monotonic() < deadline:
        try:
            with open(log, encoding="utf-8") as fh:
                for line in fh:
                    if line.endswith("\n") and '"iteration"' in line and json.loads(line)["iteration"] >= 1:
                        return time.monotonic()
        except FileNotFoundError:
            pass
        time.sleep(0.002)
    raise SystemExit(f"no first iteration in {log}")


def wait_state(queue, job_id: int, states: tuple[str, ...], timeout: float = 600.0) -> None:
    deadline = time.monotonic() + timeout
    while queue.get(job_id).state not in states:
        if time.monotonic() > deadline:
            raise SystemExit(f"job {job_id} did not reach {states}")
        time.sleep(0.02)


def measure_overhead(home_path: Path, folder: Path, runs: int) -> dict[str, list[float]]:
    from sevenfold.queue.db import Queue
    from sevenfold.queue.home import locate
    from sevenfold.queue.submit import submit
    from sevenfold.residual_log import log_path

    home = locate(home_path)
    worker = Worker(home_path, "--slots", "1")
    worker.wait_ready(1)
    api, shell = [], []
    try:
        with Queue(home) as q:
            submit(q, [write_job(folder, "overhead-import")])  # imports the engine in this process once
            wait_state(q, 1, ("done",))
            for i in range(runs):
                for kind in ("api", "cli"):
                    path = write_job(folder, f"overhead-{kind}-{i}", k=5.0 + i)
                    log = log_path(folder / "results" / f"overhead-{kind}-{i}.zarr")
                    t0 = time.monotonic()
                    if kind == "api":
                        (j,) = submit(q, [path])
                        t1 = first_iteration(log, t0 + 600)
                        api.append(t1 - t0)
                    else:
                        proc = subprocess.Popen(sevenfold("submit", str(path), "--home", str(home_path), "--json"),
                                                stdout=subprocess.PIPE, text=True)
                        t1 = first_iteration(log, t0 + 600)
                        j_id = json.loads(proc.communicate()[0])[0]["id"]
                        shell.append(t1 - t0)
                        j = q.get(j_id)
                    wait_state(q, j.id, ("done", "failed"))
                    if q.get(j.id).state != "done":
                        raise SystemExit(f"overhead job failed: {q.get(j.id).error}")
    finally:
        worker.stop()
    return {"api": api, "cli": shell}


def measure_throughput(home_path: Path, folder: Path, jobs: int, method: str) -> dict[str, float]:
    from sevenfold.queue.db import Queue
    from sevenfold.queue.home import locate
    from sevenfold.queue.submit import submit

    home = locate(home_path)
    files = [write_job(folder, f"tp-{method}-{i:03d}", k=1.0 + i % 50, method=method) for i in range(jobs)]
    with Queue(home) as q:
        t0 = time.monotonic()
        queued = submit(q, files)
        submit_seconds = time.monotonic() - t0
    ids = [j.id for j in queued]
    t0 = time.monotonic()
    worker = Worker(home_path, "--slots", "2", "--drain")
    if worker.wait() != 0:
        raise SystemExit(f"the worker failed:\n{worker.out.read_text()}")
    wall = time.monotonic() - t0
    with Queue(home) as q:
        final = q.jobs(ids=ids)
    bad = [j for j in final if j.state != "done"]
    if bad:
        raise SystemExit(f"{len(bad)} jobs did not finish: {bad[0].error}")
    marks = ",".join("?" * len(ids))
    with sqlite3.connect(home.db) as c:
        first = c.execute(f"SELECT MIN(time) FROM events WHERE event = 'started' AND job IN ({marks})", ids).fetchone()[0]
        last = c.execute(f"SELECT MAX(time) FROM events WHERE event = 'done' AND job IN ({marks})", ids).fetchone()[0]
    inside = [j.summary["seconds"]["job"] for j in final]
    methods = sorted({j.summary["method"] for j in final})
    return {
        "jobs": jobs, "span": last - first, "wall": wall, "submit": submit_seconds,
        "per_minute": 60 * jobs / (last - first), "per_minute_wall": 60 * jobs / wall,
        "run_job_mean": statistics.mean(inside), "methods": ", ".join(methods),
    }


def measure_in_process(folder: Path, jobs: int) -> dict[str, float]:
    """The same small jobs by run_job one after another in one process, no queue.

    The process gets the threads a child of a 2-slot worker gets (numba 1, BLAS 1), so the
    ratio to the queue shows what the second slot gains and what the queue costs.
    """
    files = [write_job(folder, f"plain-{i:03d}", k=1.0 + i % 50) for i in range(jobs)]
    env = dict(os.environ, NUMBA_NUM_THREADS="1", OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1",
               MKL_NUM_THREADS="1")
    proc = subprocess.run([sys.executable, __file__, "--plain", *map(str, files)], env=env,
                          capture_output=True, text=True, check=True)
    span = float(proc.stdout.strip().splitlines()[-1])
    return {"jobs": jobs, "span": span, "per_minute": 60 * jobs / span}


def plain_loop(files: list[str]) -> None:
    from sevenfold.runner import run_job

    run_job(files[0])  # compiled kernels and imports outside the timer
    t0 = time.perf_counter()
    for f in files:
        run_job(f)
    print(time.perf_counter() - t0)


def machine() -> dict[str, str]:
    import numba

    try:
        commit = subprocess.run(["git", "rev-parse", "--short", "HEAD"], cwd=HERE, capture_output=True,
                                text=True).stdout.strip()
    except OSError:
        commit = "?"
    return {
        "date": datetime.datetime.now(datetime.timezone.utc).strftime("%Y-%m-%d %H:%M UTC"),
        "commit": commit or "?",
        "cores": f"{os.cpu_count()} (usable: {len(os.sched_getaffinity(0))})",
        "load average at start": " ".join(f"{x:.2f}" for x in os.getloadavg()),
        "python": platform.python_version(),
        "numba": numba.__version__,
    }


def report(info: dict[str, str], cold: float, overhead: dict[str, list[float]], amg: dict, auto: dict,
           plain: dict, load_end: str) -> str:
    api, cli = overhead["api"], overhead["cli"]
    ok = lambda cond: "met" if cond else "**not met**"  # noqa: E731
    lines = [
        "# Queue benchmarks",
        "",
        "Written by `python benchmarks/queue_bench.py`; do not edit by hand, run the command again.",
        "",
        "## Machine",
        "",
        "| | |",
        "|---|---|",
        *[f"| {k} | {v} |" for k, v in info.items()],
        f"| load average at end | {load_end} |",
        "",
        "## Targets",
        "",
        "| target | measured | verdict |",
        "|---|---|---|",
        f"| per-job overhead, submit to first iteration, warm cache, <= {OVERHEAD_TARGET:.0f} s | "
        f"median {statistics.median(api):.2f} s, max {max(api):.2f} s over {len(api)} jobs (API submit) | "
        f"{ok(statistics.median(api) <= OVERHEAD_TARGET)} |",
        f"| >= {THROUGHPUT_TARGET:.0f} small ({SMALL_CELLS}^3) jobs per minute, 2 slots, 2 cores | "
        f"{amg['per_minute']:.0f} jobs/min ({amg['jobs']} jobs in {amg['span']:.1f} s, {amg['methods']}) | "
        f"{ok(amg['per_minute'] >= THROUGHPUT_TARGET)} |",
        "",
        "## Details",
        "",
        "| measurement | value |",
        "|---|---|",
        f"| cold start: first compile of the kernels into a new home | {cold:.1f} s |",
        f"| overhead through `sevenfold submit` (a new process per submit) | median {statistics.median(cli):.2f} s, "
        f"max {max(cli):.2f} s over {len(cli)} jobs |",
        f"| throughput over the worker's whole life (warm-up included) | {amg['per_minute_wall']:.0f} jobs/min "
        f"({amg['wall']:.1f} s) |",
        f"| time inside `run_job` per job, mean, in the queue's children | {amg['run_job_mean']:.3f} s |",
        f"| queue cost per job: 2 slots x span / jobs - time inside `run_job` | "
        f"{2 * amg['span'] / amg['jobs'] - amg['run_job_mean']:.3f} s |",
        f"| same jobs by `run_job` in one process, no queue (numba 1 thread, BLAS 1) | "
        f"{plain['per_minute']:.0f} jobs/min ({plain['jobs']} jobs in {plain['span']:.1f} s) |",
        f"| throughput ratio, queue with 2 slots / one process without queue | "
        f"{amg['per_minute'] / plain['per_minute']:.2f} |",
        f"| submitting {amg['jobs']} jobs (validation and snapshot, one transaction) | {amg['submit']:.2f} s |",
        f"| same {auto['jobs']} jobs with `method = \"auto\"` ({auto['methods']}) | "
        f"{auto['per_minute']:.0f} jobs/min, {auto['run_job_mean']:.2f} s inside `run_job` per job |",
        "",
        "## How it is measured",
        "",
        f"Small job: {SMALL_CELLS}^3 cells of a heat problem with one material region (k = 20 and a",
        "varying second value), a fixed face and a convective face, rtol 1e-8, AMG-CG unless said.",
        "Overhead: the worker is idle and warm; the clock starts before the submit and stops when",
        "the job's residual log first shows iteration 1, polled every 2 ms. Throughput: all jobs",
        "are queued first; jobs per minute count from the first job's start to the last job's end",
        "as the queue's database records them.",
        "",
    ]
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--jobs", type=int, default=100, help="small jobs for the throughput (default 100)")
    p.add_argument("--auto-jobs", type=int, default=20, help="jobs for the method=auto row (default 20)")
    p.add_argument("--overhead-runs", type=int, default=10)
    p.add_argument("--results", type=Path, default=HERE / "RESULTS_QUEUE.md")
    p.add_argument("--plain", nargs="+", help=argparse.SUPPRESS)  # internal: the no-queue loop
    args = p.parse_args(argv)
    if args.plain:
        plain_loop(args.plain)
        return 0
    info = machine()
    with tempfile.TemporaryDirectory(prefix="sevenfold-queue-bench-") as tmp:
        root = Path(tmp)
        home, folder = root / "home", root / "jobs"
        folder.mkdir()
        t0 = time.monotonic()
        w = Worker(home, "--drain")
        if w.wait() != 0:
            raise SystemExit(w.out.read_text())
        cold = time.monotonic() - t0
        print(f"cold start {cold:.1f} s", flush=True)
        overhead = measure_overhead(home, folder, args.overhead_runs)
        print(f"overhead api {overhead['api']}\noverhead cli {overhead['cli']}", flush=True)
        amg = measure_throughput(home, folder, args.jobs, "amg")
        print(f"throughput {amg}", flush=True)
        auto = measure_throughput(home, folder, args.auto_jobs, "auto")
        print(f"auto {auto}", flush=True)
        plain = measure_in_process(folder, min(args.jobs, 40))
        print(f"in process {plain}", flush=True)
    text = report(info, cold, overhead, amg, auto, plain, " ".join(f"{x:.2f}" for x in os.getloadavg()))
    args.results.write_text(text)
    print(text)
    return 0


if __name__ == "__main__":
    sys.exit(main())
