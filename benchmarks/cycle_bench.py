"""Multigrid cycle designs compared: iterations, work units and time, one run, one process.

    python benchmarks/cycle_bench.py [--sizes 64 128 256] [--big-sizes 256] [--quick]

For each problem and size, gmg-CG to rtol 1e-8 with each cycle design (``VARIANTS``); the
work unit is one application of the finest operator (``stencil.apply``, best of several, timed
in this process just before the solves of that problem), so work units = (setup + solve) /
apply. Setup is the hierarchy (coarse operators, line pivots, LU); the face arrays of the
finest level are not counted (they are the operator itself). Time ratio = the design's setup +
solve over the previous design's ("before": W-cycle, two red-black Gauss-Seidel sweeps each
side, piecewise-constant aggregation, float64), same problem, same run.

Problems: the speed suite's three patterns (benchmarks/baseline.py: constant, layered,
inclusions; k = 1 and 1e-3 boxes), ``thin`` (n^3 cells on a 1 x 1 x 0.001 box: every cell
1000 times wider than tall) and ``graded`` (tests/gmg_cases.py: z widths graded over three
decades, conductivity 100 horizontal to 1 vertical, built as face arrays).

Then full multigrid alone on a manufactured solution with smooth variable k (``--fmg``).
Writes benchmarks/RESULTS_CYCLE.md.
"""

from __future__ import annotations

import argparse
import contextlib
import datetime
import shlex
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent / "tests"))
import baseline  # noqa: E402
import run as engine  # noqa: E402
from gmg_cases import graded_level  # noqa: E402

from sevenfold.problem import build_problem  # noqa: E402
from sevenfold.solvers.gmg import fine_level, solve_levels  # noqa: E402
from sevenfold.spec import parse_job  # noqa: E402

RTOL = 1e-8
# CPU seconds of this process: the machine is shared (load 8 to 18 on 2 cores while this was
# written), and wall time then measures the other work as much as ours. With one numba thread
# (main sets it) CPU time is the time the work itself took.
CLOCK = time.process_time
MAX_ITERATIONS = 300
BEFORE = dict(cycle="W", smoothing=2, smoother="point", transfer="constant", precision="float64",
              start="zero", coarsest_cells=512)
KEPT = "W(2,2) z-line scaled f32 (kept)"


def _v(cycle, smoother, transfer, precision="float64", start="zero", **extra):
    return {**dict(cycle=cycle, smoothing=1, smoother=smoother, transfer=transfer,
                   precision=precision, start=start), **extra}


