"""How fast sevenfold starts: whole `sevenfold` processes, measured against a baseline in the
same run, and optionally against an older revision of the code in the same run.

    python benchmarks/start_bench.py                    # warm run and check of a 32^3 job, and
                                                        # the run handed to a running worker
    python benchmarks/start_bench.py --base 6d2df71     # the same commands from that revision
    python benchmarks/start_bench.py --cold             # first runs from an empty numba cache
    python benchmarks/start_bench.py --cold --base def0f19 --cold-methods gmg --cold-repeats 2

Each command runs ``--repeats`` times as its own process; the table shows the minimum and the
median wall time and the median CPU time (user + system, from wait4), which a busy machine
inflates less than wall time. Baselines: ``python -c pass`` and ``python -c "import numpy,
scipy"``. The job is the speed suite's 1000:1 column at 32^3 (gmg, rtol 1e-8, Dirichlet 0
on all faces, a sine source). ``--cold`` runs each method's first job with a fresh
``NUMBA_CACHE_DIR`` and reports compile seconds as the cold run minus a warm run of the same
job (CPU includes the child processes a run waits for, such as the warm-up's compiler; with
``--base`` the old code's first runs alternate with this code's). Writes benchmarks/RESULTS_START.md (replacing it) and prints the same text.
"""

from __future__ import annotations

import argparse
import os
import shutil
import statistics
import subprocess
import sys
import tarfile
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(ROOT / "src"))
sys.path.insert(0, str(HERE))
from run import machine  # noqa: E402  (one description of the machine)

COLUMN = """
name = "column{n}"
physics = "generic"
[grid]
cells = [{n}, {n}, {n}]
size = [1.0, 1.0, 1.0]
[material]
value = 1.0
[[material.region]]
box = {{ min = [0.3, 0.3, 0.0], max = [0.7, 0.7, 1.0] }}
value = 1000.0
[source]
expression = "sin(pi * x) * sin(pi * y) * sin(pi * z)"
[boundary]
x_min = {{ type = "dirichlet", value = 0.0 }}
x_max = {{ type = "dirichlet", value = 0.0 }}
y_min = {{ type = "dirichlet", value = 0.0 }}
y_max = {{ type = "dirichlet", value = 0.0 }}
z_min = {{ type = "dirichlet", value = 0.0 }}
z_max = {{ type = "dirichlet", value = 0.0 }}
[solver]
method = "{method}"
rtol = 1e-8
[output]
path = "{name}.zarr"
"""
CONSTANT = COLUMN.replace("value = 1000.0", "value = 1.0")  # fft accepts a constant k only


def load_average() -> str:
    return " ".join(f"{v:.2f}" for v in os.getloadavg())


def write_job(folder: Path, method: str, n: int = 32) -> Path:
    text = (CONSTANT if method == "fft" else COLUMN).format(n=n, method=method, name=f"{method}{n}")
    path = folder / f"{method}{n}.toml"
    path.write_text(text)
    return path


def timed(argv: list[str], env: dict[str, str]) -> tuple[float, float, str]:
    """Wall and CPU (user + system) seconds of one process, and its output."""
    t0 = time.perf_counter()
    proc = subprocess.Popen(argv, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, env=env)
    out = proc.stdout.read().decode()  # type: ignore[union-attr]
    _, status, usage = os.wait4(proc.pid, 0)
    wall = time.perf_counter() - t0
    proc.returncode = os.waitstatus_to_exitcode(status)
    if proc.returncode not in (0,):
        raise SystemExit(f"{' '.join(argv)} exited {proc.returncode}:\n{out}")
    return wall, usage.ru_utime + usage.ru_stime, out


def measure(argv: list[str], env: dict[str, str], repeats: int) -> dict[str, float]:
    timed(argv, env)  # warm: file cache, numba cache
    walls, cpus = [], []
    for _ in range(repeats):
        w, c, _ = timed(argv, env)
        walls.append(w)
        cpus.append(c)
    return {"min": min(walls), "median": statistics.median(walls), "cpu": statistics.median(cpus)}


def revision(ref: str = "HEAD") -> str:
    try:
        rev = subprocess.run(["git", "-C", str(ROOT), "rev-parse", "--short", ref], capture_output=True,
                             text=True, check=True).stdout.strip()
        dirty = subprocess.run(["git", "-C", str(ROOT), "status", "--porcelain", "--", "src"],
                               capture_output=True, text=True).stdout.strip()
        return rev + (" (with uncommitted changes in src)" if dirty and ref == "HEAD" else "")
    except (OSError, subprocess.CalledProcessError):
        return "unknown"


