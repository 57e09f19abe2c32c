"""The 1000:1 column: whole `sevenfold run` processes against benchmarks/baseline.py.

    python benchmarks/column.py [--sizes 128 256] [--runs 1] [--results PATH] [--keep] [--no-queue]

-div(k grad u) = f on the unit cube, n^3 cells: k = 1000 in the column 0.3 < x, y < 0.7
through the full height, 1 elsewhere; u = 0 on all six faces; f = sin(pi x) sin(pi y)
sin(pi z); relative residual 1e-8 (``baseline.py --pattern column`` and a job file saying the
same, method auto). First untimed warm-ups (:data:`WARM_UP`: numba's kernel cache, the OS
file cache). Then for each size, the baseline process and the sevenfold process one after
the other (alternating when --runs > 1, never two at once; best kept), wall time and peak RSS
from /usr/bin/time (``run.run_process``). Then, in this process, the last runs' solutions are
compared, sevenfold's solution is put into the baseline's system, and sevenfold's own matrix
(``sevenfold.operator.assemble``) is checked against the baseline's. Unless --no-queue, the
same job is also run with a worker running (started before the sizes, warmed by the warm-up
jobs): ``sevenfold run -q`` hands it to the idle worker and follows it to its end, timed as
one process. Writes benchmarks/RESULTS_COLUMN.md unless --results says otherwise.
"""

from __future__ import annotations

import argparse
import json
import os
import re
import shutil
import sys
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import baseline
import run as engine
import speed
from handed import Worker

PATTERN = "column"
SOURCE = "sin(pi*x)*sin(pi*y)*sin(pi*z)"  # baseline.problem("column", n)'s f, for sevenfold
WHOLE_TARGETS = {128: 12.0, 256: 40.0}  # whole-process wall time, baseline / sevenfold
OWN_TARGETS = {128: 40.0, 256: 80.0}  # own times, baseline / sevenfold
AGREEMENT = 1e-6  # max |u_s - u_b| / max |u_b|
SAME_SYSTEM = 1e-12  # max entry difference / max entry, matrices and right-hand sides
# Untimed sevenfold runs first, to fill numba's kernel cache. 16^3 is not enough: it is gmg's
# coarsest level alone (LU, one iteration), so the multigrid kernels, CG's direction update and
# the threaded vector kernels (from 100,000 unknowns) would compile in timed runs. 32^3 has two
# levels and serial vectors, 64^3 three levels and threaded ones. Kernels that still compile
# during a timed run are reported.
WARM_UP = (32, 64)


def job_text(n: int, output: Path) -> str:
    """A sevenfold job for ``baseline.py --pattern column`` on n^3 cells, method auto."""
    ((lo, hi, value),) = baseline.pattern_boxes(PATTERN)
    lines = [f'name = "column-{n}"', 'physics = "generic"', "", "[grid]", f"cells = [{n}, {n}, {n}]",
             "size = [1.0, 1.0, 1.0]", "", "[material]", f"value = {baseline.K_BACKGROUND!r}", "",
             "[[material.region]]",
             f"box = {{ min = [{', '.join(map(repr, lo))}], max = [{', '.join(map(repr, hi))}] }}",
             f"value = {value!r}", "", "[source]", f'value = "{SOURCE}"', "", "[boundary]"]
    lines += [f'{face} = {{ type = "dirichlet", value = {v!r} }}' for face, v in baseline.COLUMN_FACES.items()]
    lines += ["", "[solver]", 'method = "auto"', f"rtol = {baseline.RTOL!r}",
              f"max_iterations = {baseline.MAX_ITERATIONS}", "", "[output]", f"path = {json.dumps(str(output))}", ""]
    return "\n".join(lines)


@dataclass
class Run:
    process: engine.ProcessRun
    own: float  # seconds by the program's own clock
    iterations: int
    info: dict  # the baseline's JSON line, or sevenfold's result attrs (+ write seconds)
    compiled: list[str] = field(default_factory=list)  # numba cache files the run added


def cached_kernels() -> set[str]:
    """Names of the compiled kernels in numba's cache of sevenfold's kernels (empty if unknown)."""
    from sevenfold.kernels.cache import cache_dir

    try:
        return {p.name for p in cache_dir().glob("*.nbc")}
    except Exception:  # noqa: BLE001 - a numba without the attribute: nothing to report
        return set()