VARIANTS = {
    "before": BEFORE,
    "V(1,1) point": _v("V", "point", "constant"),
    "V(1,1) z-line": _v("V", "line", "constant"),
    "V(1,1) z-line, linear P": _v("V", "line", "linear"),
    "V(1,1) z-line scaled f32 + FMG": _v("V", "line", "scaled", "float32", "fmg"),
    "W(1,1) z-line": _v("W", "line", "constant"),
    "W(1,1) z-line, 8^3 coarsest": _v("W", "line", "constant", coarsest_cells=512),
    "W(1,1) z-line scaled": _v("W", "line", "scaled"),
    "W(1,1) z-line scaled f32": _v("W", "line", "scaled", "float32"),
    "W(1,1) z-line scaled f32 + FMG": _v("W", "line", "scaled", "float32", "fmg"),
    "W(2,2) z-line scaled f32, lean (finest smoothed on the float64 arrays)": _v(
        "W", "line", "scaled", "float32", "zero", smoothing=2, finest="operator"),
    "V(2,2) z-line scaled f32 + FMG": _v("V", "line", "scaled", "float32", "fmg", smoothing=2),
    "W(2,2) z-line scaled f32 + FMG": _v("W", "line", "scaled", "float32", "fmg", smoothing=2),
    "W(2,2) point scaled f32": _v("W", "point", "scaled", "float32", "zero", smoothing=2),
    "W(2,2) z-line where z is strong, else point, scaled f32": _v(
        "W", "auto", "scaled", "float32", "zero", smoothing=2),
    "W(2,2) z-line scaled f32, sweep as two colour passes": _v(
        "W", "line", "scaled", "float32", "zero", smoothing=2, two_pass=True),
    "W(2,2) z-line scaled f32, finest level W(1,1)": _v(
        "W", "line", "scaled", "float32", "zero", smoothing=2, finest_sweeps=1),
    "W(3,3) z-line scaled f32": _v("W", "line", "scaled", "float32", "zero", smoothing=3),
    "W(2,2) z-line scaled f32, finest level W(3,3)": _v(
        "W", "line", "scaled", "float32", "zero", smoothing=2, finest_sweeps=3),
    **{f"W(2,2) z-line scaled f32, finest level over-relaxed {w}": _v(
        "W", "line", "scaled", "float32", "zero", smoothing=2, omega=(w, 1.0))
       for w in (1.05, 1.1, 1.15, 1.2)},
    "W(2,2) z-line scaled f32, every level over-relaxed 1.1": _v(
        "W", "line", "scaled", "float32", "zero", smoothing=2, omega=(1.1, 1.1)),
    "W(2,2) z-line scaled f32, float64 finest right-hand side": _v(
        "W", "line", "scaled", "float32", "zero", smoothing=2, wide_rhs=True),
    "W(2,2) z-line scaled f32, 2048-cell coarsest": _v(
        "W", "line", "scaled", "float32", "zero", smoothing=2, coarsest_cells=2048),
    "W(2,2) z-line scaled f32, 8^3 coarsest": _v(
        "W", "line", "scaled", "float32", "zero", smoothing=2, coarsest_cells=512),
    "W(1,1) z-line scaled f32, two-grid": _v("W", "line", "scaled", "float32", two_grid=True),
    "W(2,2) z-line scaled f32, two-grid": _v(
        "W", "line", "scaled", "float32", "zero", smoothing=2, two_grid=True),
    KEPT: _v("W", "line", "scaled", "float32", "zero", smoothing=2),
}
BIG_VARIANTS = ("W(1,1) z-line scaled f32 + FMG", KEPT)
CASES = ("constant", "layered", "inclusions", "column", "thin", "graded", "graded job")


def spec_table(n: int, case: str) -> dict:
    regions = [{"box": {"min": list(lo), "max": list(hi)}, "value": v}
               for lo, hi, v in baseline.pattern_boxes("constant" if case == "thin" else case)]
    material = {"value": baseline.K_BACKGROUND}
    if regions:
        material["region"] = regions
    return {"name": f"cycle-{case}-{n}", "grid": {"cells": [n, n, n],
            "size": [1.0, 1.0, 0.001 if case == "thin" else 1.0]},
            "material": material, "source": {"value": 0.0},
            "boundary": {"x_min": {"type": "dirichlet", "value": baseline.U_X_MIN},
                         "x_max": {"type": "dirichlet", "value": baseline.U_X_MAX},
                         **({"z_min": {"type": "dirichlet", "value": 0.5}} if case == "thin" else {})},
            "solver": {"method": "gmg"}}


def graded_job_table(n: int) -> dict:
    """A job on n x n x n cells whose z widths grow geometrically from 1/(1000 n) to about
    1/n (three decades; aspect ratio 1000:1 at z = 0), conductivity [100, 100, 1]: issue 9's
    target problem through the job file ([grid.edges] segments, directional material)."""
    h = 1.0 / n
    first = h / 1000.0
    ratio = 1000.0 ** (1.0 / (n - 1))
    length = first * (ratio**n - 1.0) / (ratio - 1.0)
    return {"name": f"cycle-graded-job-{n}",
            "grid": {"cells": [n, n, "edges"], "size": [1.0, 1.0, "edges"],
                     "edges": {"z": {"segments": [{"length": length, "cells": n, "first": first}]}}},
            "material": {"value": [100.0, 100.0, 1.0]}, "source": {"value": 1.0},
            "boundary": {"x_min": {"type": "dirichlet", "value": 1.0},
                         "x_max": {"type": "dirichlet", "value": 0.0},
                         "z_min": {"type": "dirichlet", "value": 0.0}},
            "solver": {"method": "gmg"}}


