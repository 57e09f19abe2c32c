"""Speed benchmarks of sevenfold against the plain numpy + scipy + pyamg script (baseline.py).

    python benchmarks/run.py [--sizes 64 128 256] [--big 512 640] [--quick] # the speed suite
    python benchmarks/run.py --suite engine [--sizes 64 128] [--quick]      # the engine comparison

``--suite speed`` (the default) is benchmarks/speed.py: method auto on constant, layered and
inclusion patterns, 512^3 for sevenfold alone; writes benchmarks/RESULTS.md and speed.png.

``--suite engine`` compares the engines with amg on both sides and writes
benchmarks/RESULTS_ENGINE.md. One invocation, same problems and tolerance on both sides:

1. writes sevenfold job files matching baseline.py (same grid, coefficient boxes, faces, rtol);
2. times assembly alone, warm, interleaved, best of many, in this process: sevenfold's
   ``assemble(build_problem(spec))`` (problem built outside the timer) against baseline.py's
   COO assembly, and checks that the two matrices and right-hand sides are the same;
3. runs whole processes of ``sevenfold run JOB`` and ``python benchmarks/baseline.py``,
   alternating, best wall time of ``--runs``, with each child's peak RSS from /usr/bin/time;
4. checks that the solutions agree, and the residual of sevenfold's solution in the
   baseline's system;
5. writes benchmarks/RESULTS_ENGINE.md (``--quick`` prints it unless ``--results`` is given).
"""

from __future__ import annotations

import argparse
import contextlib
import datetime
import json
import os
import platform
import re
import shlex
import shutil
import subprocess
import sys
import tempfile
import time
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path

# This process times warm gmg solves itself: it runs BLAS on one thread, as the `sevenfold`
# command does (before numpy loads), and keeps numpy's huge pages, as a worker's slot does;
# the baseline's children get the environment as it was given (GIVEN_ENVIRONMENT), with
# their libraries' own defaults.
GIVEN_ENVIRONMENT = dict(os.environ)
from sevenfold import one_blas_thread  # noqa: E402

one_blas_thread()

import numpy as np  # noqa: E402

# Timed `sevenfold run` processes solve in their own process: an empty default queue home of
# their own, so that `run` hands nothing to a worker the user may have running.
os.environ["SEVENFOLD_HOME"] = os.path.join(tempfile.gettempdir(), "sevenfold-bench-no-queue")

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import baseline  # noqa: E402

ASSEMBLY_TARGET = 20e6  # cells/s, numba assembly at 128^3 with variable k
ASSEMBLY_TARGET_CELLS = 128
AGREEMENT_LIMIT = 1e-6  # max |u_sevenfold - u_baseline| / max |u_baseline|
RESIDUAL_LIMIT = 10 * baseline.RTOL  # sevenfold's solution in the baseline's system


# ---------------------------------------------------------------- job files
def job_text(n: int, name: str, output: str) -> str:
    """A sevenfold job file for baseline.py's problem on n^3 cells."""
    lines = [
        f'name = "{name}"',
        'physics = "generic"',
        "",
        "[grid]",
        f"cells = [{n}, {n}, {n}]",
        "size = [1.0, 1.0, 1.0]",
        "",
        "[material]",
        f"value = {baseline.K_BACKGROUND!r}",
    ]
    for lo, hi, value in baseline.BOXES:
        lines += [
            "",
            "[[material.region]]",
            f"box = {{ min = [{', '.join(map(repr, lo))}], max = [{', '.join(map(repr, hi))}] }}",
            f"value = {value!r}",
        ]
    lines += [
        "",
        "[source]",
        "value = 0.0",
        "",
        "[boundary]",
        f'x_min = {{ type = "dirichlet", value = {baseline.U_X_MIN!r} }}',
        f'x_max = {{ type = "dirichlet", value = {baseline.U_X_MAX!r} }}',
        "",
        "[solver]",
        'method = "amg"',
        'amg = "smoothed_aggregation"',
        f"rtol = {baseline.RTOL!r}",
        f"max_iterations = {baseline.MAX_ITERATIONS}",
        "",
        "[output]",
        f'path = "{output}"',
        "",
    ]
    return "\n".join(lines)


def write_job(folder: Path, n: int) -> Path:
    path = folder / f"bench-{n}.toml"
    path.write_text(job_text(n, f"bench-{n}", f"bench-{n}.zarr"))
    return path


