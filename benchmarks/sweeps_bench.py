"""Both z-line sweeps of a smoothing step in one pass over memory, against an earlier
revision's one sweep per pass, alone and in whole gmg solves.

    python benchmarks/sweeps_bench.py --against REVISION [--sizes 128 256]
        [--cases layered inclusions constant column "graded job"] [--rounds 3]

gmg smooths each level with two zebra z-line Gauss-Seidel sweeps before the coarse correction
and two after. Until this change each sweep was one pass over the level's arrays (its second
colour trailing the first by one x-plane), so a smoothing step read the coefficients, pivots,
right-hand side and solution twice. Now `lines.line_gauss_seidel` takes the number of
sweeps and runs all four colour passes as one wavefront, each trailing the one before by a
plane: the same column solves in an order that gives the same numbers bit for bit.

For each job, in one process, the two forms alternating (``--rounds`` times each, best of).
The jobs are `cycle_bench.problem_level`'s, as in restrict_bench.py.

* the kernel alone on the two finest levels of the solver's hierarchy (float32, random b and
  u): two calls of the revision's one-sweep kernel against one call of the two-sweep kernel,
  wall seconds over one float64 operator application of the job's grid (best of many): work
  units; and whether the results are equal bit for bit;
* the warm gmg set-up + solve (one untimed solve, then the best of two, as
  ``speed.warm_gmg``), with gmg's multigrid kernels and smoothing loop as they are and as
  they were at ``REVISION`` (loaded beside them with ``wall_bench.module_at``, compiled
  without numba's cache); the iterations and the final residual must match.

Writes benchmarks/RESULTS_SWEEPS.md.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import restrict_bench as rb  # noqa: E402
import run as engine  # noqa: E402
import timing  # noqa: E402
import wall_bench  # noqa: E402


def lines_at(revision: str):
    """``sevenfold.kernels.lines`` (the z-line smoother) as it was at ``revision``
    (``wall_bench.kernels_at``)."""
    return wall_bench.kernels_at(revision, "sevenfold.kernels.lines")


def one_sweep_per_pass(old):
    """gmg's smoothing as it was: ``old``'s one-sweep kernel called once per sweep."""
    import numba

    from sevenfold.kernels import stencil

    def smooth(self, lv, b, u, first, zero=False):
        if zero:
            u[...] = 0.0
        for _ in range(self.sweeps[first]):
            if lv.lines:
                old.line_gauss_seidel(lv.tx, lv.ty, lv.tz, lv.inv_w, b, u, first,
                                      numba.get_num_threads())
            else:
                for colour in (first, 1 - first):
                    stencil.gauss_seidel_colour(lv.tx, lv.ty, lv.tz, lv.diag, b, u, colour)
    return smooth


def two_sweeps(old, lv, b, u, threads: int) -> None:
    """One smoothing step (two sweeps) on ``lv`` with ``old``'s kernel: one call where it takes
    the number of sweeps, else one call per sweep."""
    argcount = old.line_gauss_seidel.py_func.__code__.co_argcount
    if argcount == 10:  # the number of sweeps, and whether u starts at zero
        old.line_gauss_seidel(lv.tx, lv.ty, lv.tz, lv.inv_w, b, u, 0, 2, threads, False)
    elif argcount == 9:
        old.line_gauss_seidel(lv.tx, lv.ty, lv.tz, lv.inv_w, b, u, 0, 2, threads)
    else:
        for _ in range(2):
            old.line_gauss_seidel(lv.tx, lv.ty, lv.tz, lv.inv_w, b, u, 0, threads)


def kernel_pair(job, old, rounds: int) -> list[dict]:
    """Two sweeps on each of the two finest smoothed levels (the coarsest is factored, not
    smoothed), both forms, in work units of the job."""
    import numba

    from sevenfold.kernels import lines
    from sevenfold.solvers.gmg import DEFAULTS, Hierarchy, fine_level

    fine, _ = fine_level(job)
    hierarchy = Hierarchy(fine, **{k: v for k, v in DEFAULTS.items() if k != "start"})
    apply = rb.apply_seconds(fine)
    threads = numba.get_num_threads()
    rows = []
    for lv in hierarchy.levels[:-1][:2]:
        if not lv.lines:
            continue
        rng = np.random.default_rng(0)
        b = rng.standard_normal(lv.shape).astype(lv.diag.dtype)
        start = rng.standard_normal(lv.shape).astype(lv.diag.dtype)
        now, then = start.copy(), start.copy()

        def run_now(u=now):
            lines.line_gauss_seidel(lv.tx, lv.ty, lv.tz, lv.inv_w, b, u, 0, 2, threads, False)

        def run_then(u=then):
            two_sweeps(old, lv, b, u, threads)

        run_now(), run_then()
        equal = bool(np.array_equal(now, then))
        times: dict[str, list[float]] = {"now": [], "then": []}
        for _ in range(rounds):
            times["then"].append(timing.best(run_then, 9, time.perf_counter))
            times["now"].append(timing.best(run_now, 9, time.perf_counter))
        rows.append({"shape": lv.shape, "then": min(times["then"]) / apply,
                     "now": min(times["now"]) / apply, "apply": apply, "equal": equal})
    return rows


def main(argv: list[str] | None = None) -> int:
    from sevenfold.solvers import hierarchy

    args = rb.ab_arguments(__doc__, "RESULTS_SWEEPS.md", argv)
    old = lines_at(args.against)
    then = {(hierarchy, "lines"): old, (hierarchy.Hierarchy, "_smooth"): one_sweep_per_pass(old)}
    return report(args, argv, "sweeps_bench.py", "Two z-line sweeps in one pass over memory",
                  __doc__, old, then)


def lines_ab(doc: str, results: str, script: str, title: str, argv: list[str] | None) -> int:
    """The kernel and solve pairs of a z-line smoother as it is against ``--against``'s, the
    solves with only hierarchy's ``lines`` module swapped; writes ``results`` (``report``)."""
    from sevenfold.solvers import hierarchy

    args = rb.ab_arguments(doc, results, argv)
    old = lines_at(args.against)
    return report(args, argv, script, title, doc, old, {(hierarchy, "lines"): old})


