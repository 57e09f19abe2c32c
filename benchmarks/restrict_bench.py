"""The fused residual and restriction, as it is against an earlier revision's, alone and in
whole gmg solves.

    python benchmarks/restrict_bench.py --against REVISION [--sizes 128 256]
        [--cases layered inclusions constant column "graded job"] [--rounds 3]

`stencil.residual_restrict` computes rc = P^T (b - A u) on each level of every cycle. Until
this change it added each cell's residual to its aggregate as it went, so the loop over z
carried a dependence through rc and had branches for the row's ends: it did not vectorise,
and at 256^3 it cost more than one float64 operator application on float32 arrays. Now each
row's A u goes to a row buffer (the operator's own branch-free row) and the residuals are then
summed pairwise into the coarse row.

For each job, in one process, the two forms alternating (``--rounds`` times each, best of).
The jobs (``cycle_bench.problem_level``'s): the speed suite's three patterns, issue 10's
1000:1 column, and the graded-grid issue's anisotropic job (z widths graded over three
decades, conductivity 100:100:1).

* the kernel alone on the finest level of the solver's hierarchy (float32, random b and u),
  wall seconds of one call over one float64 operator application (best of many): work units;
  and the largest difference of the coarse residuals, relative to their largest value (the
  two forms sum in a different order);
* the warm gmg set-up + solve (one untimed solve, then the best of two, as
  ``speed.warm_gmg``),
  with gmg's kernels module as it is and as it was at ``REVISION`` (loaded beside it with
  ``wall_bench.module_at``, compiled without numba's cache); the iterations must match.

Writes benchmarks/RESULTS_RESTRICT.md.
"""

from __future__ import annotations

import argparse
import gc
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import cycle_bench as cb  # noqa: E402
import run as engine  # noqa: E402
import timing  # noqa: E402
import wall_bench  # noqa: E402

CASES = ("layered", "inclusions", "constant", "column", "graded job")


def stencil_at(revision: str):
    """``sevenfold.kernels.stencil`` as it was at ``revision`` (``wall_bench.kernels_at``)."""
    return wall_bench.kernels_at(revision, "sevenfold.kernels.stencil")


def problem(n: int, case: str):
    from sevenfold.problem import build_problem
    from sevenfold.spec import parse_job

    table = {"column": cb.column_table, "graded job": cb.graded_job_table}.get(case)
    return build_problem(parse_job(table(n) if table else cb.spec_table(n, case), "restrict_bench"))