# ---------------------------------------------------------------- machine and load
def machine() -> dict[str, str]:
    import numba
    import pyamg
    import scipy

    cpu = "unknown"
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    mem = "unknown"
    try:
        for line in Path("/proc/meminfo").read_text().splitlines():
            if line.startswith("MemTotal:"):
                mem = f"{int(line.split()[1]) / 2**20:.1f} GiB"
    except OSError:
        pass
    import sevenfold

    return {
        "date": datetime.datetime.now().astimezone().strftime("%Y-%m-%d %H:%M %Z"),
        "cpu": cpu,
        "cores": f"{os.cpu_count()} (usable by this process: {len(os.sched_getaffinity(0))})",
        "memory": mem,
        "os": platform.platform(),
        "python": platform.python_version(),
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "numba": f"{numba.__version__} ({numba.get_num_threads()} threads)",
        "pyamg": pyamg.__version__,
        "sevenfold": sevenfold.__version__,
    }


def report_head(script: str, argv: list[str] | None, title: str) -> tuple[list[str], dict[str, str]]:
    """A result file's heading (title, the command and its date) and the machine's table with
    the revision and load average, for the small benchmarks that write one file per run."""
    import datetime

    info = machine()
    info["sevenfold revision"] = subprocess.run(["git", "rev-parse", "--short", "HEAD"], capture_output=True,
                                                text=True, cwd=HERE, check=False).stdout.strip()
    info["load average"] = " ".join(f"{x:.2f}" for x in os.getloadavg())
    date = datetime.datetime.now(datetime.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    command = f"python benchmarks/{script} " + shlex.join(sys.argv[1:] if argv is None else argv)
    return [f"# {title}", "", f"Written by `{command.strip()}` on {date}; every number below comes "
            "from that run. Do not edit by hand: run the command again.", ""], info


def ab_parser(doc: str, results: str, rounds: int) -> argparse.ArgumentParser:
    """The command line of an A/B script documented by ``doc``: ``--rounds`` (default
    ``rounds``) and ``--results`` (default benchmarks/``results``); the script adds its own."""
    p = argparse.ArgumentParser(description=doc.splitlines()[0])
    p.add_argument("--rounds", type=int, default=rounds)
    p.add_argument("--results", type=Path, default=HERE / results)
    return p


def description(doc: str) -> str:
    """A benchmark script's docstring without its title, its usage and its closing "Writes ..."
    sentence: the text its result file opens with."""
    import re

    body = doc.split("\n\n", 2)[2]
    ends = [m.start() for m in re.finditer(r"Writes\s+benchmarks/", body)]
    return (body[:ends[-1]] if ends else body).rstrip()


def opening(doc: str, reading: str, columns: list[str]) -> list[str]:
    """A result file's text before its table: the script's :func:`description`, how to read
    the table, and the table's head (one separator per column)."""
    return [description(doc), "", reading, "", "| " + " | ".join(columns) + " |", "|" + "---|" * len(columns)]


@contextlib.contextmanager
def revision_tree(ref: str, folder: Path) -> Iterator[Path]:
    """Revision ``ref`` checked out in a temporary git worktree ``folder``/then (its own
    kernel cache beside its sources), removed afterwards; yields its ``src`` folder, for
    PYTHONPATH."""
    tree = folder / "then"
    subprocess.run(["git", "worktree", "add", "--detach", str(tree), ref], cwd=HERE, check=True,
                   capture_output=True)
    try:
        yield tree / "src"
    finally:
        subprocess.run(["git", "worktree", "remove", "--force", str(tree)], cwd=HERE,
                       capture_output=True)


def rotation(sides: list[str], i: int) -> list[str]:
    """The order of ``sides`` in an A/B script's round ``i``: each side goes first in turn (on a
    shared host, the process right after another's exit can meet slow first touches)."""
    k = i % len(sides)
    return sides[k:] + sides[:k]


def write_report(path: Path, lines: list[str], info: dict[str, str]) -> None:
    """Write a result file: ``lines``, then the machine's table ``info`` (:func:`machine`)."""
    lines = lines + ["", "## Machine", "", "| | |", "|---|---|"] + [f"| {k} | {v} |" for k, v in info.items()]
    path.write_text("\n".join(lines) + "\n")
    print(f"wrote {path}")


def busy_cpu_seconds() -> float:
    """CPU seconds the whole machine has spent busy since boot (from /proc/stat)."""
    try:
        fields = Path("/proc/stat").read_text().splitlines()[0].split()[1:]
    except OSError:
        return float("nan")
    ticks = [int(v) for v in fields]
    idle = ticks[3] + (ticks[4] if len(ticks) > 4 else 0)  # idle + iowait
    guest = sum(ticks[8:10]) if len(ticks) > 9 else 0  # already counted in user and nice
    return (sum(ticks) - idle - guest) / os.sysconf("SC_CLK_TCK")


def other_processes() -> list[str]:
    """Command lines of other processes using CPU right now (a rough look at the load)."""
    me = {os.getpid(), os.getppid()}
    seen: list[str] = []
    for pid_dir in Path("/proc").iterdir():
        if not pid_dir.name.isdigit() or int(pid_dir.name) in me:
            continue
        try:
            stat = (pid_dir / "stat").read_text()
            state = stat.rsplit(")", 1)[1].split()[0]
            if state != "R":
                continue
            cmd = (pid_dir / "cmdline").read_bytes().replace(b"\0", b" ").decode(errors="replace").strip()
        except (OSError, IndexError):
            continue
        if cmd:
            seen.append(cmd[:100])
    return seen


# ---------------------------------------------------------------- assembly throughput
@dataclass
class Assembly:
    cells: int
    repeats: int  # rounds; one baseline assembly per round
    inner: int  # sevenfold assemblies per round, per thread count
    sevenfold_first: float
    sevenfold_best: float
    sevenfold_median: float
    sevenfold_one_thread: float  # best with numba limited to one thread
    threads: int
    baseline_best: float
    baseline_median: float
    matrix_difference: float  # max |A_s - A_b| / max |A_b|
    rhs_difference: float
    same_coefficient: bool
    nnz: int
    seconds: float  # wall time of the interleaved timings
    other_cpu: float  # busy CPU seconds of everything else on the machine meanwhile

    @property
    def sevenfold_rate(self) -> float:
        return self.cells / self.sevenfold_best

    @property
    def baseline_rate(self) -> float:
        return self.cells / self.baseline_best


def time_assembly(job: Path, n: int, repeats: int, inner: int = 5) -> Assembly:
    """Warm assembly times of both sides on the same coefficient, interleaved.

    ``repeats`` rounds of one baseline assembly, then ``inner`` sevenfold assemblies with all
    numba threads and ``inner`` with one thread, so both sides see the same quiet and busy
    spells of a shared machine; the best of each is kept.
    """
    import numba

    from sevenfold.operator import assemble
    from sevenfold.problem import build_problem
    from sevenfold.spec import load_job

    problem = build_problem(load_job(job))
    t = time.perf_counter()
    system = assemble(problem)  # compiles the kernels, or loads them from numba's cache
    first = time.perf_counter() - t
    h = 1.0 / n
    k = baseline.coefficient(n)
    same_k = bool(np.array_equal(k, problem.coefficient))
    A, b = baseline.assemble(k, (h, h, h))

    threads = numba.get_num_threads()
    times_s: list[float] = []
    times_one: list[float] = []
    times_b: list[float] = []
    busy0 = busy_cpu_seconds()
    t_all = time.perf_counter()
    cpu0 = time.process_time()
    try:
        for _ in range(repeats):
            del A, b
            t = time.perf_counter()
            A, b = baseline.assemble(k, (h, h, h))
            times_b.append(time.perf_counter() - t)
            for count, out in ((threads, times_s), (1, times_one)):
                numba.set_num_threads(count)
                for _ in range(inner):
                    del system
                    t = time.perf_counter()
                    system = assemble(problem)
                    out.append(time.perf_counter() - t)
    finally:
        numba.set_num_threads(threads)
    other = busy_cpu_seconds() - busy0 - (time.process_time() - cpu0)
    elapsed = time.perf_counter() - t_all

    # sevenfold's rows are balances of whole cells, the baseline's per unit volume
    A = A * h**3
    b = b * h**3
    scale = float(abs(A).max())
    diff = abs(system.matrix - A)
    matrix_difference = (float(diff.max()) if diff.nnz else 0.0) / scale
    rhs_difference = float(np.abs(system.rhs - b).max() / max(np.abs(b).max(), 1e-300))
    return Assembly(
        n**3, repeats, inner, first, min(times_s), float(np.median(times_s)), min(times_one), threads,
        min(times_b), float(np.median(times_b)), matrix_difference, rhs_difference, same_k, int(A.nnz),
        elapsed, max(other, 0.0),
    )


# ---------------------------------------------------------------- whole processes
@dataclass
class ProcessRun:
    wall: float
    peak_rss: int  # bytes
    cpu: float  # the child's user + system seconds
    other_cpu: float  # busy CPU seconds of everything else on the machine meanwhile
    stdout: str


TIME = Path("/usr/bin/time")


def run_process(cmd: list[str], cwd: Path, env: dict[str, str] | None = None) -> ProcessRun:
    """Run ``cmd`` to completion (in ``env``, default this process's environment): wall time,
    CPU time and the child's own peak RSS.

    The peak RSS comes from /usr/bin/time: Linux's per-child ru_maxrss (os.wait4,
    RUSAGE_CHILDREN) starts from the forking parent's peak, which is this large process.
    """
    out_path, err_path, rss_path = cwd / ".stdout", cwd / ".stderr", cwd / ".rss"
    wrapped = [str(TIME), "-f", "%M", "-o", str(rss_path)] + cmd if TIME.exists() else cmd
    with open(out_path, "wb") as out, open(err_path, "wb") as err:
        busy0 = busy_cpu_seconds()
        t0 = time.perf_counter()
        proc = subprocess.Popen(wrapped, cwd=cwd, stdout=out, stderr=err, env=env)
        _, status, usage = os.wait4(proc.pid, 0)
        wall = time.perf_counter() - t0
        busy1 = busy_cpu_seconds()
    proc.returncode = os.waitstatus_to_exitcode(status)
    text = out_path.read_text(errors="replace")
    if proc.returncode != 0:
        raise RuntimeError(
            f"{' '.join(cmd)} exited with {proc.returncode}:\n{text}\n{err_path.read_text(errors='replace')}"
        )
    if TIME.exists():
        peak = int(rss_path.read_text().split()[-1]) * 1024  # GNU time reports KiB
    else:  # an upper bound: may include this process's own peak
        peak = usage.ru_maxrss * 1024
    cpu = usage.ru_utime + usage.ru_stime
    return ProcessRun(wall, peak, cpu, max(busy1 - busy0 - cpu, 0.0), text)


def sevenfold_command() -> list[str]:
    script = Path(sys.executable).parent / "sevenfold"
    return [str(script)] if script.exists() else [sys.executable, "-m", "sevenfold.cli"]


@dataclass
class SizeResult:
    n: int
    sevenfold: list[ProcessRun] = field(default_factory=list)
    baseline: list[ProcessRun] = field(default_factory=list)
    seconds: dict[str, float] = field(default_factory=dict)  # sevenfold's attrs, best run
    iterations_sevenfold: int = 0
    iterations_baseline: int = 0
    timings_baseline: dict[str, float] = field(default_factory=dict)  # baseline's JSON, best run
    solution_difference: float = float("nan")
    residual_in_baseline: float = float("nan")
    residual_baseline: float = float("nan")
    estimate_bytes: int = 0

    @property
    def cells(self) -> int:
        return self.n**3

    def best(self, side: str) -> ProcessRun:
        return min(getattr(self, side), key=lambda r: r.wall)


def run_size(folder: Path, n: int, runs: int) -> SizeResult:
    """Alternate baseline and sevenfold processes on n^3 cells, then compare the solutions."""
    import zarr

    from sevenfold.memory import estimate_bytes

    job = write_job(folder, n)
    res = SizeResult(n, estimate_bytes=estimate_bytes(n**3, n**3, "amg"))
    zarr_path = folder / f"bench-{n}.zarr"
    npy_path = folder / f"baseline-{n}.npy"
    best_s = best_b = float("inf")
    for i in range(runs):
        for side in rotation(["baseline", "sevenfold"], i):
            if side == "baseline":
                r = run_process([sys.executable, str(HERE / "baseline.py"), "--cells", str(n),
                                 "--out", str(npy_path)], folder, GIVEN_ENVIRONMENT)
                res.baseline.append(r)
                if r.wall < best_b:
                    best_b = r.wall
                    info = json.loads(r.stdout.strip().splitlines()[-1])
                    res.timings_baseline = info
                    res.iterations_baseline = int(info["iterations"])
                    res.residual_baseline = float(info["relative_residual"])
            else:
                r = run_process(sevenfold_command() + ["run", "--no-progress", str(job), "--output", str(zarr_path)],
                                folder)
                res.sevenfold.append(r)
                if r.wall < best_s:
                    best_s = r.wall
                    attrs = zarr.open_group(str(zarr_path), mode="r").attrs
                    res.seconds = dict(attrs["seconds"])
                    res.iterations_sevenfold = int(attrs["solver"]["iterations"])
                    if "write" not in res.seconds:
                        m = re.search(r"write ([0-9.]+) s", r.stdout)
                        res.seconds["write"] = float(m.group(1)) if m else float("nan")

    group = zarr.open_group(str(zarr_path), mode="r")
    u_s = np.asarray(group[group.attrs["solution"]][...])
    u_b = np.load(npy_path)
    res.solution_difference = float(np.abs(u_s - u_b).max() / np.abs(u_b).max())
    h = 1.0 / n
    A, b = baseline.assemble(baseline.coefficient(n), (h, h, h))
    res.residual_in_baseline = float(np.linalg.norm(b - A @ u_s.ravel()) / np.linalg.norm(b))
    return res


# ---------------------------------------------------------------- report
def _mib(nbytes: float) -> str:
    return f"{nbytes / 2**20:,.0f}"


def _rate(cells_per_s: float) -> str:
    return f"{cells_per_s / 1e6:.2f} M"


def report(
    command: str, info: dict[str, str], asm: Assembly, sizes: list[SizeResult],
    load: dict[str, object], runs: int,
) -> str:
    out: list[str] = []
    w = out.append
    w("# sevenfold speed benchmarks\n")
    w(f"Written by `{command}`; do not edit by hand, run the command again.\n")
    w("## Machine\n")
    w("| | |\n|---|---|")
    for key, value in info.items():
        w(f"| {key} | {value} |")
    w("")
    w("## Problem\n")
    w("Steady -div(k grad u) = 0 on the unit cube, n^3 cells (cell-centred finite volumes, 7-point "
      "stencil). k = 1 with two walls and two inclusions of k = 1e-3 (contrast 1000:1, the boxes of "
      "`benchmarks/baseline.py`, given to sevenfold as `[[material.region]]` boxes). x_min held at 1 "
      "and x_max at 0, half a cell from the boundary centres; other faces insulated; no source. "
      f"Both sides: smoothed-aggregation AMG (pyamg defaults) preconditioning CG to relative residual "
      f"{baseline.RTOL:g}. The baseline is `benchmarks/baseline.py` (numpy COO triplets then "
      "`.tocsr()`, `pyamg.smoothed_aggregation_solver`, `scipy.sparse.linalg.cg`).\n")

    w("## Targets\n")
    at_target = asm.cells == ASSEMBLY_TARGET_CELLS**3
    met = asm.sevenfold_rate >= ASSEMBLY_TARGET
    one_thread = asm.cells / asm.sevenfold_one_thread
    if at_target and met:
        verdict = "**met**"
    elif at_target and one_thread >= ASSEMBLY_TARGET:
        verdict = (f"**not met** with {asm.threads} threads in this run; one thread reached "
                   f"{_rate(one_thread)} cells/s, while other processes used {asm.other_cpu:.0f} CPU s "
                   f"of the timings' {asm.seconds:.0f} s")
    elif at_target:
        verdict = "**not met**"
    else:
        verdict = f"not assessed (measured at {round(asm.cells ** (1 / 3))}^3, the target is at 128^3)"
    w("| target | measured | verdict |\n|---|---|---|")
    w(f"| numba assembly >= {_rate(ASSEMBLY_TARGET)} cells/s at 128^3, variable k | "
      f"{_rate(asm.sevenfold_rate)} cells/s (baseline {_rate(asm.baseline_rate)} cells/s, "
      f"{asm.sevenfold_rate / asm.baseline_rate:.1f}x) | {verdict} |")
    for s in sizes:
        ws, wb = s.best("sevenfold").wall, s.best("baseline").wall
        faster = "faster" if ws < wb else "slower"
        w(f"| end-to-end `sevenfold run` vs baseline, {s.n}^3 | {ws:.2f} s vs {wb:.2f} s wall, "
          f"ratio {wb / ws:.2f} | sevenfold {faster} |")
    agree = all(s.solution_difference <= AGREEMENT_LIMIT and s.residual_in_baseline <= RESIDUAL_LIMIT
                for s in sizes) and asm.matrix_difference <= 1e-12 and asm.rhs_difference <= 1e-12
    w(f"| solutions agree (max rel. difference <= {AGREEMENT_LIMIT:g}, sevenfold's solution has "
      f"residual <= {RESIDUAL_LIMIT:g} in the baseline's system) | see below | "
      f"{'**yes**' if agree else '**NO**'} |")
    w("")

    w("## Assembly throughput (warm, assembly only)\n")
    w(f"In this process, {asm.cells:,} cells. {asm.repeats} rounds, each one baseline assembly then "
      f"{asm.inner} sevenfold assemblies with all numba threads and {asm.inner} with one; best of each "
      f"kept. sevenfold: `assemble(problem)` with the "
      "problem built outside the timer (numba kernels: numbering, row lengths, fill; CSR wrap). Baseline: "
      "COO triplets of every face from numpy index arithmetic, then `.tocsr()`. Both from the same "
      "coefficient array to a CSR matrix and right-hand side.\n")
    w("| | best s | median s | cells/s (best) |\n|---|---|---|---|")
    w(f"| sevenfold, {asm.threads} numba threads | {asm.sevenfold_best:.4f} | {asm.sevenfold_median:.4f} | "
      f"{_rate(asm.sevenfold_rate)} |")
    w(f"| sevenfold, 1 numba thread | {asm.sevenfold_one_thread:.4f} | | {_rate(asm.cells / asm.sevenfold_one_thread)} |")
    w(f"| baseline (numpy, 1 thread) | {asm.baseline_best:.4f} | {asm.baseline_median:.4f} | "
      f"{_rate(asm.baseline_rate)} |")
    w(f"| ratio sevenfold / baseline | | | {asm.sevenfold_rate / asm.baseline_rate:.1f}x "
      f"({asm.baseline_best / asm.sevenfold_one_thread:.1f}x on one thread) |")
    w("")
    w(f"sevenfold's first call in the process (kernels loaded from numba's cache or compiled): "
      f"{asm.sevenfold_first:.3f} s. Same coefficient on both sides: {asm.same_coefficient}; "
      f"matrices ({asm.nnz:,} non-zeros) differ by at most {asm.matrix_difference:.1e} of the "
      f"largest entry, right-hand sides by {asm.rhs_difference:.1e}. Other processes used "
      f"{asm.other_cpu:.1f} CPU s during the {asm.seconds:.1f} s of these timings.\n")

    w("## End to end (whole processes)\n")
    w(f"Wall time of the whole process (interpreter start, imports, numba cache load, build, assembly, "
      f"AMG setup, CG, write), best of {runs} run(s) per side, the two sides alternating. "
      "'own' is the program's own timer up to writing the result: sevenfold's `seconds.job` from the "
      "result's attrs (spec to solution, before the write), the baseline's `total - write` "
      "(coefficient to solution). Peak RSS of each "
      "child from /usr/bin/time; bytes per unknown = peak RSS / unknowns. sevenfold's result attrs "
      "hold no write time, so its write column is read from the `sevenfold run` summary line.\n")
    w("| cells | program | wall s | CPU s | own s | assembly s | setup s | solve s | write s | iterations "
      "| peak RSS MiB | bytes/unknown |")
    w("|---|---|---|---|---|---|---|---|---|---|---|---|")
    for s in sizes:
        rs, rb = s.best("sevenfold"), s.best("baseline")
        sec, tb = s.seconds, s.timings_baseline
        w(f"| {s.n}^3 | sevenfold | {rs.wall:.2f} | {rs.cpu:.2f} | {sec.get('job', float('nan')):.2f} | "
          f"{sec.get('assemble', float('nan')):.3f} | {sec.get('setup', float('nan')):.2f} | "
          f"{sec.get('solve', float('nan')):.2f} | {sec.get('write', float('nan')):.3f} | "
          f"{s.iterations_sevenfold} | {_mib(rs.peak_rss)} | {rs.peak_rss / s.cells:.0f} |")
        w(f"| {s.n}^3 | baseline | {rb.wall:.2f} | {rb.cpu:.2f} | {tb['total'] - tb['write']:.2f} | {tb['assembly']:.3f} | "
          f"{tb['setup']:.2f} | {tb['solve']:.2f} | {tb['write']:.3f} | {s.iterations_baseline} | "
          f"{_mib(rb.peak_rss)} | {rb.peak_rss / s.cells:.0f} |")
    w("")
    w("| cells | wall ratio baseline / sevenfold | own-timer ratio | peak RSS ratio sevenfold / baseline "
      "| sevenfold's own memory estimate MiB | measured / estimate |")
    w("|---|---|---|---|---|---|")
    for s in sizes:
        rs, rb = s.best("sevenfold"), s.best("baseline")
        tb = s.timings_baseline
        own = (tb["total"] - tb["write"]) / s.seconds["job"] if s.seconds.get("job") else float("nan")
        w(f"| {s.n}^3 | {rb.wall / rs.wall:.2f} | {own:.2f} | {rs.peak_rss / rb.peak_rss:.2f} | "
          f"{_mib(s.estimate_bytes)} | {rs.peak_rss / s.estimate_bytes:.2f} |")
    w("")
    if len(sizes) >= 2:
        a, b = sizes[-2], sizes[-1]
        for side in ("sevenfold", "baseline"):
            marginal = (b.best(side).peak_rss - a.best(side).peak_rss) / (b.cells - a.cells)
            w(f"- {side}: marginal memory between {a.n}^3 and {b.n}^3 (fixed interpreter cost removed): "
              f"{marginal:.0f} bytes per unknown")
        w("")
    for s in sizes:
        tb = s.timings_baseline
        own_b = tb["total"] - tb["write"]
        w(f"- {s.n}^3: assembly is {100 * tb['assembly'] / own_b:.0f}% of the baseline's own time and AMG "
          f"setup + CG {100 * (tb['setup'] + tb['solve']) / own_b:.0f}%; both sides run the same pyamg "
          "setup and CG on the same matrix, so that part can only differ by noise and CG overheads.")
    w("")
    w("Ratios above 1 in the wall-ratio columns mean sevenfold is faster. CPU s is the child's user + "
      "system time. The memory estimate is `sevenfold.memory.estimate_bytes`, which `sevenfold run` "
      "uses to refuse jobs that do not fit.\n")

    w("## Agreement\n")
    w("| cells | max abs difference / max abs baseline | sevenfold's solution, residual in the "
      "baseline's system | baseline's own final residual |\n|---|---|---|---|")
    agreement_note = (
        "Both solve to the same relative residual; pyamg's setup draws random start vectors, so the two "
        "hierarchies, and with them the solutions, differ at about the tolerance from run to run.\n"
    )
    for s in sizes:
        w(f"| {s.n}^3 | {s.solution_difference:.2e} | {s.residual_in_baseline:.2e} | {s.residual_baseline:.2e} |")
    w("")
    w(agreement_note)

    w("## Noise\n")
    w("The machine is shared and small (2 cores); other work such as test runs may run at the same time, "
      "so absolute times move between runs. Compare ratios measured within one run; each run below "
      "records how many CPU seconds the rest of the machine used meanwhile.\n")
    w(f"- load average at start {load['start']}, at end {load['end']}")
    others = load["others"]
    if others:
        w(f"- other processes running at the start: {len(others)} "
          f"({'; '.join(f'`{c}`' for c in others[:4])})")  # type: ignore[index]
    else:
        w("- no other process was running at the start")
    w("")
    w("| cells | program | run | wall s | own CPU s | other processes' CPU s meanwhile |\n|---|---|---|---|---|---|")
    for s in sizes:
        for side in ("sevenfold", "baseline"):
            for i, r in enumerate(getattr(s, side), 1):
                w(f"| {s.n}^3 | {side} | {i} | {r.wall:.2f} | {r.cpu:.2f} | {r.other_cpu:.2f} |")
    busy = sum(r.other_cpu for s in sizes for r in s.sevenfold + s.baseline)
    total = sum(r.wall for s in sizes for r in s.sevenfold + s.baseline)
    w("")
    if busy > 0.1 * total:
        w(f"Other work used {busy:.0f} CPU seconds during {total:.0f} s of timed runs: the numbers above "
          "were taken on a busy machine.\n")
    else:
        w("The rest of the machine was nearly idle during the timed runs.\n")
    return "\n".join(out)


# ---------------------------------------------------------------- main
def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description="sevenfold speed benchmarks against benchmarks/baseline.py")
    p.add_argument("--suite", choices=("speed", "engine"), default="speed",
                   help="speed (default): method auto, three patterns, RESULTS.md and speed.png; "
                        "engine: amg on both sides, assembly throughput, RESULTS_ENGINE.md")
    p.add_argument("--sizes", type=int, nargs="+",
                   help="cells along each axis (speed: 64 128 256, --quick 64; engine: 64 128, --quick 32 64)")
    p.add_argument("--big", type=int, nargs="+",
                   help="speed: sizes run by sevenfold alone, layered (default 512; 0 skips); the first "
                        "is timed against the 60 s target, the others only have to fit in 24 GB")
    p.add_argument("--lean", type=int, nargs="*", default=[],
                   help="speed: sizes whose layered job runs again with gmg's finest level smoothed on "
                        "the float64 arrays (what it does when memory is short), for its memory")
    p.add_argument("--quick", action="store_true",
                   help="speed: 64^3 only, no big run; engine: small sizes, assembly at 64^3, one run, "
                        "prints the report unless --results")
    p.add_argument("--assembly-cells", type=int, help="cells per axis of the assembly timing (default 128)")
    p.add_argument("--repeats", type=int, help="rounds of assembly timings, best kept (default 7)")
    p.add_argument("--runs", type=int, help="whole-process runs per side and size, best kept (default 3)")
    p.add_argument("--results", help="where to write the report (default benchmarks/RESULTS.md; engine: RESULTS_ENGINE.md)")
    p.add_argument("--keep", action="store_true", help="keep the temporary folder of jobs and results")
    args = p.parse_args(argv)
    command = "python benchmarks/run.py" + (" " + " ".join(argv if argv is not None else sys.argv[1:])
                                            if (argv if argv is not None else sys.argv[1:]) else "")
    if args.suite == "speed":
        import speed

        args.repeats = args.repeats or 10
        return speed.main(args, command)
    sizes = args.sizes or ([32, 64] if args.quick else [64, 128])
    asm_n = args.assembly_cells or (64 if args.quick else ASSEMBLY_TARGET_CELLS)
    repeats = args.repeats or (3 if args.quick else 7)
    runs = args.runs or (1 if args.quick else 3)
    results = Path(args.results) if args.results else (None if args.quick else HERE / "RESULTS_ENGINE.md")
    load: dict[str, object] = {"start": "%.2f %.2f %.2f" % os.getloadavg(), "others": other_processes()}
    info = machine()
    folder = Path(tempfile.mkdtemp(prefix="sevenfold-bench-"))
    try:
        print(f"jobs and results in {folder}", flush=True)
        # warm both sides: numba's kernel cache, the OS file cache of the imports
        warm = write_job(folder, 16)
        run_process(sevenfold_command() + ["run", "--no-progress", str(warm)], folder)
        run_process([sys.executable, str(HERE / "baseline.py"), "--cells", "16",
                     "--out", str(folder / "warm.npy")], folder, GIVEN_ENVIRONMENT)

        print(f"assembly at {asm_n}^3, {repeats} interleaved rounds ...", flush=True)
        asm = time_assembly(write_job(folder, asm_n), asm_n, repeats)
        print(f"  sevenfold {_rate(asm.sevenfold_rate)} cells/s, baseline {_rate(asm.baseline_rate)} cells/s",
              flush=True)

        done: list[SizeResult] = []
        for n in sizes:
            print(f"{n}^3: {runs} run(s) per side ...", flush=True)
            s = run_size(folder, n, runs)
            print(f"  sevenfold {s.best('sevenfold').wall:.2f} s, baseline {s.best('baseline').wall:.2f} s, "
                  f"difference {s.solution_difference:.1e}", flush=True)
            done.append(s)
        load["end"] = "%.2f %.2f %.2f" % os.getloadavg()
        text = report(command, info, asm, done, load, runs)
    finally:
        if args.keep:
            print(f"kept {folder}")
        else:
            shutil.rmtree(folder, ignore_errors=True)
    if results is None:
        print(text)
    else:
        results.write_text(text)
        print(f"wrote {results}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