def extract(ref: str, into: Path) -> Path:
    """The package source of revision ``ref``, for PYTHONPATH (its own numba cache in __pycache__)."""
    into.mkdir(parents=True, exist_ok=True)
    archive = into / "src.tar"
    with open(archive, "wb") as fh:
        subprocess.run(["git", "-C", str(ROOT), "archive", ref, "src"], stdout=fh, check=True)
    with tarfile.open(archive) as tar:
        tar.extractall(into, filter="data")
    return into / "src"


def import_profile(env: dict[str, str], job: Path, command: list[str] | None = None) -> list[tuple[str, float]]:
    """Top-level modules a warm run imports, by cumulative import seconds (-X importtime);
    ``command`` (the program and its arguments before ``run -q JOB``) replaces ``-m sevenfold.cli``."""
    command = command or ["-m", "sevenfold.cli"]
    proc = subprocess.run([sys.executable, "-X", "importtime", *command, "run", "-q", str(job)],
                          capture_output=True, text=True, env=env)
    rows = []
    for line in proc.stderr.splitlines():
        if not line.startswith("import time:") or "cumulative" in line:
            continue
        _, cumulative, name = line[len("import time:"):].split("|")
        if not name.startswith(" ") or name.startswith("  "):
            continue  # only modules imported directly by the program (depth 0)
        rows.append((name.strip(), int(cumulative) / 1e6))
    rows.sort(key=lambda r: -r[1])
    return rows[:12]


def handed_off(sevenfold: list[str], env: dict[str, str], job: Path, work: Path, repeats: int) -> dict[str, float]:
    """``sevenfold run -q`` with a worker (one slot) of a fresh queue home running: the job is
    handed to it. The worker's first start compiles into that home's cache, untimed; CPU is
    the client process's own (the worker's is not counted)."""
    home = work / "queue-home"
    log = work / "worker.out"
    with open(log, "w") as fh:
        worker = subprocess.Popen(sevenfold + ["worker", "--home", str(home), "--slots", "1"],
                                  stdout=fh, stderr=subprocess.STDOUT, env=env)
    try:
        deadline = time.monotonic() + 900
        while "ready" not in log.read_text():
            if worker.poll() is not None or time.monotonic() > deadline:
                raise SystemExit(f"the worker did not get ready:\n{log.read_text()}")
            time.sleep(0.2)
        result = measure(sevenfold + ["run", "-q", "--home", str(home), str(job)], env, repeats)
        from sevenfold.store import read_attrs

        if "queue" not in read_attrs(job.with_suffix(".zarr")):
            raise SystemExit("the measured run was not handed to the worker")
        return result
    finally:
        worker.terminate()
        worker.wait(120)


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--repeats", type=int, default=7)
    p.add_argument("--base", help="also measure this git revision's code (e.g. 6d2df71)")
    p.add_argument("--cold", action="store_true", help="first runs per method from an empty numba cache")
    p.add_argument("--cold-methods", default="gmg,amg,direct,fft",
                   help="methods whose first run --cold measures (comma-separated; gmg64: "
                        "gmg on column64, whose levels need what column32's single level does not)")
    p.add_argument("--cold-repeats", type=int, default=1,
                   help="cold runs per method and code (each from its own empty cache)")
    p.add_argument("--tree", action="append", default=[], metavar="LABEL=SRC",
                   help="also measure an experimental copy of the package source (a src folder)")
    p.add_argument("--no-worker", action="store_true",
                   help="skip the run handed to a running worker (its first start compiles, ~40 s)")
    p.add_argument("--output", default=str(HERE / "RESULTS_START.md"))
    args = p.parse_args()
    load_start = load_average()
    work = Path(tempfile.mkdtemp(prefix="start-bench-"))
    py = sys.executable
    env = {**os.environ, "PYTHONPATH": str(ROOT / "src")}
    env.pop("NUMBA_CACHE_DIR", None)
    # as installed: byte-compiled modules are written and reused (pip compiles them at install)
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    jobs = {m: write_job(work, m) for m in ("gmg", "fft", "amg", "direct")}
    jobs["direct"] = write_job(work, "direct", 16)
    jobs["gmg64"] = write_job(work, "gmg", 64)  # two smoothed levels, threaded vector updates
    sevenfold = [py, "-m", "sevenfold.cli"]
    rows: list[tuple[str, str, dict[str, float]]] = []
    rows.append(("baseline", "python -c pass", measure([py, "-c", "pass"], env, args.repeats)))
    rows.append(("baseline", 'python -c "import numpy, scipy"', measure([py, "-c", "import numpy, scipy"], env, args.repeats)))
    trees = [("this", env)]
    if args.base:
        base_src = extract(args.base, work / "base")
        trees.append((args.base, {**env, "PYTHONPATH": str(base_src)}))
    for spec in args.tree:
        label, src = spec.split("=", 1)
        trees.append((label, {**env, "PYTHONPATH": str(Path(src).resolve())}))
    for label, tree_env in trees:
        rows.append((label, "sevenfold check column32 (gmg)", measure(sevenfold + ["check", str(jobs["gmg"])], tree_env, args.repeats)))
        rows.append((label, "sevenfold run -q column32, gmg (warm)", measure(sevenfold + ["run", "-q", str(jobs["gmg"])], tree_env, args.repeats)))
        rows.append((label, "sevenfold run -q constant32, fft (warm)", measure(sevenfold + ["run", "-q", str(jobs["fft"])], tree_env, args.repeats)))
    if not args.no_worker:
        rows.append(("this", "sevenfold run -q column32, gmg, handed to a running worker",
                     handed_off(sevenfold, env, jobs["gmg"], work, args.repeats)))
    profile = import_profile(env, jobs["gmg"])
    cold_rows = []
    if args.cold:  # every code's cold runs alternate, so a load change hits them alike
        for method in args.cold_methods.split(","):
            argv = sevenfold + ["run", "-q", str(jobs[method])]
            for i in range(args.cold_repeats):
                for label, tree_env in trees:
                    cache = work / f"cache-{method}-{label}-{i}"
                    shutil.rmtree(cache, ignore_errors=True)
                    cold_env = {**tree_env, "NUMBA_CACHE_DIR": str(cache)}
                    wall, cpu, out = timed(argv, cold_env)
                    warm = measure(argv, cold_env, 3)
                    said = "compiling the numerical kernels once" in out
                    cold_rows.append((label, method, wall, cpu, warm["median"], warm["cpu"], said))
    load_end = load_average()
    text = report(rows, cold_rows, profile, args, load_start, load_end)
    out = Path(args.output)
    kept = out.read_text().split(NOTES, 1)[1] if out.exists() and NOTES in out.read_text() else "\n"
    out.write_text(text + "\n" + NOTES + kept)  # the hand-written analysis below the marker stays
    print(text)
    shutil.rmtree(work, ignore_errors=True)