@dataclass
class Size:
    n: int
    sevenfold: list[Run] = field(default_factory=list)
    baseline: list[Run] = field(default_factory=list)
    difference: float = float("nan")
    residual_in_baseline: float = float("nan")  # sevenfold's solution in the baseline's system
    cells_differ: int = -1  # cells where the two programs' k differ
    matrix_difference: float = float("nan")
    rhs_difference: float = float("nan")
    resident: float = float("nan")  # sevenfold's own seconds in a warm, resident process
    queued: float = float("nan")  # wall seconds of `run` handed to a running worker
    queued_own: float = float("nan")  # the worker's job time for that run

    def best(self, side: str, kind: str) -> Run:
        """``side``'s run with the least whole-process wall time (kind "whole") or own time ("own")."""
        return min(getattr(self, side), key=lambda r: r.process.wall if kind == "whole" else r.own)

    def seconds(self, kind: str) -> tuple[float, float]:
        """The best (baseline, sevenfold) seconds of ``kind``."""
        b, s = self.best("baseline", kind), self.best("sevenfold", kind)
        return (b.process.wall, s.process.wall) if kind == "whole" else (b.own, s.own)

    def ratio(self, kind: str) -> float:
        b, s = self.seconds(kind)
        return b / s


def run_baseline(folder: Path, n: int, out: Path) -> Run:
    r = engine.run_process([sys.executable, str(HERE / "baseline.py"), "--cells", str(n), "--pattern", PATTERN,
                            "--out", str(out)], folder, engine.GIVEN_ENVIRONMENT)
    try:
        info = json.loads(r.stdout.strip().splitlines()[-1])
    except (IndexError, ValueError):
        raise RuntimeError(f"baseline.py --cells {n} printed no JSON line of timings:\n{r.stdout}") from None
    return Run(r, info["assembly"] + info["setup"] + info["solve"], int(info["iterations"]), info)


def run_sevenfold(folder: Path, job: Path, result: Path) -> Run:
    import zarr

    before = cached_kernels()
    r = engine.run_process(engine.sevenfold_command() + ["run", "--no-progress", str(job)], folder)
    compiled = sorted(cached_kernels() - before)
    own = speed.required_job_seconds(r.stdout, f"`sevenfold run {job}`")
    attrs = dict(zarr.open_group(str(result), mode="r").attrs)
    if not attrs.get("converged"):
        raise RuntimeError(f"`sevenfold run {job}` did not converge:\n{r.stdout}")
    m = re.search(r"write ([0-9.]+) s", " ".join(r.stdout.split()))  # not in the attrs
    attrs["seconds"] = {**attrs["seconds"], "write": float(m.group(1)) if m else float("nan")}
    return Run(r, own, int(attrs["solver"]["iterations"]), attrs, compiled)


RESIDENT = """
import sys
from sevenfold.runner import run_job
for _ in range(3):  # the first run loads the kernels, as a queue worker's slot does once
    seconds = run_job(sys.argv[1]).seconds
print(seconds["job"])
"""


def run_resident(folder: Path, job: Path) -> float:
    """sevenfold's own time for ``job`` in a process that has run it before: what a queue
    worker's resident slot process sees running a sweep (kernels loaded, modules imported,
    and the environment of a one-slot worker's slot: every core, malloc keeping the memory
    the last job freed); best of two."""
    import subprocess

    from sevenfold.queue.worker import cores, slot_environment

    env = slot_environment(cores())

    out = subprocess.run([sys.executable, "-c", RESIDENT.replace("range(3)", "range(2)"), str(job)],
                         cwd=folder, capture_output=True, text=True, env=env)
    if out.returncode != 0:
        raise RuntimeError(f"the resident run of {job} failed:\n{out.stderr}")
    first = float(out.stdout.split()[-1])
    out = subprocess.run([sys.executable, "-c", RESIDENT, str(job)], cwd=folder, capture_output=True, text=True,
                         env=env)
    if out.returncode != 0:
        raise RuntimeError(f"the resident run of {job} failed:\n{out.stderr}")
    return min(first, float(out.stdout.split()[-1]))


