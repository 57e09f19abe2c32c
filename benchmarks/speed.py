"""The speed suite: sevenfold (method auto) against baseline.py on three coefficient patterns.

    python benchmarks/run.py [--sizes 64 128 256] [--big 512 640] [--quick]

For each pattern (constant k, layered 1000:1, random 1000:1 inclusions: the same boxes on both
sides, from ``baseline.pattern_boxes``) and size, one at a time, never two children at once:

* a whole ``python benchmarks/baseline.py`` process and a whole ``sevenfold run`` process
  (method ``auto``: fft for constant k, gmg otherwise), wall time and peak RSS from
  /usr/bin/time, their own times (the baseline's assembly + setup + solve; sevenfold's job
  time from its summary line, job file read to result written);
* in this process, after the children: one matrix-free operator application
  (``stencil.apply`` on ``gmg.fine_level`` face arrays, best of several) and a numpy copy of
  arrays of the same size, for work units and achieved bandwidth;
* in this process too, at the sizes compared with the baseline: the job solved by gmg (forced
  on constant k, where auto takes fft) after one untimed solve, so that its kernels are loaded
  and the allocator is warm: *warm work units*, the issue's cost measure, without the child's
  start-up (loading the compiled kernels cost it about 70 ms, 25 units at 128^3, in a one-off
  trace); beside them, for context, the same solves counted in their own operator passes (CG's
  A p timed inside the solve): the unit above is a best of several applications back to back,
  which on a host with a large shared last-level cache can run from that cache at 128^3;
* agreement of the two solutions (max |u_s - u_b| / max |u_b|);
* at the sizes compared with the baseline, the same job handed to a running worker (one slot,
  its own queue home, started after the 32^3 warm-up and given those jobs first):
  ``sevenfold run -q``, the whole process timed as above, best of two, with the job's time in
  the worker's slot. That is what ``run`` does by default when a worker runs on the machine.

Then ``--big`` (default 512; several sizes allowed, e.g. 512 640) layered for sevenfold alone, and the fft path against a bare
transform pair (``fft_bench.bench``). Writes benchmarks/RESULTS.md and benchmarks/speed.png.
"""

from __future__ import annotations

import gc
import json
import os
import re
import shutil
import sys
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import baseline  # noqa: E402
import run as engine  # noqa: E402
from handed import Worker  # noqa: E402

PATTERNS = ("constant", "layered", "inclusions")
HETEROGENEOUS = ("layered", "inclusions")
AGREEMENT = 1e-5
OWN_TARGETS = {128: 30.0, 256: 50.0}  # own-time ratio baseline / sevenfold
WHOLE_TARGETS = {128: 10.0, 256: 30.0}  # whole-process ratio
WORK_UNITS = 60.0
BANDWIDTH = 0.70  # of the copy
BYTES_PER_UNKNOWN = 80.0  # issue 10: at the first big size
BIG_SECONDS = 60.0  # issue 10: the first big size (512^3 layered), whole process
BIG_BYTES = 24 * 2**30
FFT_RATIO = 1.5
APPLY_BYTES = 6 * 8  # read u, tx, ty, tz, diag; write out
COPY_BYTES = 2 * 8  # read + write


def job_text(n: int, pattern: str, output: str) -> str:
    """A sevenfold job for baseline.py's problem with ``pattern``'s boxes, method auto."""
    lines = [f'name = "speed-{pattern}-{n}"', 'physics = "generic"', "", "[grid]",
             f"cells = [{n}, {n}, {n}]", "size = [1.0, 1.0, 1.0]", "", "[material]",
             f"value = {baseline.K_BACKGROUND!r}"]
    for lo, hi, value in baseline.pattern_boxes(pattern):
        lines += ["", "[[material.region]]",
                  f"box = {{ min = [{', '.join(map(repr, lo))}], max = [{', '.join(map(repr, hi))}] }}",
                  f"value = {value!r}"]
    lines += ["", "[source]", "value = 0.0", "", "[boundary]",
              f'x_min = {{ type = "dirichlet", value = {baseline.U_X_MIN!r} }}',
              f'x_max = {{ type = "dirichlet", value = {baseline.U_X_MAX!r} }}', "", "[solver]",
              'method = "auto"', f"rtol = {baseline.RTOL!r}", f"max_iterations = {baseline.MAX_ITERATIONS}",
              "", "[output]", f'path = "{output}"', ""]
    return "\n".join(lines)