NOTES = "<!-- analysis: kept by start_bench.py when it rewrites the tables above -->"


def report(rows, cold_rows, profile, args, load_start, load_end) -> str:
    m = machine()
    base = rows[1][2]["min"]
    lines = [
        "# Start-up: whole `sevenfold` processes (benchmarks/start_bench.py)",
        "",
        f"Revision {revision()}; " + (f"compared with {args.base} in the same run; " if args.base else "")
        + f"{m['date']}. Machine: {m['cpu']}, {m['cores']} cores, {m['memory']}; {m['os']}; "
        f"Python {m['python']}, numpy {m['numpy']}, scipy {m['scipy']}, numba {m['numba']}.",
        f"Load average at start {load_start}, at end {load_end} (the machine is shared: compare "
        "within this table; CPU seconds are inflated less than wall seconds by other processes). "
        "Byte-compiled modules are written and reused, as after `pip install` "
        "(`PYTHONDONTWRITEBYTECODE` unset).",
        "",
        f"{args.repeats} runs each after one unmeasured run. Ratio: minimum wall time over the "
        "minimum of `python -c \"import numpy, scipy\"`.",
        "",
        "| code | command | wall min (s) | wall median (s) | CPU median (s) | ratio to numpy+scipy |",
        "|---|---|---:|---:|---:|---:|",
    ]
    for label, what, r in rows:
        lines.append(f"| {label} | {what} | {r['min']:.3f} | {r['median']:.3f} | {r['cpu']:.3f} | {r['min'] / base:.2f} |")
    lines += ["", "Imports of a warm gmg run (`python -X importtime`, top level, cumulative seconds):", "",
              "| module | s |", "|---|---:|"]
    lines += [f"| {name} | {s:.3f} |" for name, s in profile]
    if cold_rows:
        lines += ["", "First run after a fresh install (empty `NUMBA_CACHE_DIR`), then the same job warm "
                  "(median of 3); compile = cold minus warm:", "",
                  "| code | method | cold wall (s) | cold CPU (s) | warm wall (s) | warm CPU (s) | compile wall (s) | compile CPU (s) | notice said |",
                  "|---|---|---:|---:|---:|---:|---:|---:|---|"]
        for label, method, wall, cpu, wwall, wcpu, said in cold_rows:
            lines.append(f"| {label} | {method} | {wall:.1f} | {cpu:.1f} | {wwall:.2f} | {wcpu:.2f} | {wall - wwall:.1f} | "
                         f"{cpu - wcpu:.1f} | {'yes' if said else 'NO'} |")
    return "\n".join(lines) + "\n"


if __name__ == "__main__":
    main()