def compare(size: Size, job: Path, result: Path, npy: Path) -> None:
    """Solutions, sevenfold's residual in the baseline's system, and the two systems themselves."""
    import zarr

    from sevenfold.operator import assemble
    from sevenfold.problem import build_problem
    from sevenfold.spec import load_job

    n, h = size.n, 1.0 / size.n
    k, faces, f = baseline.problem(PATTERN, n)
    A, b = baseline.assemble(k, (h, h, h), faces, f)
    group = zarr.open_group(str(result), mode="r")
    u_s = np.asarray(group[group.attrs["solution"]][...])
    u_b = np.load(npy)
    size.difference = float(np.abs(u_s - u_b).max() / np.abs(u_b).max())
    size.residual_in_baseline = float(np.linalg.norm(b - A @ u_s.ravel()) / np.linalg.norm(b))
    del u_s, u_b
    problem = build_problem(load_job(job))
    size.cells_differ = int(np.count_nonzero(problem.coefficient[0] != k))
    system = assemble(problem)
    del problem, k, f
    if system.matrix.shape != A.shape:
        raise RuntimeError(f"{n}^3: sevenfold's matrix is {system.matrix.shape}, the baseline's {A.shape}")
    # sevenfold's rows are balances of whole cells, the baseline's per unit volume: scale by h^3
    A.data *= h**3
    b *= h**3
    diff = system.matrix - A
    size.matrix_difference = float(np.abs(diff.data).max(initial=0.0) / np.abs(A.data).max())
    size.rhs_difference = float(np.abs(system.rhs - b).max() / np.abs(b).max())


def run_size(folder: Path, n: int, runs: int, worker: Worker | None = None) -> Size:
    size = Size(n)
    job, result, npy = folder / f"column-{n}.toml", folder / f"column-{n}.zarr", folder / f"baseline-{n}.npy"
    job.write_text(job_text(n, result))
    for i in range(runs):
        for side in engine.rotation(["baseline", "sevenfold"], i):
            if side == "baseline":
                size.baseline.append(run_baseline(folder, n, npy))
            else:
                size.sevenfold.append(run_sevenfold(folder, job, result))
                if size.sevenfold[-1].compiled:
                    print(f"  warning: numba compiled {', '.join(size.sevenfold[-1].compiled)} during a timed "
                          f"run at {n}^3", flush=True)
    size.resident = run_resident(folder, job)
    if worker is not None:
        flows = [worker.flow(job, result) for _ in range(runs)]
        size.queued, size.queued_own = min(flows)
    compare(size, job, result, npy)
    shutil.rmtree(result, ignore_errors=True)
    npy.unlink(missing_ok=True)
    return size


# ---------------------------------------------------------------- report
def _verdict(ok: bool) -> str:
    return "met" if ok else "**not met**"