def column_table(n: int) -> dict:
    """Issue 10's speed case: k = 1000 in 0.3 < x, y < 0.7 through the full height, 1 around
    it, source sin(pi x) sin(pi y) sin(pi z), u = 0 on every face (benchmarks/column.py)."""
    faces = {face: {"type": "dirichlet", "value": 0.0}
             for face in ("x_min", "x_max", "y_min", "y_max", "z_min", "z_max")}
    return {"name": f"column-{n}", "grid": {"cells": [n, n, n], "size": [1.0, 1.0, 1.0]},
            "material": {"value": 1.0, "region": [{"box": {"min": [0.3, 0.3, 0.0],
                                                           "max": [0.7, 0.7, 1.0]},
                                                   "value": 1000.0}]},
            "source": {"value": "sin(pi*x)*sin(pi*y)*sin(pi*z)"}, "boundary": faces,
            "solver": {"method": "gmg"}}


def contact_table(n: int) -> dict:
    """k = 1 with a contact resistance of 15.6 on the plane x = 23/64 (a cell edge for n a
    multiple of 64; inside a pair of cells at the first coarsening where its cells split
    along x, for n = 64 between cells 22 and 23), 1000 times a cell's own resistance at 64^3;
    u = 1 at x_min, 0 at x_max."""
    return {"name": f"contact-{n}", "grid": {"cells": [n, n, n], "size": [1.0, 1.0, 1.0]},
            "material": {"value": 1.0}, "source": {"value": 0.0},
            "contact": [{"axis": "x", "at": 23 / 64, "resistance": 15.6}],
            "boundary": {"x_min": {"type": "dirichlet", "value": 1.0},
                         "x_max": {"type": "dirichlet", "value": 0.0}},
            "solver": {"method": "gmg"}}


def problem_level(n: int, case: str):
    if case == "contact":
        return fine_level(build_problem(parse_job(contact_table(n), "bench")))
    if case == "column":
        return fine_level(build_problem(parse_job(column_table(n), "bench")))
    if case == "graded":
        return graded_level(n)
    if case == "graded job":
        return fine_level(build_problem(parse_job(graded_job_table(n), "bench")))
    return fine_level(build_problem(parse_job(spec_table(n, case), "bench")))


def unit_seconds(level, repeats: int = 9) -> float:
    """Median seconds of one application (the machine is shared: a median taken around each
    solve sees the same load as the solve, where a best-of would flatter the unit)."""
    u = np.random.default_rng(1).standard_normal(level.shape)
    out = np.empty_like(u)
    level.apply(u, out)
    times = []
    for _ in range(repeats):
        t = CLOCK()
        level.apply(u, out)
        times.append(CLOCK() - t)
    return float(np.median(times))


@contextlib.contextmanager
def patched(two_pass: bool = False, finest_sweeps: int | None = None, wide_rhs: bool = False,
            omega: tuple[float, float] | None = None):
    """Designs measured by patching the kept one: ``two_pass``, the line sweep as it was before
    the one-pass sweep (each colour its own pass over memory: the same numbers, more memory
    traffic); ``finest_sweeps``, that many sweeps each side on the finest level only;
    ``wide_rhs``, the finest level smoothing CG's float64 residual itself (as before the
    float32 copy: a second signature of each level kernel, no narrowing pass); ``omega``,
    z-line sweeps over-relaxed by omega[0] on the finest level and omega[1] on the others
    (relaxed_lines.py, checked against the kept sweep at omega = 1 first)."""
    from sevenfold.kernels import lines
    from sevenfold.solvers.gmg import Hierarchy

    one_pass, smooth, rhs = lines.line_gauss_seidel, Hierarchy._smooth, Hierarchy._rhs

    def sweep(tx, ty, tz, inv_w, b, u, first, sweeps, chunks, zero):
        if zero:
            u[...] = 0.0
        for _ in range(sweeps):
            for colour in (first, 1 - first):
                lines.line_gauss_seidel_colour(tx, ty, tz, inv_w, b, u, colour)

    def fewer_on_finest(self, lv, b, u, first, zero=False):
        kept = self.sweeps
        if lv is self.levels[0]:
            self.sweeps = (finest_sweeps, finest_sweeps)
        try:
            smooth(self, lv, b, u, first, zero)
        finally:
            self.sweeps = kept
    if two_pass:
        lines.line_gauss_seidel = sweep
    if finest_sweeps is not None:
        Hierarchy._smooth = fewer_on_finest
    if wide_rhs:
        Hierarchy._rhs = lambda self, r: r.reshape(self.levels[0].shape)
    if omega is not None:
        import numba
        import relaxed_lines

        relaxed_lines.check()

        def relaxed(self, lv, b, u, first, zero=False):
            if not lv.lines:
                return smooth(self, lv, b, u, first, zero)
            w = omega[0] if lv is self.levels[0] else omega[1]
            relaxed_lines.line_gauss_seidel(lv.tx, lv.ty, lv.tz, lv.inv_w, b, u, first,
                                            self.sweeps[first], numba.get_num_threads(), zero, w)
        Hierarchy._smooth = relaxed
    try:
        yield
    finally:
        lines.line_gauss_seidel, Hierarchy._smooth, Hierarchy._rhs = one_pass, smooth, rhs