# `sevenfold run` with gmg's finest level forced onto the float64 arrays, as memory.gmg_finest
# chooses when memory is short (the lean path), for --lean
LEAN = ("import sys, sevenfold.memory as m; m.gmg_finest = lambda cells: 'operator'; "
        "from sevenfold.cli import main; sys.exit(main(sys.argv[1:]))")


@dataclass
class Case:
    pattern: str
    n: int
    lean: bool = False
    method: str = ""
    notes: str = ""
    sevenfold: engine.ProcessRun | None = None
    baseline: engine.ProcessRun | None = None
    job_seconds: float = float("nan")  # sevenfold's summary line, write included
    seconds: dict[str, float] = field(default_factory=dict)  # sevenfold's attrs
    iterations: int = 0
    base: dict[str, float] = field(default_factory=dict)  # baseline's JSON line
    same_k: bool | None = None
    difference: float = float("nan")
    residual_in_baseline: float = float("nan")  # sevenfold's solution in the baseline's system
    apply: float = float("nan")  # best seconds of one operator application
    copy: float = float("nan")  # best seconds of np.copyto of n^3 float64
    warm: dict[str, float] = field(default_factory=dict)  # gmg in this process: setup, solve, iterations
    handed_wall: float = float("nan")  # `sevenfold run -q` handed to a running worker, whole process
    handed_own: float = float("nan")  # that job's time in the worker's slot

    @property
    def cells(self) -> int:
        return self.n**3

    @property
    def base_own(self) -> float:
        return self.base["assembly"] + self.base["setup"] + self.base["solve"] if self.base else float("nan")

    @property
    def work_units(self) -> float:
        return (self.seconds.get("setup", np.nan) + self.seconds.get("solve", np.nan)) / self.apply

    @property
    def warm_work_units(self) -> float:
        return (self.warm["setup"] + self.warm["solve"]) / self.apply if self.warm else float("nan")

    @property
    def in_solve_work_units(self) -> float:
        """The warm solve's setup + solve in its own operator passes (see :func:`warm_gmg`)."""
        return (self.warm["setup"] + self.warm["solve"]) / self.warm["in_solve_apply"] if self.warm else float("nan")

    @property
    def base_work_units(self) -> float:
        return (self.base["setup"] + self.base["solve"]) / self.apply if self.base else float("nan")

    @property
    def bandwidth(self) -> float:
        return APPLY_BYTES * self.cells / self.apply

    @property
    def copy_bandwidth(self) -> float:
        return COPY_BYTES * self.cells / self.copy