def report(command: str, info: dict[str, str], sizes: list[Size], load: dict, runs: int) -> str:
    out: list[str] = []
    w = out.append
    w("# The 1000:1 column: sevenfold against the baseline\n")
    w(f"Written by `{command}` on {info['date']}; every number below comes from that run. "
      "Do not edit by hand: run the command again.\n")
    w("## Problem\n")
    w("-div(k grad u) = f on the unit cube, n^3 cells (cell-centred finite volumes, 7-point stencil): "
      f"k = {baseline.COLUMN[2]:g} in the column 0.3 < x, y < 0.7 through the full height (z from 0 to 1), "
      f"k = {baseline.K_BACKGROUND:g} elsewhere (a cell is in the column when its centre is, boundary "
      "included); u = 0 on all six faces, half a cell from the boundary centres; f = sin(pi x) sin(pi y) "
      f"sin(pi z) at the cell centres; relative residual {baseline.RTOL:g}. Baseline: `python "
      "benchmarks/baseline.py --pattern column` (COO assembly, pyamg smoothed aggregation, scipy CG). "
      f"sevenfold: `sevenfold run --no-progress` on the same job, `method = \"auto\"`.\n")
    w("*whole* = wall time of the whole process (interpreter start to exit) and *peak RSS* of that child, "
      "both from /usr/bin/time; *own* = sevenfold's job time from its summary line (`job X s`, job file "
      "read to result written), the baseline's assembly + setup + solve from its JSON line; "
      f"*B/unknown* = peak RSS / n^3 (the interpreter's fixed ~100-250 MiB dominates small grids). Best "
      f"of {runs} run(s) per side, alternating; untimed warm-ups first (sevenfold at "
      f"{' and '.join(f'{n}^3' for n in WARM_UP)}, filling numba's kernel cache; the baseline at "
      f"{WARM_UP[0]}^3). *agreement* = max |u_sevenfold - u_baseline| / "
      f"max |u_baseline| (limit {AGREEMENT:g}).\n")

    w("## Targets\n")
    w("| target | measured | verdict |\n|---|---|---|")
    by = {s.n: s for s in sizes}
    for kind, label, targets in (("whole", "whole process", WHOLE_TARGETS), ("own", "own time", OWN_TARGETS)):
        for n, target in targets.items():
            if n not in by:
                w(f"| {label} >= {target:g}x faster at {n}^3 | not run | n/a |")
                continue
            tb, ts = by[n].seconds(kind)
            w(f"| {label} >= {target:g}x faster at {n}^3 | {tb:.2f} s / {ts:.2f} s = {tb / ts:.1f}x | "
              f"{_verdict(tb / ts >= target)} |")
    for n, target in OWN_TARGETS.items():
        if n in by:
            tb, ts = by[n].seconds("own")[0], by[n].resident
            w(f"| own time >= {target:g}x faster at {n}^3, in a resident process (a queue worker's slot) | "
              f"{tb:.2f} s / {ts:.2f} s = {tb / ts:.1f}x | {_verdict(tb / ts >= target)} |")
    for n, target in WHOLE_TARGETS.items():
        if n in by and np.isfinite(by[n].queued):
            tb, ts = by[n].seconds("whole")[0], by[n].queued
            w(f"| whole process >= {target:g}x faster at {n}^3, `sevenfold run` handed to a running "
              f"worker | {tb:.2f} s / {ts:.2f} s = "
              f"{tb / ts:.1f}x | {_verdict(tb / ts >= target)} |")
    worst = max(sizes, key=lambda s: s.difference)
    w(f"| solutions agree to {AGREEMENT:g} (every size) | worst {worst.difference:.1e} ({worst.n}^3) | "
      f"{_verdict(all(s.difference <= AGREEMENT for s in sizes))} |")
    same = all(s.cells_differ == 0 and s.matrix_difference <= SAME_SYSTEM and s.rhs_difference <= SAME_SYSTEM
               for s in sizes)
    w(f"| same cells in the column, same matrix and right-hand side to {SAME_SYSTEM:g} (every size) | "
      "see the sizes below | " + _verdict(same) + " |")
    w("")

    for s in sizes:
        w(f"## {s.n}^3 ({s.n**3:,} unknowns)\n")
        w("| program | method | whole s | own s | iterations | peak RSS MiB | B/unknown | whole ratio | "
          "own ratio | agreement |\n|---|---|---|---|---|---|---|---|---|---|")
        sw, so = s.best("sevenfold", "whole"), s.best("sevenfold", "own")
        bw, bo = s.best("baseline", "whole"), s.best("baseline", "own")
        agree = f"{s.difference:.1e} ({_verdict(s.difference <= AGREEMENT)})"
        w(f"| sevenfold | {sw.info['solver']['method']} | {sw.process.wall:.2f} | {so.own:.2f} | {sw.iterations} | "
          f"{sw.process.peak_rss / 2**20:,.0f} | {sw.process.peak_rss / s.n**3:.0f} | {s.ratio('whole'):.1f}x | "
          f"{s.ratio('own'):.1f}x | {agree} |")
        w(f"| baseline | pyamg SA + CG | {bw.process.wall:.2f} | {bo.own:.2f} | {bw.iterations} | "
          f"{bw.process.peak_rss / 2**20:,.0f} | {bw.process.peak_rss / s.n**3:.0f} | | | |")
        w("")
        w(f"- own time in a resident process that has run the job before (what a queue worker's slot "
          f"process sees in a sweep: modules imported, kernels loaded, the memory the last job freed "
          f"kept): {s.resident:.2f} s, "
          f"{s.seconds('own')[0] / s.resident:.1f}x the baseline's own time")
        if np.isfinite(s.queued):
            w(f"- handed to a running worker: `sevenfold run -q`, which queues the job for the idle "
              f"worker and follows it to its end, took {s.queued:.2f} s wall (the job itself {s.queued_own:.2f} s in the "
              f"worker's resident slot), {s.seconds('whole')[0] / s.queued:.1f}x the baseline's whole process")
        sec, tb = so.info["seconds"], bo.info
        w(f"- own time split: sevenfold assembly {sec.get('assemble', np.nan):.3f} s, setup "
          f"{sec.get('setup', np.nan):.3f} s, solve {sec.get('solve', np.nan):.3f} s, write "
          f"{sec.get('write', np.nan):.3f} s; baseline assembly {tb['assembly']:.3f} s, setup "
          f"{tb['setup']:.3f} s, solve {tb['solve']:.3f} s (not counted: building k and f "
          f"{tb['coefficient']:.3f} s, writing {tb['write']:.3f} s)")
        w(f"- relative residual in the baseline's matrix and right-hand side: sevenfold's solution "
          f"{s.residual_in_baseline:.1e}, the baseline's own {float(s.baseline[-1].info['relative_residual']):.1e}")
        w(f"- cells whose k differs between the programs: {s.cells_differ}; sevenfold's matrix "
          f"(`sevenfold.operator.assemble`) against the baseline's times the cell volume h^3: max "
          f"difference {s.matrix_difference:.1e} of the largest entry, right-hand sides {s.rhs_difference:.1e}")
        compiled = sorted({c for r in s.sevenfold for c in r.compiled})
        w("- numba kernels compiled during the timed sevenfold runs (new files in its cache): "
          + (", ".join(f"`{c}`" for c in compiled) + " (**compile time included above**)" if compiled else "none"))
        if runs > 1:
            w("- every run, wall s (own s): sevenfold "
              + ", ".join(f"{r.process.wall:.2f} ({r.own:.2f})" for r in s.sevenfold) + "; baseline "
              + ", ".join(f"{r.process.wall:.2f} ({r.own:.2f})" for r in s.baseline))
        w("")

    out += speed.machine_section(info, load, [r.process for s in sizes for r in s.sevenfold + s.baseline])
    return "\n".join(out)


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description="The 1000:1 column: sevenfold run against benchmarks/baseline.py")
    p.add_argument("--sizes", type=int, nargs="+", default=[128, 256], help="cells along each axis (default 128 256)")
    p.add_argument("--runs", type=int, default=1, help="whole-process runs per side and size, best kept (default 1)")
    p.add_argument("--results", type=Path, default=HERE / "RESULTS_COLUMN.md",
                   help="where to write the report (default benchmarks/RESULTS_COLUMN.md)")
    p.add_argument("--keep", action="store_true", help="keep the temporary folder of jobs and results")
    p.add_argument("--no-queue", action="store_true",
                   help="skip the run handed to a running worker")
    args = p.parse_args(argv)
    if args.runs < 1 or min(args.sizes) < 2:
        p.error("--runs must be at least 1 and every size at least 2")
    given = sys.argv[1:] if argv is None else argv
    command = " ".join(["python benchmarks/column.py", *given])
    load: dict = {"start": "{:.2f} {:.2f} {:.2f}".format(*os.getloadavg()), "others": engine.other_processes()}
    info = engine.machine()
    info["sevenfold revision"] = speed.revision()
    folder = Path(tempfile.mkdtemp(prefix="sevenfold-column-"))
    sizes: list[Size] = []
    worker = None
    try:
        print(f"jobs and results in {folder}", flush=True)
        for n in WARM_UP:  # not timed
            warm = folder / f"warm-{n}.toml"
            warm.write_text(job_text(n, folder / f"warm-{n}.zarr"))
            run_sevenfold(folder, warm, folder / f"warm-{n}.zarr")
        run_baseline(folder, WARM_UP[0], folder / "warm.npy")
        worker = None if args.no_queue else Worker(folder)
        if worker is not None:
            worker.wait_ready()
            for n in WARM_UP:  # the slot's first jobs, untimed
                worker.flow(folder / f"warm-{n}.toml", folder / f"warm-{n}.zarr")
        for n in args.sizes:
            s = run_size(folder, n, args.runs, worker)
            sizes.append(s)
            print(f"{n}^3: " + ", ".join(f"{kind} {b:.2f} s / {t:.2f} s = {b / t:.1f}x" for kind, (b, t) in
                                         (("whole", s.seconds("whole")), ("own", s.seconds("own"))))
                  + f", difference {s.difference:.1e}", flush=True)
        load["end"] = "{:.2f} {:.2f} {:.2f}".format(*os.getloadavg())
    finally:
        if worker is not None:
            worker.stop()
        if args.keep:
            print(f"kept {folder}")
        else:
            shutil.rmtree(folder, ignore_errors=True)
    args.results.write_text(report(command, info, sizes, load, args.runs))
    print(f"wrote {args.results}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