def run_case(n: int, case: str, names, repeats: int = 1) -> list[dict]:
    fine, b = problem_level(n, case)
    rows = []
    for name in names:
        before_unit = unit_seconds(fine)
        try:
            seconds = np.inf
            options = dict(VARIANTS[name])
            if options.pop("two_grid", False):  # the first coarse level solved exactly (LU)
                options["coarsest_cells"] = fine.diag.size // 8 + 1
            with patched(options.pop("two_pass", False), options.pop("finest_sweeps", None),
                         options.pop("wide_rhs", False), options.pop("omega", None)):
                for _ in range(repeats):  # the best of several: other processes only add time
                    t = CLOCK()
                    result, hierarchy = solve_levels(fine, b, RTOL, MAX_ITERATIONS, **options)
                    seconds = min(seconds, CLOCK() - t)
            iterations, converged = result.iterations, result.converged
            # setup's share of the CPU time, from the wall-clock split solve_levels records
            setup = seconds * result.setup_seconds / (result.setup_seconds + result.solve_seconds)
            levels = " > ".join("x".join(map(str, s)) for s in hierarchy.shapes)
        except Exception as error:  # a stall is a result here, recorded as such
            iterations, converged, seconds, setup = len(getattr(error, "history", [])) - 1, False, np.nan, np.nan
            levels = str(error).split(";")[0][:60]
        unit = float(np.median([before_unit, unit_seconds(fine)]))
        rows.append(dict(case=case, n=n, name=name, iterations=iterations, converged=converged,
                         seconds=seconds, setup=setup, unit=unit, levels=levels))
        print(f"{case:10s} {n:4d} {name:28s} it {iterations:4d} conv {converged} "
              f"wu {seconds / unit:7.1f} t {seconds:7.2f}", flush=True)
    before = next((r["seconds"] for r in rows if r["name"] == "before"),
                  next((r["seconds"] for r in rows if r["name"] == KEPT), np.nan))
    for r in rows:
        r["ratio"] = r["seconds"] / before
    return rows


# ---------------------------------------------------------------- full multigrid accuracy
def manufactured_table(n: int) -> dict:
    """u = sin(pi x) sin(pi y) sin(pi z), k = 2 + x + 0.5 sin(2 y) on the unit cube, u = 0 on
    every face; f = -div(k grad u) worked out by hand (product rule)."""
    su = "sin(pi*x)*sin(pi*y)*sin(pi*z)"
    f = (f"3*pi**2*(2 + x + 0.5*sin(2*y))*{su} - pi*cos(pi*x)*sin(pi*y)*sin(pi*z)"
         f" - cos(2*y)*pi*sin(pi*x)*cos(pi*y)*sin(pi*z)")
    faces = {face: {"type": "dirichlet", "value": 0.0}
             for face in ("x_min", "x_max", "y_min", "y_max", "z_min", "z_max")}
    return {"name": f"fmg-{n}", "grid": {"cells": [n, n, n], "size": [1.0, 1.0, 1.0]},
            "material": {"value": "2 + x + 0.5*sin(2*y)"}, "source": {"value": f},
            "boundary": faces, "solver": {"method": "gmg"}}