def apply_seconds(fine) -> float:
    """Best wall seconds of one float64 operator application on the finest level."""
    from sevenfold.kernels import stencil

    u = np.random.default_rng(1).standard_normal(fine.shape)
    out = np.empty_like(u)
    return timing.best(lambda: stencil.apply(fine.tx, fine.ty, fine.tz, fine.diag, u, out),
                       max(20, min(200, int(5e7 // u.size))))


def kernel_pair(job, old, rounds: int) -> dict[str, float]:
    """One call of each form on the finest level's float32 arrays, in work units."""
    from sevenfold.kernels import stencil
    from sevenfold.solvers.gmg import DEFAULTS, Hierarchy, fine_level

    fine, _ = fine_level(job)
    options = {k: v for k, v in DEFAULTS.items() if k != "start"}
    hierarchy = Hierarchy(fine, **options)
    top, coarse = hierarchy.levels[0], hierarchy.levels[1]
    rng = np.random.default_rng(0)
    b = rng.standard_normal(top.shape).astype(hierarchy.dtype)
    u = rng.standard_normal(top.shape).astype(hierarchy.dtype)
    now, then = np.empty(coarse.shape, hierarchy.dtype), np.empty(coarse.shape, hierarchy.dtype)

    def run_now():
        stencil.residual_restrict(top.tx, top.ty, top.tz, top.diag, b, u, top.step, top.agg, now)

    def run_then():
        old.residual_restrict(top.tx, top.ty, top.tz, top.diag, b, u, top.step, top.agg, then)

    run_now(), run_then()
    difference = float(np.abs(now - then).max() / np.abs(then).max())
    times: dict[str, list[float]] = {"now": [], "then": []}
    for _ in range(rounds):
        times["then"].append(timing.best(run_then, 9, time.perf_counter))
        times["now"].append(timing.best(run_now, 9, time.perf_counter))
    apply = apply_seconds(fine)
    return {"then": min(times["then"]) / apply, "now": min(times["now"]) / apply,
            "apply": apply, "difference": difference}


def warm_gmg(job, timed: int = 2) -> dict[str, float]:
    """gmg on ``job`` in this process: one untimed solve, then the best of ``timed`` by set-up +
    solve wall seconds (``speed.warm_gmg`` on a built problem)."""
    from sevenfold.solvers import solve_problem
    from sevenfold.spec import SolverSpec

    best: dict[str, float] = {}
    for i in range(timed + 1):
        _, result = solve_problem(job, SolverSpec(method="gmg", rtol=1e-8), "gmg")
        row = {"seconds": result.setup_seconds + result.solve_seconds, "iterations": result.iterations,
               "residual": result.final_relative_residual, "notes": result.notes}
        if i and (not best or row["seconds"] < best["seconds"]):
            best = row
        del result
        gc.collect()
    return best


def best_of_arms(arms: tuple[str, ...], rounds: int, warm) -> dict[str, dict]:
    """``warm(arm)`` (a :func:`warm_gmg` row) ``rounds`` times for each arm, the arms' order
    turning every round; each arm's fastest row, every one checked to have reached rtol 1e-8."""
    runs: dict[str, list[dict]] = {arm: [] for arm in arms}
    for r in range(rounds):
        k = r % len(arms)
        for arm in arms[k:] + arms[:k]:
            runs[arm].append(warm(arm))
    best = {arm: min(rs, key=lambda x: x["seconds"]) for arm, rs in runs.items()}
    for arm, row in best.items():
        assert row["residual"] <= 1e-8, (arm, row)
    return best


def arm_cells(best: dict[str, dict], arms: tuple[str, ...]) -> str:
    """Two report cells from :func:`best_of_arms`: each arm's iterations, then its seconds."""
    return (" / ".join(str(best[arm]["iterations"]) for arm in arms) + " | "
            + " / ".join(f"{best[arm]['seconds']:.3f}" for arm in arms))


def job_rows(args, lines: list[str], row) -> None:
    """``row(n, case)`` (a report line) for every size and case of ``args``, each appended to
    ``lines`` and printed as it comes (a job's arrays go when its row returns)."""
    for n in args.sizes:
        for case in args.cases:
            lines.append(row(n, case))
            print(lines[-1], flush=True)


def solve_pair(job, then: dict, rounds: int) -> dict[str, float]:
    """Warm gmg set-up + solve as the code is (*now*) and with ``then``'s attributes set
    ({(object, name): value}: the revision's pieces), alternating, best of ``rounds`` each."""
    kept = {key: getattr(*key) for key in then}
    runs: dict[str, list[dict[str, float]]] = {"now": [], "then": []}
    try:
        for _ in range(rounds):
            for name, values in (("then", then), ("now", kept)):
                for (owner, attribute), value in values.items():
                    setattr(owner, attribute, value)
                runs[name].append(warm_gmg(job))
    finally:
        for (owner, attribute), value in kept.items():
            setattr(owner, attribute, value)
    out = {}
    for name, rs in runs.items():
        best = min(rs, key=lambda r: r["seconds"])
        out[name] = best["seconds"]
        out[f"iterations {name}"] = best["iterations"]
        out[f"residual {name}"] = best["residual"]
    return out


def ab_arguments(doc: str, results: str, argv: list[str] | None,
                 cases: tuple[str, ...] = CASES) -> argparse.Namespace:
    """The options every A/B script of one change against ``--against REVISION`` takes
    (restrict_bench, sweeps_bench, setup_bench, chains_bench); ``results`` is its default
    file name."""
    p = argparse.ArgumentParser(description=doc.splitlines()[0])
    p.add_argument("--against", required=True, metavar="REVISION")
    p.add_argument("--sizes", type=int, nargs="+", default=[128, 256])
    p.add_argument("--cases", nargs="+", default=list(cases), choices=cases)
    p.add_argument("--rounds", type=int, default=3)
    p.add_argument("--results", type=Path, default=HERE / results)
    return p.parse_args(argv)


def ab_preamble(doc: str, against: str, legend: str = "") -> list[str]:
    """The text of an A/B report before its table: the script's description from ``doc`` and
    what *then*, *now*, *WU* and *solve* mean (``legend``: the script's own terms, each
    starting "; ")."""
    return [doc.split("\n\n", 2)[2].split("\n\nWrites")[0], "",
            f"*then* = revision {against}, *now* = the working tree; *WU* = seconds over one "
            "two-thread float64 operator application of the job's grid (*apply*); *solve* = warm "
            f"gmg set-up + solve, wall seconds, two threads{legend}.", ""]


def main(argv: list[str] | None = None) -> int:
    args = ab_arguments(__doc__, "RESULTS_RESTRICT.md", argv)
    lines, info = engine.report_head("restrict_bench.py", argv,
                                     "The fused residual and restriction, vectorised")
    old = stencil_at(args.against)
    lines += ab_preamble(__doc__, args.against) + [
              "| job | cells | apply ms | kernel WU then | kernel WU now | now / then | difference | "
              "iterations then / now | solve s then | solve s now | now / then | solve WU then | "
              "solve WU now |", "|" + "---|" * 13]
    lines += stencil_rows(args, old, kernel_pair, lambda k: f"{k['difference']:.1e}")
    engine.write_report(args.results, lines, info)
    return 0


def stencil_rows(args: argparse.Namespace, old, kernel_pair, detail) -> list[str]:
    """One table row per size and case of an A/B of a stencil kernel against ``old`` (the
    module at the revision): ``kernel_pair(job, old, rounds)`` times the kernel alone (its
    dict: then, now, apply), :func:`solve_pair` whole warm solves with the old module in
    the hierarchy's place; ``detail(kernel dict)`` is the row's seventh column."""
    from sevenfold.solvers import hierarchy

    lines = []
    for n in args.sizes:
        for case in args.cases:
            job = problem(n, case)
            k = kernel_pair(job, old, args.rounds)
            s = solve_pair(job, {(hierarchy, "stencil"): old}, args.rounds)
            del job
            lines.append(
                f"| {case} | {n}^3 | {k['apply'] * 1e3:.2f} | {k['then']:.2f} | {k['now']:.2f} | "
                f"{k['now'] / k['then']:.2f} | {detail(k)} | "
                f"{int(s['iterations then'])} / {int(s['iterations now'])} | {s['then']:.3f} | "
                f"{s['now']:.3f} | {s['now'] / s['then']:.2f} | {s['then'] / k['apply']:.1f} | "
                f"{s['now'] / k['apply']:.1f} |")
            print(lines[-1], flush=True)
    return lines


if __name__ == "__main__":
    sys.exit(main())
