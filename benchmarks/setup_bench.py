"""The float32 copy of the finest level and CG's true-residual check, as they are against an
earlier revision's, alone and in whole gmg solves.

    python benchmarks/setup_bench.py --against REVISION [--sizes 128 256]
        [--cases layered inclusions constant column "graded job"] [--rounds 3]

Two single-threaded numpy passes that every gmg solve made, now on both threads:

* the set-up's float32 copy of the finest level's four face arrays (``Level.astype``): numpy's
  ``astype``, one thread, until this change; now ``multigrid.narrow`` from PARALLEL_FROM
  cells;
* CG's true residual ||b - A x|| / ||b|| at the end (and when a solve stops short):
  ``cg.relative_residual`` stored b - A x with numpy's subtraction and took numpy's norms of
  it and of b; now one threaded pass over b and A x (``vector.distance_squared``) divided by
  the ||b|| CG already has.

For each job (``cycle_bench.problem_level``'s, as in restrict_bench.py), in one process, the
two forms alternating (``--rounds`` times each, best of):

* each part alone, wall seconds over one float64 operator application of the job's grid
  (best of many): work units;
* the warm gmg set-up + solve (one untimed solve, then the best of two, as
  ``speed.warm_gmg``), with ``Level.astype`` as numpy's and gmg's CG as it was at
  ``REVISION`` (loaded beside it with ``wall_bench.module_at``); the iterations and the
  final residual must match (the residual to rounding: the sums run in another order).

Writes benchmarks/RESULTS_SETUP.md.
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


def numpy_astype(self, dtype):
    """``Level.astype`` as it was: numpy's conversion, one thread."""
    from sevenfold.solvers.levels import Level

    return Level(*(a.astype(dtype) for a in (self.tx, self.ty, self.tz, self.diag)),
                 self.free, self.step.copy(), self.spacing)


def parts(job, old_cg, rounds: int) -> dict[str, float]:
    """Each part alone, both forms, in work units of the job's operator application."""
    from sevenfold.kernels.vector import vector_ops
    from sevenfold.solvers.gmg import FineOperator, fine_level
    from sevenfold.solvers.levels import Level

    fine, b = fine_level(job)
    flat = b.ravel()
    operator = FineOperator(fine)
    x = np.random.default_rng(3).standard_normal(flat.size)
    ops = vector_ops(flat.size)
    nb = float(np.linalg.norm(flat))

    def true_now():
        return float(np.sqrt(ops.distance_squared(flat, operator @ x))) / nb

    pairs = {"float32 copy": (lambda: numpy_astype(fine, np.float32),
                              lambda: Level.astype(fine, np.float32)),
             "true residual": (lambda: old_cg.relative_residual(operator, x, flat), true_now)}
    out = {}
    for name, (then, now) in pairs.items():
        best = {"then": np.inf, "now": np.inf}
        for _ in range(rounds):
            best["then"] = min(best["then"], timing.best(then, 5, time.perf_counter))
            best["now"] = min(best["now"], timing.best(now, 5, time.perf_counter))
        out[f"{name} then"], out[f"{name} now"] = best["then"], best["now"]
    then_value = old_cg.relative_residual(operator, x, flat)
    out["residual difference"] = abs(true_now() - then_value) / then_value
    out["apply"] = rb.apply_seconds(fine)
    return out


def main(argv: list[str] | None = None) -> int:
    args = rb.ab_arguments(__doc__, "RESULTS_SETUP.md", argv)
    lines, info = engine.report_head("setup_bench.py", argv,
                                     "The float32 copy and the true-residual check on both threads")
    from sevenfold.solvers import gmg
    from sevenfold.solvers.levels import Level

    old_cg = wall_bench.module_at(args.against, "sevenfold.solvers.cg")
    then = {(Level, "astype"): numpy_astype, (gmg, "pcg"): old_cg.pcg}
    lines += rb.ab_preamble(__doc__, args.against, "; *same* = the same iterations, and final "
                            "relative residuals within 1e-6 of each other relative; *residual "
                            "difference* = the two true-residual forms' results on the same random "
                            "x, relative to the revision's") + [
              "| job | cells | apply ms | float32 copy WU then | now | now / then | true residual "
              "WU then | now | now / then | residual difference | solve s then | solve s now | "
              "now / then | same | solve WU then | solve WU now |",
              "|" + "---|" * 16]
    for n in args.sizes:
        for case in args.cases:
            job = rb.problem(n, case)
            k = parts(job, old_cg, args.rounds)
            s = rb.solve_pair(job, then, args.rounds)
            del job
            same = (s["iterations then"] == s["iterations now"]
                    and abs(s["residual then"] - s["residual now"]) <= 1e-6 * s["residual then"])
            a = k["apply"]
            lines.append(
                f"| {case} | {n}^3 | {a * 1e3:.2f} | {k['float32 copy then'] / a:.2f} | "
                f"{k['float32 copy now'] / a:.2f} | "
                f"{k['float32 copy now'] / k['float32 copy then']:.2f} | "
                f"{k['true residual then'] / a:.2f} | {k['true residual now'] / a:.2f} | "
                f"{k['true residual now'] / k['true residual then']:.2f} | "
                f"{k['residual difference']:.1e} | {s['then']:.3f} | {s['now']:.3f} | "
                f"{s['now'] / s['then']:.2f} | {'yes' if same else 'NO'} "
                f"({int(s['iterations now'])}) | {s['then'] / a:.1f} | {s['now'] / a:.1f} |")
            print(lines[-1], flush=True)
    engine.write_report(args.results, lines, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
