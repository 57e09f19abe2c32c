"""Aggregates arranged to keep contact planes apart, as it is against an earlier revision's
hierarchy, in whole gmg solves and in the kernels that take the aggregates.

    python benchmarks/shift_bench.py --against REVISION [--sizes 128 256]
        [--cases contact joints "x joints" layered inclusions constant column "graded job"]
        [--rounds 3]

The cycle pairs cells (0, 1), (2, 3), ... on every coarsened axis. A contact resistance on the
face inside a pair is dropped by the Galerkin product, so the coarse levels miss it (17 and 12
iterations against 5 at 64^3 and 128^3: RESULTS_WALLS_CONTACT.md). Now gmg arranges the pairs,
per level and axis, so that the job's contact planes lie between aggregates
(`solvers.levels.aggregates`: pairs from the parity most planes have, (1, 2), (3, 4), ... for
odd ones, a cell alone where a pair would still hold a plane, or along z under z-lines no
coarsening), and scales each coarse coupling by the fine over the coarse centre distance
(2 / (the two aggregates' sizes summed)). The level kernels take each cell's aggregate per
axis, so every job pays for it in its loops, arranged or not.

For each job, in one process, the two versions alternating (``--rounds`` times each, best of):

* the warm gmg set-up + solve (one untimed solve, then the best of two), with gmg's Hierarchy
  and level kernels as they are (*now*) and as they were at ``REVISION`` (*then*: the
  revision's `solvers/gmg.py`, `solvers/levels.py`, `kernels/stencil.py` and
  `kernels/multigrid.py` loaded beside
  the current ones, compiled without numba's cache; a revision whose Hierarchy takes the
  contact planes is given them);
* the fused residual and restriction alone on the finest level (float32, random b and u),
  *then*, *now* unshifted and *now* with every axis shifted, in work units (seconds over one
  float64 operator application).

The *contact* job (`cycle_bench.contact_table`: a contact plane of 1000 times a cell's own
resistance at x = 23/64, inside a pair at the second level at 128^3, at the first at 64^3 and
at 256^3 ... see the levels column) is the case the shift is for. The *joints* job
(`joints_table`: three bonded joints along z at 19/64, 1/2 and 46/64, of both parities on the
level that has 64 cells along z) is one no shift can serve: there z stays uncoarsened from that
level on, since the z-lines solve along it. The *x joints* job is the same turned across x,
where cells are left alone beside the joints instead (`solvers.levels.aggregates`). The others
have no contact, so their solves must match *then*'s iterations and time.

Writes benchmarks/RESULTS_SHIFT.md.
"""

from __future__ import annotations

import inspect
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import cycle_bench as cb  # noqa: E402
import restrict_bench as rb  # noqa: E402
import run as engine  # noqa: E402
import timing  # noqa: E402
import wall_bench  # noqa: E402

CASES = ("contact", "joints", "x joints") + rb.CASES


def uncached(source: str) -> str:
    return source.replace("cache=True", "cache=False")


def hierarchy_at(revision: str):
    """The multigrid Hierarchy as it was at ``revision`` (in solvers/gmg.py before it had a
    module of its own), on that revision's level kernels."""
    stencil = wall_bench.module_at(revision, "sevenfold.kernels.stencil", edit=uncached)
    multigrid = wall_bench.module_at(revision, "sevenfold.kernels.multigrid", edit=uncached)
    # (the revision's gmg calls them as they were, so not through wall_bench.kernels_at)
    # the revision's levels (its Level and rule for the planes) beside the current ones
    wall_bench.module_at(revision, "sevenfold.solvers.levels", edit=uncached)
    home = ("sevenfold.solvers.hierarchy" if wall_bench.exists_at(revision, "sevenfold.solvers.hierarchy")
            else "sevenfold.solvers.gmg")
    gmg = wall_bench.module_at(revision, home, edit=lambda s: uncached(
        s.replace("from ..kernels import multigrid, stencil\n", "").replace(
            "from ..kernels import lines, multigrid, stencil\n", "")))
    gmg.multigrid, gmg.stencil = multigrid, stencil
    if not hasattr(multigrid, "line_gauss_seidel"):  # a revision after the z-line smoother's split
        gmg.lines = wall_bench.module_at(revision, "sevenfold.kernels.lines", edit=uncached)

    takes_planes = "planes" in inspect.signature(gmg.Hierarchy).parameters

    def hierarchy(fine, planes=None, **options):
        if takes_planes and planes is not None:
            options["planes"] = planes
        h = gmg.Hierarchy(fine, **options)
        h.planes_note = getattr(h, "planes_note", getattr(h, "shift_note", lambda: ""))
        return h

    return hierarchy


