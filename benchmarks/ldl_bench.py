"""The z-line solves as L D L^T, and smoothing from zero without zeroing, against a revision's
Thomas recurrences, alone and in warm gmg solves.

    python benchmarks/ldl_bench.py --against REVISION [--sizes 128 256] [--rounds 3]
        [--cases layered inclusions constant column "graded job"]

Each zebra z-line sweep solves a tridiagonal system per column. The Thomas form advanced
y_m = (rhs_m + tz_{m-1} y_{m-1}) / w_m: a multiply, an add and a multiply on the chain from one
row to the next. As L D L^T the forward step is z_m = rhs_m + (tz_{m-1} / w_{m-1}) z_{m-1} and
the back substitution u_m = z_m / w_m + (tz_m / w_m) u_{m+1}: a multiply and an add each, the
other products off the chain. The same pivots, the numbers equal to rounding.

The first smoothing of each visit to a level starts from a zero correction. The cycle zeroed
the correction and the first colour pass then read those zeros as its neighbours. Now the
sweep is told (``zero``): the first colour's right-hand sides are b alone and nothing is
zeroed, since the first two colour passes write every cell before any is read (bit for bit the
same as zeroing).

For each job, in one process:

* the kernel alone on the finest level of the solver's hierarchy (float32, random b and u):
  one smoothing step (two colour passes) with REVISION's kernel (*then*) and with this one
  (*LDL*), and from zero: REVISION's after zeroing u (*then from 0*) against this one told
  ``zero`` (*now from 0*), in work units (seconds over one two-thread float64 operator
  application, best of many); rounds alternate, best of;
* the warm gmg set-up + solve (one untimed solve, then the best of two) in three arms
  alternating, the order turning every round, best of the rounds: *then* = REVISION's kernel,
  the cycle zeroing its corrections (REVISION's behaviour); *LDL* = this kernel, zeroing as
  before; *now* = this kernel and the cycle as built.

Writes benchmarks/RESULTS_LDL.md.
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
import shift_bench  # noqa: E402
import timing  # noqa: E402
import wall_bench  # noqa: E402

ARMS = ("then", "LDL", "now")
CASES = ("layered", "inclusions", "constant", "column", "graded job")


def zeroing(kernel):
    """``kernel`` (a line sweep without ``zero``, or this one told never to skip) behind this
    one's signature: zero u first when asked, as the cycle did before."""
    def sweep(tx, ty, tz, inv_w, b, u, first, sweeps, chunks, zero):
        if zero:
            u[...] = 0.0
        kernel(tx, ty, tz, inv_w, b, u, first, sweeps, chunks)
    return sweep


def arm_lines(arm: str, old):
    """The module the hierarchy calls for its z-line sweeps in ``arm``."""
    import types

    from sevenfold.kernels import lines

    if arm == "now":
        return lines
    kernel = old.line_gauss_seidel if arm == "then" else (
        lambda *a: lines.line_gauss_seidel(*a, False))
    return types.SimpleNamespace(line_factor=lines.line_factor,
                                 line_gauss_seidel=zeroing(kernel))


def warm(job, arm: str, old) -> dict:
    """``rb.warm_gmg`` with the hierarchy's sweeps as in ``arm``."""
    from sevenfold.solvers import hierarchy

    kept = hierarchy.lines
    hierarchy.lines = arm_lines(arm, old)
    try:
        return rb.warm_gmg(job)
    finally:
        hierarchy.lines = kept


def kernel_units(job, old, rounds: int) -> dict[str, float]:
    """One smoothing step on the finest level's float32 arrays in each form, in work units,
    and the largest difference between the two forms' results (relative to their size)."""
    import numba

    from sevenfold.kernels import lines
    from sevenfold.solvers.gmg import DEFAULTS, Hierarchy, fine_level

    fine, _ = fine_level(job)
    options = {k: v for k, v in DEFAULTS.items() if k != "start"}
    top = Hierarchy(fine, **options).levels[0]
    if top.diag.dtype != np.float32:
        raise SystemExit("the finest level is not float32 here: pick another job")
    rng = np.random.default_rng(0)
    b = rng.standard_normal(top.shape).astype(np.float32)
    u0 = rng.standard_normal(top.shape).astype(np.float32)
    threads = numba.get_num_threads()
    a = (top.tx, top.ty, top.tz, top.inv_w, b)
    u = {k: u0.copy() for k in ("then", "LDL", "then from 0", "now from 0")}
    forms = {
        "then": lambda: old.line_gauss_seidel(*a, u["then"], 0, 1, threads),
        "LDL": lambda: lines.line_gauss_seidel(*a, u["LDL"], 0, 1, threads, False),
        "then from 0": lambda: (u["then from 0"].fill(0.0),
                                old.line_gauss_seidel(*a, u["then from 0"], 0, 1, threads)),
        "now from 0": lambda: lines.line_gauss_seidel(*a, u["now from 0"], 0, 1, threads, True),
    }
    for form in forms.values():
        form()
    difference = float(np.abs(u["LDL"] - u["then"]).max() / np.abs(u["then"]).max())
    times: dict[str, list[float]] = {k: [] for k in forms}
    for _ in range(rounds):
        for k, form in forms.items():
            times[k].append(timing.best(form, 9, time.perf_counter))
    apply = rb.apply_seconds(fine)
    row = {k: min(v) / apply for k, v in times.items()}
    row.update(apply=apply, difference=difference)
    return row


def main(argv: list[str] | None = None) -> int:
    args = rb.ab_arguments(__doc__, "RESULTS_LDL.md", argv, CASES)
    lines, info = engine.report_head("ldl_bench.py", argv,
                                     "The z-line solves as L D L^T, smoothing from zero unzeroed")
    old = wall_bench.kernels_at(args.against, "sevenfold.kernels.lines")
    lines += [__doc__.split("\n\n", 2)[2].split("\n\nWrites")[0], "",
              f"*then* = revision {args.against}; *step* = one smoothing step alone on the "
              "finest level, WU; *solve* = warm gmg set-up + solve, wall seconds, two threads; "
              "*WU* = solve seconds over one two-thread float64 operator application of the "
              "job's grid; *difference* = max |LDL - then| / max |then| after one step.", "",
              "| job | cells | step then / LDL | from 0: then / now | LDL / then | now / then "
              "(from 0) | difference | iterations then / LDL / now | solve s then / LDL / now | "
              "LDL / then | now / then | WU then / now |",
              "|" + "---|" * 12]
    def row(n: int, case: str) -> str:
        job = shift_bench.problem(n, case)
        k = kernel_units(job, old, args.rounds)
        best = rb.best_of_arms(ARMS, args.rounds, lambda arm: warm(job, arm, old))
        t = {arm: b["seconds"] for arm, b in best.items()}
        return (f"| {case} | {n}^3 | {k['then']:.2f} / {k['LDL']:.2f} | "
                f"{k['then from 0']:.2f} / {k['now from 0']:.2f} | {k['LDL'] / k['then']:.2f} | "
                f"{k['now from 0'] / k['then from 0']:.2f} | {k['difference']:.1e} | "
                f"{rb.arm_cells(best, ARMS)} | "
                f"{t['LDL'] / t['then']:.2f} | {t['now'] / t['then']:.2f} | "
                f"{t['then'] / k['apply']:.1f} / {t['now'] / k['apply']:.1f} |")

    rb.job_rows(args, lines, row)
    engine.write_report(args.results, lines, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