def kernel_times(job: Path, repeats: int) -> tuple[float, float, bool, np.ndarray | None]:
    """Best apply and copy seconds on the job's grid, whether k matches the baseline's, k."""
    from sevenfold.kernels import stencil
    from sevenfold.problem import build_problem
    from sevenfold.solvers.gmg import fine_level
    from sevenfold.spec import load_job

    problem = build_problem(load_job(job))
    level, b = fine_level(problem)
    k = problem.coefficient
    del problem, b
    gc.collect()
    u = np.random.default_rng(1).standard_normal(level.shape)
    out = np.empty_like(u)
    stencil.apply(level.tx, level.ty, level.tz, level.diag, u, out)  # warm: cache load, first touch
    applies, copies = [], []
    for _ in range(max(repeats, min(200, int(5e7 // u.size)))):  # more on small grids: noise
        t = time.perf_counter()
        stencil.apply(level.tx, level.ty, level.tz, level.diag, u, out)
        applies.append(time.perf_counter() - t)
        t = time.perf_counter()
        np.copyto(out, u)
        copies.append(time.perf_counter() - t)
    return min(applies), min(copies), True, k


def warm_gmg(job: Path, timed: int = 2) -> dict[str, float]:
    """gmg on the job in this process (method forced: constant k too): one untimed solve, then
    the best of ``timed`` by setup + solve wall seconds, as the solve's own record gives them;
    ``in_solve_apply``: the median wall seconds of CG's operator passes (A p with p . A p, the
    bytes of one ``stencil.apply``) inside that best solve, the unit as the solve meets it."""
    from sevenfold.problem import build_problem
    from sevenfold.solvers import gmg, solve_problem
    from sevenfold.spec import load_job

    spec = load_job(job)
    problem = build_problem(spec)
    best: dict[str, float] = {}
    passes: list[float] = []
    kept = gmg.FineOperator.apply_dot

    def apply_dot(self, p):
        t = time.perf_counter()
        out = kept(self, p)
        passes.append(time.perf_counter() - t)
        return out

    gmg.FineOperator.apply_dot = apply_dot
    try:
        for i in range(timed + 1):
            passes.clear()
            _, result = solve_problem(problem, spec.solver, "gmg")
            row = {"setup": result.setup_seconds, "solve": result.solve_seconds,
                   "iterations": float(result.iterations),
                   "in_solve_apply": float(np.median(passes)) if passes else float("nan")}
            if i and (not best or row["setup"] + row["solve"] < best["setup"] + best["solve"]):
                best = row
            del result
            gc.collect()
    finally:
        gmg.FineOperator.apply_dot = kept
    return best


def sevenfold_job_seconds(stdout: str) -> float:
    m = re.search(r"job\s+([0-9.]+)\s*s", " ".join(stdout.split()))
    return float(m.group(1)) if m else float("nan")


def required_job_seconds(stdout: str, command: str) -> float:
    """:func:`sevenfold_job_seconds`, or an error naming ``command`` when its output has no
    summary line (a run that failed quietly must not enter a table as nan)."""
    own = sevenfold_job_seconds(stdout)
    if own != own:
        raise RuntimeError(f"no 'job X s' in the summary of {command}:\n{stdout}")
    return own


def run_case(folder: Path, pattern: str, n: int, with_baseline: bool, repeats: int,
             lean: bool = False, worker: Worker | None = None) -> Case:
    """One pattern and size: baseline process, sevenfold process, the job handed to ``worker``
    (when given; best of two), then the in-process kernels."""
    import zarr

    case = Case(pattern, n, lean)
    job = folder / f"speed-{pattern}-{n}.toml"
    zarr_path = folder / f"speed-{pattern}-{n}.zarr"
    npy_path = folder / f"baseline-{pattern}-{n}.npy"
    job.write_text(job_text(n, pattern, zarr_path.name))
    if with_baseline:
        case.baseline = engine.run_process(
            [sys.executable, str(HERE / "baseline.py"), "--cells", str(n), "--pattern", pattern,
             "--out", str(npy_path)], folder, engine.GIVEN_ENVIRONMENT)
        case.base = json.loads(case.baseline.stdout.strip().splitlines()[-1])
    command = [sys.executable, "-c", LEAN] if lean else engine.sevenfold_command()
    case.sevenfold = engine.run_process(command + ["run", "--no-progress", str(job)], folder)
    case.job_seconds = sevenfold_job_seconds(case.sevenfold.stdout)
    group = zarr.open_group(str(zarr_path), mode="r")
    case.seconds = dict(group.attrs["seconds"])
    solver = dict(group.attrs["solver"])
    case.method = str(solver.get("method", "?"))
    case.iterations = int(solver.get("iterations", 0))
    case.notes = str(solver.get("notes", "") or "")
    if with_baseline:
        u_s = np.asarray(group[group.attrs["solution"]][...])
        u_b = np.load(npy_path)
        case.difference = float(np.abs(u_s - u_b).max() / np.abs(u_b).max())
        del u_b
        h = 1.0 / n
        A, b = baseline.assemble(baseline.coefficient(n, baseline.pattern_boxes(pattern)), (h, h, h))
        case.residual_in_baseline = float(np.linalg.norm(b - A @ u_s.ravel()) / np.linalg.norm(b))
        del A, b, u_s
        npy_path.unlink()
    del group
    shutil.rmtree(zarr_path, ignore_errors=True)
    if worker is not None:
        flows = [worker.flow(job, zarr_path) for _ in range(2)]
        case.handed_wall = min(wall for wall, _ in flows)
        case.handed_own = min(own for _, own in flows)
        shutil.rmtree(zarr_path, ignore_errors=True)
    if with_baseline:
        case.warm = warm_gmg(job)
    case.apply, case.copy, _, k = kernel_times(job, repeats)
    if with_baseline:
        case.same_k = bool(np.array_equal(k, baseline.coefficient(n, baseline.pattern_boxes(pattern))))
    del k
    gc.collect()
    return case


# ---------------------------------------------------------------- report
def _v(ok: bool | None) -> str:
    return "n/a" if ok is None else ("met" if ok else "**not met**")


def _warm_cell(c: Case) -> str:
    return f"{c.warm_work_units:.1f} ({int(c.warm['iterations'])})" if c.warm else ""


def _gb(x: float) -> str:
    return f"{x / 1e9:.1f}"


def report(command: str, info: dict[str, str], cases: list[Case], fft_rows: list, load: dict,
           big: list[int], big_skipped: str) -> str:
    out: list[str] = []
    w = out.append
    w("# sevenfold speed benchmarks\n")
    w(f"Written by `{command}` on {info['date']}; every number below comes from that run. "
      "Do not edit by hand: run the command again.\n")
    w("Other results: [RESULTS_ENGINE.md](RESULTS_ENGINE.md) (the engine comparison, amg on both sides, "
      "`python benchmarks/run.py --suite engine`), [RESULTS_FFT.md](RESULTS_FFT.md) "
      "(`python benchmarks/fft_bench.py`), [RESULTS_QUEUE.md](RESULTS_QUEUE.md) "
      "(`python benchmarks/queue_bench.py`), [RESULTS_CYCLE.md](RESULTS_CYCLE.md) (multigrid "
      "cycle designs, with the thin-cell and graded anisotropic cases beside the uniform ones, "
      "`python benchmarks/cycle_bench.py`), [RESULTS_CYCLE_GRADED.md](RESULTS_CYCLE_GRADED.md) "
      "(issue 9's graded job: three decades of grading, 100:1 conductivity) and "
      "[RESULTS_COLUMN.md](RESULTS_COLUMN.md) (issue 10's 1000:1 column, `python benchmarks/column.py`); "
      "[ANALYSIS.md](ANALYSIS.md) reads them against issue 10's targets.\n")
    w("## Problem\n")
    w("Steady -div(k grad u) = 0 on the unit cube, n^3 cells, cell-centred finite volumes, 7-point stencil; "
      "x_min held at 1 and x_max at 0 (half a cell from the boundary centres), other faces insulated, "
      f"relative residual {baseline.RTOL:g} on both sides. Patterns (k = 1, boxes k = 1e-3, the same boxes "
      "given to both programs, from `baseline.pattern_boxes`): **constant** (no boxes); **layered** (five "
      "layers across x, edges off the dyadic planes, shifted by 0.043 between y < 0.5 and y > 0.5); "
      f"**inclusions** ({baseline.INCLUSIONS} random boxes, seed {baseline.INCLUSION_SEED}). Baseline: "
      "`benchmarks/baseline.py` (COO assembly, pyamg smoothed aggregation, scipy CG). sevenfold: "
      "`sevenfold run` with `method = \"auto\"` (the method it used is in the tables), which runs BLAS on "
      "one thread (`sevenfold.one_blas_thread`; this process's warm solves too); the baseline runs in "
      "the environment the benchmark was given, with its libraries' defaults.\n")
    w("Columns: *whole* = wall time of the whole process (interpreter start to exit) and *peak RSS* of that "
      "child, both from /usr/bin/time; *own* = sevenfold's job time from its summary line (job file read "
      "to result written), the baseline's assembly + setup + solve; *work units* = (setup + solve) / one "
      "matrix-free operator application (`stencil.apply` on `gmg.fine_level` face arrays, best of "
      "several, timed in this process after the children ran; the baseline's column uses the same unit); "
      "*warm WU* = the same for gmg solving the job in this process after one untimed solve (forced on "
      "constant k; iterations in brackets): the cost without the child's start-up; "
      f"*bandwidth* = {APPLY_BYTES} B per cell per application (read u, tx, ty, tz, diag; write out) over "
      f"its time, against `np.copyto` of an n^3 float64 array ({COPY_BYTES} B per cell, read + write) "
      "timed alongside; *B/unknown* = peak RSS / n^3 (the interpreter's ~200 MiB dominates small grids). "
      "*Handed to a running worker* (the lines below each table, and the targets' rows so named): the "
      "same job given to `sevenfold run -q` while a one-slot worker runs on the machine, which is what "
      "`run` does by default then (the README's Workers section): the whole process of that command, and "
      "the job's own time in the worker's slot, whose modules and kernels were loaded when it started "
      "(it ran the 32^3 jobs first); best of two.\n")

    w("## Targets\n")
    w("| target | measured | verdict |\n|---|---|---|")
    by = {(c.pattern, c.n): c for c in cases}
    for n, target in OWN_TARGETS.items():
        for p in HETEROGENEOUS:
            c = by.get((p, n))
            if c is None or c.baseline is None:
                w(f"| own time >= {target:g}x faster, {n}^3 {p} | not run | n/a |")
                continue
            r = c.base_own / c.job_seconds
            w(f"| own time >= {target:g}x faster, {n}^3 {p} | {c.base_own:.2f} s / {c.job_seconds:.2f} s = "
              f"{r:.1f}x | {_v(r >= target)} |")
    for n, target in WHOLE_TARGETS.items():
        for p in HETEROGENEOUS:
            c = by.get((p, n))
            if c is None or c.baseline is None:
                w(f"| whole process >= {target:g}x faster, {n}^3 {p} | not run | n/a |")
                continue
            r = c.baseline.wall / c.sevenfold.wall
            w(f"| whole process >= {target:g}x faster, {n}^3 {p} | {c.baseline.wall:.2f} s / "
              f"{c.sevenfold.wall:.2f} s = {r:.1f}x | {_v(r >= target)} |")
    handed = [(n, p, by[(p, n)]) for n in OWN_TARGETS for p in HETEROGENEOUS
              if (p, n) in by and by[(p, n)].baseline is not None and np.isfinite(by[(p, n)].handed_wall)]
    for n, p, c in handed:
        r = c.base_own / c.handed_own
        w(f"| own time >= {OWN_TARGETS[n]:g}x faster, {n}^3 {p}, `sevenfold run` handed to a running "
          f"worker (the job's time in its slot) | {c.base_own:.2f} s / {c.handed_own:.2f} s = {r:.1f}x | "
          f"{_v(r >= OWN_TARGETS[n])} |")
    for n, p, c in handed:
        r = c.baseline.wall / c.handed_wall
        w(f"| whole process >= {WHOLE_TARGETS[n]:g}x faster, {n}^3 {p}, `sevenfold run` handed to a "
          f"running worker | {c.baseline.wall:.2f} s / {c.handed_wall:.2f} s = {r:.1f}x | "
          f"{_v(r >= WHOLE_TARGETS[n])} |")
    compared = [c for c in cases if c.baseline is not None]
    worst = max((c.difference for c in compared), default=float("nan"))
    w(f"| solutions agree to {AGREEMENT:g} (all {len(compared)} pairs) | worst {worst:.1e} | "
      f"{_v(bool(compared) and worst <= AGREEMENT)} |")
    warm = [c for c in cases if c.warm]
    if warm:
        wu = max(warm, key=lambda c: c.warm_work_units)
        sizes = " and ".join(f"{n}^3" for n in sorted({c.n for c in warm}))
        w(f"| <= {WORK_UNITS:g} work units incl. setup, gmg ({sizes}; constant, layered, inclusions; "
          f"warm, in this process) | worst {wu.warm_work_units:.1f} ({wu.n}^3 {wu.pattern}); "
          + ", ".join(f"{c.n}^3 {c.pattern} {c.warm_work_units:.1f}" for c in warm)
          + f" | {_v(wu.warm_work_units <= WORK_UNITS)} |")
        wi = max(warm, key=lambda c: c.in_solve_work_units)
        w(f"| (context) the same warm solves counted in their own operator passes (CG's A p inside "
          f"the solve, median), against the unit above (best of several back to back, which can run "
          f"from the last-level cache: *operator / copy* above 100 %) | worst {wi.in_solve_work_units:.1f} "
          f"({wi.n}^3 {wi.pattern}); "
          + ", ".join(f"{c.n}^3 {c.pattern} {c.in_solve_work_units:.1f} (pass {c.warm['in_solve_apply'] * 1e3:.1f} "
                      f"ms, unit {c.apply * 1e3:.1f} ms)" for c in warm)
          + " | not the target's measure |")
    gmg = [c for c in cases if c.method == "gmg"]
    if gmg:
        wu = max(gmg, key=lambda c: c.work_units)
        w(f"| (context) work units of the `sevenfold run` children, cold: their setup and solve "
          f"include loading the compiled kernels | worst {wu.work_units:.0f} ({wu.n}^3 {wu.pattern}) | "
          "not the target's measure |")
        bw = min(gmg, key=lambda c: c.bandwidth / c.copy_bandwidth)
        w(f"| operator >= {BANDWIDTH:.0%} of copy bandwidth (every size) | worst "
          f"{bw.bandwidth / bw.copy_bandwidth:.0%} ({bw.n}^3) | {_v(bw.bandwidth / bw.copy_bandwidth >= BANDWIDTH)} |")
        bigs = [c.n for c in cases if c.baseline is None and c.method == "gmg" and not c.lean]
        largest = bigs[0] if bigs else max(c.n for c in gmg)  # the first big size, else the largest
        mem = [c for c in gmg if c.n == largest and not c.lean]
        m = max(mem, key=lambda c: c.sevenfold.peak_rss)
        bpu = m.sevenfold.peak_rss / m.cells
        lay = sorted((c for c in gmg if c.pattern == "layered" and not c.lean), key=lambda c: c.n)
        marginal = ""
        if len(lay) >= 2:
            a, b = lay[-2], lay[-1]
            marginal = (f"; marginal {(b.sevenfold.peak_rss - a.sevenfold.peak_rss) / (b.cells - a.cells):.0f} "
                        f"between layered {a.n}^3 and {b.n}^3")
        w(f"| <= {BYTES_PER_UNKNOWN:g} B/unknown peak on the gmg path ({largest}^3) | "
          f"{bpu:.0f} ({m.pattern}){marginal} | {_v(bpu <= BYTES_PER_UNKNOWN)} |")
        for c in (c for c in gmg if c.lean):
            bpu = c.sevenfold.peak_rss / c.cells
            w(f"| <= {BYTES_PER_UNKNOWN:g} B/unknown, {c.n}^3 {c.pattern} on the lean path (finest level "
              f"smoothed on the float64 arrays) | {bpu:.0f}, {c.sevenfold.wall:.1f} s whole process, "
              f"{c.iterations} iterations | {_v(bpu <= BYTES_PER_UNKNOWN)} |")
    bigc = [c for c in cases if c.baseline is None and not c.lean]
    for i, c in enumerate(bigc):
        if i == 0:
            ok = c.sevenfold.wall < BIG_SECONDS and c.sevenfold.peak_rss < BIG_BYTES
            w(f"| {c.n}^3 {c.pattern} < {BIG_SECONDS:g} s within 24 GB | {c.sevenfold.wall:.1f} s whole "
              f"process, peak {_gb(c.sevenfold.peak_rss)} GB ({c.method}, {c.iterations} iterations) | {_v(ok)} |")
        else:
            ok = c.sevenfold.peak_rss < BIG_BYTES
            w(f"| {c.n}^3 {c.pattern} ({c.cells:,} unknowns) solved within 24 GB | peak "
              f"{_gb(c.sevenfold.peak_rss)} GB = {c.sevenfold.peak_rss / c.cells:.0f} B/unknown, "
              f"{c.sevenfold.wall:.1f} s whole process ({c.method}, {c.iterations} iterations) | {_v(ok)} |")
    if not bigc:
        w(f"| {(big or [512])[0]}^3 heterogeneous < {BIG_SECONDS:g} s within 24 GB | not run in this session"
          f"{': ' + big_skipped if big_skipped else ''} | n/a |")
    for r in fft_rows:
        w(f"| fft path within {FFT_RATIO}x of a bare scipy.fft pair, {r.n}^3 | {min(r.fft):.3f} s / "
          f"{min(r.pair):.3f} s = {r.ratio:.2f}x | {_v(r.ratio <= FFT_RATIO)} |")
    if not fft_rows:
        w("| fft path within 1.5x of a bare scipy.fft pair | see [RESULTS_FFT.md](RESULTS_FFT.md) | n/a |")
    w("")

    for p in PATTERNS:
        rows = [c for c in cases if c.pattern == p]
        if not rows:
            continue
        w(f"## {p}\n")
        w("| cells | program | method | whole s | own s | assembly s | setup s | solve s | iterations | "
          "work units | warm WU | peak RSS MiB | B/unknown | operator GB/s | copy GB/s | operator / copy | "
          "whole ratio | own ratio | agreement |")
        w("|" + "---|" * 19)
        for c in rows:
            s, sec = c.sevenfold, c.seconds
            ratio_w = f"{c.baseline.wall / s.wall:.1f}x" if c.baseline else ""
            ratio_o = f"{c.base_own / c.job_seconds:.1f}x" if c.baseline else ""
            agree = (f"{c.difference:.1e} ({'met' if c.difference <= AGREEMENT else '**not met**'})"
                     if c.baseline else "")
            w(f"| {c.n}^3{' lean' if c.lean else ''} | sevenfold | {c.method} | {s.wall:.2f} | {c.job_seconds:.2f} | "
              f"{sec.get('assemble', np.nan):.3f} | {sec.get('setup', np.nan):.3f} | {sec.get('solve', np.nan):.3f} | "
              f"{c.iterations} | {c.work_units:.1f} | {_warm_cell(c)} | {s.peak_rss / 2**20:,.0f} | {s.peak_rss / c.cells:.0f} | "
              f"{c.bandwidth / 1e9:.1f} | {c.copy_bandwidth / 1e9:.1f} | {c.bandwidth / c.copy_bandwidth:.0%} | "
              f"{ratio_w} | {ratio_o} | {agree} |")
            if c.baseline:
                b, tb = c.baseline, c.base
                w(f"| {c.n}^3 | baseline | pyamg SA + CG | {b.wall:.2f} | {c.base_own:.2f} | {tb['assembly']:.3f} | "
                  f"{tb['setup']:.3f} | {tb['solve']:.3f} | {int(tb['iterations'])} | {c.base_work_units:.1f} | | "
                  f"{b.peak_rss / 2**20:,.0f} | {b.peak_rss / c.cells:.0f} | | | | | | |")
        w("")
        notes = [c for c in rows if c.notes]
        for c in notes:
            w(f"- {c.n}^3{' lean' if c.lean else ''}: {c.notes}")
        for c in rows:
            if np.isfinite(c.handed_wall):
                w(f"- {c.n}^3: handed to a running worker (`sevenfold run -q`, best of two): "
                  f"{c.handed_wall:.2f} s whole process, {c.baseline.wall / c.handed_wall:.1f}x the "
                  f"baseline's; the job {c.handed_own:.2f} s in the worker's slot, "
                  f"{c.base_own / c.handed_own:.1f}x the baseline's own time")
        for c in rows:
            if c.baseline:
                w(f"- {c.n}^3: relative residual in the baseline's own matrix and right-hand side: "
                  f"sevenfold's solution {c.residual_in_baseline:.1e}, the baseline's "
                  f"{float(c.base['relative_residual']):.1e} (both asked for {baseline.RTOL:g})")
        same = [c for c in rows if c.same_k is not None]
        if same:
            w(f"- same coefficient array on both sides: "
              f"{', '.join(f'{c.n}^3 {c.same_k}' for c in same)}")
        w("")

    if fft_rows:
        w("## fft path against a bare transform pair\n")
        w("`fft_bench.bench(n, \"dirichlet\", ...)` in this run: best of its repeats, the bare pair "
          "`idstn(dstn(x))` against `solve_fft(problem)`; the full study is "
          "[RESULTS_FFT.md](RESULTS_FFT.md).\n")
        w("| cells | workers | bare pair s | fft path s | ratio | verdict |\n|---|---|---|---|---|---|")
        for r in fft_rows:
            w(f"| {r.n}^3 | {r.workers} | {min(r.pair):.3f} | {min(r.fft):.3f} | {r.ratio:.2f} | "
              f"{_v(r.ratio <= FFT_RATIO)} |")
        w("")

    timed = [r for c in cases for r in (c.sevenfold, c.baseline) if r is not None]
    out += machine_section(info, load, timed, "One run per side and case; children ran one at a time. ")
    return "\n".join(out)


def machine_section(info: dict[str, str], load: dict, timed: list, note: str = "") -> list[str]:
    """The report's Machine section: ``info``, the load before and after, the processes that
    were running, and the CPU time other work used during the ``timed`` child processes
    (``run.ProcessRun``); ``note`` goes before the closing advice."""
    out = ["## Machine\n", "| | |\n|---|---|"]
    out += [f"| {key} | {value} |" for key, value in info.items()]
    out += [f"| load average before | {load['start']} |", f"| load average after | {load['end']} |", ""]
    others = load.get("others") or []
    if others:
        out.append(f"Other processes running at the start: {len(others)} "
                   f"({'; '.join(f'`{c}`' for c in others[:4])}).\n")
    out.append(f"The machine is shared (2 cores): other processes used {sum(r.other_cpu for r in timed):.0f} "
               f"CPU s during the {sum(r.wall for r in timed):.0f} s of timed child processes. {note}"
               "Compare ratios within this run, not times across runs.\n")
    return out


def plot(cases: list[Case], path: Path) -> None:
    """Whole-process time against unknowns, log-log, both programs, a marker per pattern."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    markers = {"constant": "o", "layered": "s", "inclusions": "^"}
    fig, ax = plt.subplots(figsize=(7, 5))
    for p in PATTERNS:
        rows = sorted((c for c in cases if c.pattern == p), key=lambda c: c.n)
        if not rows:
            continue
        ax.plot([c.cells for c in rows], [c.sevenfold.wall for c in rows], marker=markers[p], color="C0",
                label=f"sevenfold, {p} ({'/'.join(sorted({c.method for c in rows}))})")
        based = [c for c in rows if c.baseline]
        if based:
            ax.plot([c.cells for c in based], [c.baseline.wall for c in based], marker=markers[p],
                    color="C3", linestyle="--", label=f"baseline, {p}")
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel("unknowns")
    ax.set_ylabel("whole-process wall time (s)")
    ax.set_title(f"sevenfold run vs numpy+scipy+pyamg baseline, rtol {baseline.RTOL:g}")
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize=8)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)


def revision() -> str:
    """The repository's commit at the start, and whether src/ differs from it."""
    import subprocess

    root = HERE.parent
    try:
        head = subprocess.run(["git", "-C", str(root), "rev-parse", "--short", "HEAD"], capture_output=True,
                              text=True, check=True).stdout.strip()
        dirty = subprocess.run(["git", "-C", str(root), "status", "--porcelain", "src"], capture_output=True,
                               text=True, check=True).stdout.strip()
    except (OSError, subprocess.CalledProcessError):
        return "unknown"
    return f"{head} ({'src/ modified in the work tree' if dirty else 'src/ as committed'})"


def main(args, command: str) -> int:
    """Run the speed suite with parsed ``args`` (sizes, big, quick, repeats, results, keep)."""
    sizes = args.sizes or ([64] if args.quick else [64, 128, 256])
    big = [] if (args.quick or args.big == [0]) else (args.big or [512])
    results = Path(args.results) if args.results else HERE / "RESULTS.md"
    load: dict = {"start": "%.2f %.2f %.2f" % os.getloadavg(), "others": engine.other_processes()}
    info = engine.machine()
    info["sevenfold revision"] = revision()
    folder = Path(tempfile.mkdtemp(prefix="sevenfold-speed-"))
    cases: list[Case] = []
    fft_rows: list = []
    try:
        print(f"jobs and results in {folder}", flush=True)
        for p in PATTERNS:  # warm numba's kernel cache and the OS file cache, both sides
            run_case(folder, p, 32, True, 1)
        worker = Worker(folder)
        try:
            worker.wait_ready()
            for p in PATTERNS:  # the slot's first jobs, untimed
                worker.flow(folder / f"speed-{p}-32.toml", folder / f"speed-{p}-32.zarr")
            for n in sizes:
                for p in PATTERNS:
                    c = run_case(folder, p, n, True, args.repeats, worker=worker)
                    cases.append(c)
                    print(f"{n}^3 {p}: sevenfold {c.method} {c.sevenfold.wall:.2f} s whole, {c.job_seconds:.2f} s "
                          f"own, {c.iterations} it, {c.work_units:.1f} WU; handed to a worker {c.handed_wall:.2f} s "
                          f"whole, {c.handed_own:.2f} s own; baseline {c.baseline.wall:.2f} s whole, "
                          f"{c.base_own:.2f} s own; difference {c.difference:.1e}", flush=True)
        finally:
            worker.stop()  # before the big sizes: its slot's memory is theirs
        for n, lean in [(n, False) for n in big] + [(n, True) for n in getattr(args, "lean", [])]:
            c = run_case(folder, "layered", n, False, max(3, args.repeats // 2), lean)
            cases.append(c)
            print(f"{n}^3 layered: sevenfold {c.method} {c.sevenfold.wall:.2f} s whole, peak "
                  f"{_gb(c.sevenfold.peak_rss)} GB, {c.iterations} it", flush=True)
        import fft_bench

        from sevenfold.solvers.fft import default_workers

        for n in [s for s in sizes if s in (128, 256)] or sizes[-1:]:
            r = fft_bench.bench(n, "dirichlet", 3, default_workers())
            fft_rows.append(r)
            print(f"fft {n}^3: ratio {r.ratio:.2f}", flush=True)
        load["end"] = "%.2f %.2f %.2f" % os.getloadavg()
        text = report(command, info, cases, fft_rows, load, big, "" if big else "not asked for (--quick or --big 0)")
    finally:
        if args.keep:
            print(f"kept {folder}")
        else:
            shutil.rmtree(folder, ignore_errors=True)
    results.write_text(text)
    plot(cases, results.with_name("speed.png") if results.parent == HERE else results.with_suffix(".png"))
    print(f"wrote {results}")
    return 0
