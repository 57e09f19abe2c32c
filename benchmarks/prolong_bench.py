"""The prolongation without a branch on held cells, against an earlier revision's, alone and
in whole gmg solves.

    python benchmarks/prolong_bench.py --against REVISION [--sizes 128 256]
        [--cases layered inclusions constant column "graded job"] [--rounds 3]

`stencil.prolong_add` adds the coarse correction to every fine cell of an aggregate, u +=
s P e, on each level of every cycle. It tested each cell's ``free`` flag and added only on
free cells; the branch kept the row loop from vectorising, and at 128^3 one call cost two
thirds of a float64 operator application on float32 arrays. It now adds s e free[m] (0 on a
held cell) over the row's pairs: the same numbers bit for bit.

For each job (restrict_bench.py's), in one process, the two forms alternating (``--rounds``
times each, best of):

* the kernel alone from the first coarse level to the finest (float32, random e and u), wall
  seconds of one call over one float64 operator application (best of many): work units; and
  whether the two give the same numbers;
* the warm gmg set-up + solve (one untimed solve, then the best of two, as
  ``speed.warm_gmg``), with the stencil kernels module as it is and as it was at
  ``REVISION`` (``wall_bench.kernels_at``, compiled without numba's cache); the iterations
  must match.

Writes benchmarks/RESULTS_PROLONG.md.
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


def kernel_pair(job, old, rounds: int) -> dict[str, float]:
    """One call of each form from the first coarse level to the finest, in work units."""
    from sevenfold.kernels import stencil
    from sevenfold.solvers.gmg import DEFAULTS, Hierarchy, fine_level

    fine, _ = fine_level(job)
    hierarchy = Hierarchy(fine, **{k: v for k, v in DEFAULTS.items() if k != "start"})
    top, coarse = hierarchy.levels[0], hierarchy.levels[1]
    rng = np.random.default_rng(0)
    e = rng.standard_normal(coarse.shape).astype(hierarchy.dtype)
    u = rng.standard_normal(top.shape).astype(hierarchy.dtype)
    now, then = u.copy(), u.copy()
    stencil.prolong_add(e, top.free, top.step, top.agg, 1.0, now)
    old.prolong_add(e, top.free, top.step, top.agg, 1.0, then)
    same = bool(np.array_equal(now, then))
    times: dict[str, list[float]] = {"now": [], "then": []}
    for _ in range(rounds):
        times["then"].append(timing.best(
            lambda: old.prolong_add(e, top.free, top.step, top.agg, 1.0, then), 9, time.perf_counter))
        times["now"].append(timing.best(
            lambda: stencil.prolong_add(e, top.free, top.step, top.agg, 1.0, now), 9, time.perf_counter))
    apply = rb.apply_seconds(fine)
    return {"then": min(times["then"]) / apply, "now": min(times["now"]) / apply, "apply": apply,
            "same": same}


def main(argv: list[str] | None = None) -> int:
    args = rb.ab_arguments(__doc__, "RESULTS_PROLONG.md", argv)
    lines, info = engine.report_head("prolong_bench.py", argv, "The prolongation, vectorised")
    old = rb.stencil_at(args.against)
    lines += rb.ab_preamble(__doc__, args.against, "; *same* = the two forms' u bit for bit") + [
        "| job | cells | apply ms | kernel WU then | kernel WU now | now / then | same | "
        "iterations then / now | solve s then | solve s now | now / then | solve WU then | "
        "solve WU now |", "|" + "---|" * 13]
    lines += rb.stencil_rows(args, old, kernel_pair, lambda k: "yes" if k["same"] else "no")
    engine.write_report(args.results, lines, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