def joints_table(n: int, axis: str = "z") -> dict:
    """k = 1 with three bonded joints across ``axis`` (at 19/64, 1/2, 46/64; each 1000 times a
    cell's own resistance at 64^3), a unit source, u = 1 at x_min, 0 at x_max, exchange at
    z_max."""
    table = cb.contact_table(n) | {"name": f"joints-{axis}-{n}", "source": {"value": 1.0}}
    table["contact"] = [{"axis": axis, "at": at, "resistance": 15.6}
                        for at in (19 / 64, 32 / 64, 46 / 64)]
    table["boundary"] = table["boundary"] | {
        "z_max": {"type": "robin", "coefficient": 10.0, "reference": 0.0}}
    return table


def problem(n: int, case: str):
    if case not in ("contact", "joints", "x joints"):
        return rb.problem(n, case)
    from sevenfold.problem import build_problem
    from sevenfold.spec import parse_job

    table = (cb.contact_table(n) if case == "contact"
             else joints_table(n, "x" if case == "x joints" else "z"))
    return build_problem(parse_job(table, "shift_bench"))


def kernel_units(job, old_stencil, rounds: int) -> dict[str, float]:
    """The fused residual and restriction on the finest level: then, now, now shifted (WU);
    ``old_stencil`` from ``wall_bench.kernels_at``."""
    from sevenfold.kernels import stencil
    from sevenfold.solvers.gmg import DEFAULTS, Hierarchy, fine_level
    from sevenfold.solvers.levels import pairs

    fine, _ = fine_level(job)
    hierarchy = Hierarchy(fine, **{k: v for k, v in DEFAULTS.items() if k != "start"})
    top = hierarchy.levels[0]
    rng = np.random.default_rng(0)
    b = rng.standard_normal(top.shape).astype(hierarchy.dtype)
    u = rng.standard_normal(top.shape).astype(hierarchy.dtype)
    agg = {o: pairs(top.shape, top.step, (o, o, o)) for o in (0, 1)}
    out = {o: np.empty(tuple(int(a[-1]) + 1 for a in agg[o]), hierarchy.dtype) for o in (0, 1)}
    calls = {
        "then": lambda: old_stencil.residual_restrict(top.tx, top.ty, top.tz, top.diag, b, u,
                                                      top.step, agg[0], out[0]),
        "now": lambda: stencil.residual_restrict(top.tx, top.ty, top.tz, top.diag, b, u,
                                                 top.step, agg[0], out[0]),
        "now shifted": lambda: stencil.residual_restrict(top.tx, top.ty, top.tz, top.diag, b, u,
                                                         top.step, agg[1], out[1]),
    }
    for call in calls.values():
        call()
    best = {name: np.inf for name in calls}
    for _ in range(rounds):
        for name, call in calls.items():
            best[name] = min(best[name], timing.best(call, 9, time.perf_counter))
    apply = rb.apply_seconds(fine)
    return {name: seconds / apply for name, seconds in best.items()} | {"apply": apply}


def levels_note(job) -> str:
    from sevenfold.solvers.gmg import DEFAULTS, Hierarchy, contact_planes, fine_level

    fine, _ = fine_level(job)
    h = Hierarchy(fine, planes=contact_planes(job),
                  **{k: v for k, v in DEFAULTS.items() if k != "start"})
    return " > ".join("x".join(map(str, s)) for s in h.shapes) + h.planes_note()


def main(argv: list[str] | None = None) -> int:
    args = rb.ab_arguments(__doc__, "RESULTS_SHIFT.md", argv, CASES)
    lines, info = engine.report_head("shift_bench.py", argv,
                                     "Aggregates arranged to keep contact planes apart")
    from sevenfold.solvers import gmg

    old_hierarchy = hierarchy_at(args.against)
    old_stencil = wall_bench.kernels_at(args.against, "sevenfold.kernels.stencil")
    lines += rb.ab_preamble(__doc__, args.against) + [
              "| job | cells | iterations then / now | solve s then | solve s now | now / then | "
              "restriction WU then / now / now shifted | apply ms | levels now |",
              "|" + "---|" * 9]
    def row(n: int, case: str) -> str:
        job = problem(n, case)
        k = kernel_units(job, old_stencil, args.rounds)
        s = rb.solve_pair(job, {(gmg, "Hierarchy"): old_hierarchy}, args.rounds)
        return (f"| {case} | {n}^3 | {int(s['iterations then'])} / {int(s['iterations now'])} | "
                f"{s['then']:.3f} | {s['now']:.3f} | {s['now'] / s['then']:.2f} | "
                f"{k['then']:.2f} / {k['now']:.2f} / {k['now shifted']:.2f} | "
                f"{k['apply'] * 1e3:.2f} | {levels_note(job)} |")

    rb.job_rows(args, lines, row)
    engine.write_report(args.results, lines, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