def report(args, argv: list[str] | None, script: str, title: str, doc: str, old, then: dict) -> int:
    """Run the kernel and solve pairs for every size and case of ``args`` and write the
    report: ``old`` the revision's z-line smoother module, ``then`` the attributes its solves set
    (restrict_bench.solve_pair)."""
    lines, info = engine.report_head(script, argv, title)
    lines += rb.ab_preamble(doc, args.against, "; *two sweeps* = one smoothing step on that "
                            "level; *same* = the same iterations and final relative residual") + [
              "| job | cells | apply ms | level | two sweeps WU then | now | now / then | equal | "
              "solve s then | solve s now | now / then | same | solve WU then | solve WU now |",
              "|" + "---|" * 14]
    for n in args.sizes:
        for case in args.cases:
            job = rb.problem(n, case)
            kernels = kernel_pair(job, old, args.rounds)
            s = rb.solve_pair(job, then, args.rounds)
            del job
            same = (s["iterations then"] == s["iterations now"]
                    and s["residual then"] == s["residual now"])
            apply = kernels[0]["apply"]
            for i, k in enumerate(kernels):
                solve = (f"{s['then']:.3f} | {s['now']:.3f} | {s['now'] / s['then']:.2f} | "
                         f"{'yes' if same else 'NO'} ({int(s['iterations now'])}) | "
                         f"{s['then'] / apply:.1f} | {s['now'] / apply:.1f}") if i == 0 else " | | | | |"
                lines.append(
                    f"| {case} | {n}^3 | {apply * 1e3:.2f} | {'x'.join(map(str, k['shape']))} | "
                    f"{k['then']:.2f} | {k['now']:.2f} | {k['now'] / k['then']:.2f} | "
                    f"{'yes' if k['equal'] else 'NO'} | {solve} |")
                print(lines[-1], flush=True)
    engine.write_report(args.results, lines, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