def fmg_study(n: int, cycles_list=((1, "V", (2, 1)), (1, "V", (1, 2)), (1, "V", (2, 2)),
                                    (1, "V", (1, 1)), (1, "W", (2, 1)), (2, "V", (2, 1)))) -> list[dict]:
    """Full multigrid alone: ``cycles`` cycles of ``kind`` with (before, after) sweeps per level."""
    from sevenfold.solvers.gmg import DEFAULTS, Hierarchy

    problem = build_problem(parse_job(manufactured_table(n), "bench"))
    fine, b = fine_level(problem)
    x = (np.arange(n) + 0.5) / n
    exact = (np.sin(np.pi * x)[:, None, None] * np.sin(np.pi * x)[None, :, None]
             * np.sin(np.pi * x)[None, None, :])
    result, _ = solve_levels(fine, b, 1e-12, 200)
    discrete = result.x.reshape(fine.shape)
    e_disc = np.abs(discrete - exact).max()
    rows = []
    options = {k: v for k, v in DEFAULTS.items() if k != "start"}
    for cycles, kind, sweeps in cycles_list:
        seconds = alone = np.inf
        for _ in range(3):  # the best of three: other processes only add time
            t = CLOCK()
            hierarchy = Hierarchy(fine, **options)
            t_setup = CLOCK()
            u = hierarchy.full_multigrid(b.ravel(), cycles, kind, sweeps).reshape(fine.shape)
            seconds, alone = min(seconds, CLOCK() - t), min(alone, CLOCK() - t_setup)
        unit = unit_seconds(fine, 21)
        rows.append(dict(n=n, cycles=f"{cycles} {kind}({sweeps[0]},{sweeps[1]})", e_disc=e_disc,
                         e_fmg=np.abs(u - exact).max(), e_alg=np.abs(u - discrete).max(),
                         wu=seconds / unit, wu_fmg=alone / unit))
        print(rows[-1], flush=True)
    return rows


# ---------------------------------------------------------------- report
def report(rows: list[dict], fmg_rows: list[dict], info: dict, command: str) -> str:
    out = [f"# {info.pop('title', 'Multigrid cycle designs')}", "",
           f"Written by `{command}` on {info['date']}; every number below comes from that run. "
           "Do not edit by hand: run the command again.", "",
           "gmg-CG to rtol 1e-8 (true residual). All times are CPU seconds of this process on one "
           "numba thread (the shared machine's load made wall times meaningless; see Machine). "
           "*work units* = (hierarchy setup + solve, full multigrid start included) / one "
           "finest-level operator application (float64, median of applications timed just "
           "before and just after that solve); *setup WU* = the hierarchy's share; "
           "*time ratio* = seconds / the `before` design's seconds on the same problem "
           "in this run (the kept design's where `before` was not run). `before` is the previous cycle (W, 2 red-black Gauss-Seidel sweeps each "
           "side, piecewise-constant aggregation, float64, start from zero). A design that did not "
           f"converge within {MAX_ITERATIONS} iterations or broke down shows `no`.", "",
           "Problems: constant, layered, inclusions = the speed suite's (RESULTS.md); thin = "
           "cells 1000 times wider than tall (1 x 1 x 0.001 box, z_min held); graded = z widths "
           "graded over three decades (aspect ratio 1000:1 at the bottom, 1:1 at the top), "
           "conductivity 100 horizontal to 1 vertical, volume-integrated rows "
           "(tests/gmg_cases.py); graded job = the same through a job file (z from "
           "`[grid.edges]` segments with `first` = 1/(1000 n), material [100, 100, 1]).", ""]
    for case in CASES:
        sub = [r for r in rows if r["case"] == case]
        if not sub:
            continue
        out += [f"## {case}", "", "| cells | design | iterations | converged | work units | "
                "setup WU | seconds | time ratio |", "|---|---|---|---|---|---|---|---|"]
        for r in sub:
            out.append(f"| {r['n']}^3 | {r['name']} | {r['iterations']} | "
                       f"{'yes' if r['converged'] else 'no'} | {r['seconds'] / r['unit']:.1f} | "
                       f"{r['setup'] / r['unit']:.1f} | {r['seconds']:.2f} | "
                       + (f"{r['ratio']:.2f} |" if np.isfinite(r["ratio"]) else "n/a |"))
        levels = sorted({(r["n"], r["levels"]) for r in sub if r["name"] == KEPT})
        out += [""] + [f"- {n}^3 levels (kept design): {lv}" for n, lv in levels] + [""]
    if fmg_rows:
        out += ["## Full multigrid alone", "",
                "Manufactured u = sin(pi x) sin(pi y) sin(pi z), k = 2 + x + 0.5 sin(2y), u = 0 on "
                "every face. *discretisation error* = max |u_h - u| at cell centres of the "
                "converged discrete solution (rtol 1e-12); *FMG error* = the same for full "
                "multigrid alone (the kept design's hierarchy; cycles per level as given, "
                "V(before, after) sweeps); *ratio* = FMG error / discretisation error; "
                "*algebraic* = max |u_FMG - u_h| / discretisation error (below 1: the ratio does "
                "not rest on the two errors cancelling); *work units* include building the "
                "hierarchy, *FMG work units* do not (best of three, CPU time).", "",
                "| cells | cycles per level | discretisation error | FMG error | ratio | algebraic "
                "| work units | FMG work units |",
                "|---|---|---|---|---|---|---|---|"]
        for r in fmg_rows:
            out.append(f"| {r['n']}^3 | {r['cycles']} | {r['e_disc']:.3e} | {r['e_fmg']:.3e} | "
                       f"{r['e_fmg'] / r['e_disc']:.2f} | {r['e_alg'] / r['e_disc']:.2f} | "
                       f"{r['wu']:.1f} | {r['wu_fmg']:.1f} |")
        out.append("")
    out += ["## Machine", "", "| | |", "|---|---|"]
    out += [f"| {k} | {v} |" for k, v in info.items()]
    return "\n".join(out) + "\n"


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[64, 128])
    parser.add_argument("--big-sizes", type=int, nargs="*", default=[256])
    parser.add_argument("--cases", nargs="+", default=list(CASES))
    parser.add_argument("--fmg-sizes", type=int, nargs="*", default=[32, 64, 128])
    parser.add_argument("--variants", nargs="+", default=list(VARIANTS))
    parser.add_argument("--results", default=str(HERE / "RESULTS_CYCLE.md"))
    parser.add_argument("--repeats", type=int, default=3, help="solves per design, best kept")
    parser.add_argument("--title", default="Multigrid cycle designs", help="the report's heading")
    args = parser.parse_args(argv)
    import numba

    numba.set_num_threads(1)
    info = engine.machine()
    info["load average before"] = " ".join(f"{x:.2f}" for x in __import__("os").getloadavg())
    info["sevenfold revision"] = __import__("subprocess").run(
        ["git", "rev-parse", "--short", "HEAD"], capture_output=True, text=True, cwd=HERE).stdout.strip()
    info["title"] = args.title
    info["date"] = datetime.datetime.now(datetime.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    for case in ("constant", "graded"):  # compile every kernel once before timing
        run_case(20, case, [v for v in VARIANTS if v in args.variants])
    print("timed runs", flush=True)
    rows = []
    for n in args.sizes:
        for case in args.cases:
            rows += run_case(n, case, [v for v in VARIANTS if v in args.variants], args.repeats)
    for n in args.big_sizes:
        for case in args.cases:
            rows += run_case(n, case, [v for v in BIG_VARIANTS if v in args.variants], args.repeats)
    fmg_rows = [r for n in args.fmg_sizes for r in fmg_study(n)]
    info["load average after"] = " ".join(f"{x:.2f}" for x in __import__("os").getloadavg())
    command = "python benchmarks/cycle_bench.py " + shlex.join(argv if argv is not None else sys.argv[1:])
    Path(args.results).write_text(report(rows, fmg_rows, info, command.strip()))
    print(f"wrote {args.results}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
