"""The set-up's Galerkin product, the coarsest factor and CG's vector passes, as they are
against an earlier revision's, each alone and together, in warm gmg solves.

    python benchmarks/set_up_and_cg_bench.py --against REVISION [--sizes 128 256]
        [--cases layered inclusions constant column "graded job"] [--rounds 3]

Three pieces of a gmg solve that changed together:

* *galerkin*: ``multigrid.galerkin_scaled``, the coarse levels' face arrays from the fine
  ones (set-up);
* *coarsest*: ``solvers.coarsest.CoarsestSolver``, the coarsest level's sparse Cholesky
  factor (set-up);
* *cg*: ``solvers.cg.pcg`` with its vector kernels (``kernels.vector``), CG's passes over
  the vectors in every iteration.

For each job (``cycle_bench.problem_level``'s, as in restrict_bench.py), in one process, warm
gmg set-up + solve (one untimed solve, then the best of two, as ``speed.warm_gmg``) in arms
alternating, the order turning every round, best of the rounds: *then* = all three pieces as
at ``REVISION`` (loaded beside the current ones with ``wall_bench.module_at``, compiled
without numba's cache); *now* = as built; and *now but X then* for each piece X, which
shows what X alone saves (its time less *now*'s). Every arm must reach rtol 1e-8; the
iterations are listed so that a change in them shows.

Writes benchmarks/RESULTS_SET_UP_CG.md.
"""

from __future__ import annotations

import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import restrict_bench as rb  # noqa: E402
import run as engine  # noqa: E402
import shift_bench  # noqa: E402
import wall_bench  # noqa: E402

PIECES = ("galerkin", "coarsest", "cg")
ARMS = ("then", "now") + tuple(f"now but {piece} then" for piece in PIECES)
CASES = ("layered", "inclusions", "constant", "column", "graded job")


def pieces_at(revision: str) -> dict[str, tuple[object, str, object]]:
    """Each piece as (owner, attribute, the revision's value) for patching gmg's modules."""
    from sevenfold.kernels import multigrid
    from sevenfold.solvers import gmg, hierarchy

    def kernels_from(module: str):
        old = f"from ..kernels._{module}_at_{revision} import"
        return lambda source: source.replace(f"from ..kernels.{module} import", old)

    galerkin = wall_bench.kernels_at(revision, "sevenfold.kernels.multigrid").galerkin_scaled
    wall_bench.kernels_at(revision, "sevenfold.kernels.fronts")
    coarsest = wall_bench.module_at(revision, "sevenfold.solvers.coarsest", edit=kernels_from("fronts"))
    wall_bench.kernels_at(revision, "sevenfold.kernels.vector")
    cg = wall_bench.module_at(revision, "sevenfold.solvers.cg", edit=kernels_from("vector"))
    return {"galerkin": (multigrid, "galerkin_scaled", galerkin),
            "coarsest": (hierarchy, "CoarsestSolver", coarsest.CoarsestSolver),
            "cg": (gmg, "pcg", cg.pcg)}


def warm(job, arm: str, old: dict[str, tuple[object, str, object]]) -> dict:
    """``rb.warm_gmg`` with the pieces ``arm`` takes from the revision patched in."""
    taken = PIECES if arm == "then" else tuple(p for p in PIECES if arm == f"now but {p} then")
    kept = {piece: getattr(owner, name) for piece, (owner, name, _) in old.items()}
    try:
        for piece in taken:
            owner, name, value = old[piece]
            setattr(owner, name, value)
        return rb.warm_gmg(job)
    finally:
        for piece, (owner, name, _) in old.items():
            setattr(owner, name, kept[piece])


def main(argv: list[str] | None = None) -> int:
    args = rb.ab_arguments(__doc__, "RESULTS_SET_UP_CG.md", argv, CASES)
    lines, info = engine.report_head("set_up_and_cg_bench.py", argv,
                                     "The Galerkin product, the coarsest factor and CG's passes")
    old = pieces_at(args.against)
    lines += rb.ab_preamble(__doc__, args.against) + [
        "| job | cells | apply ms | iterations " + " / ".join(ARMS) + " | solve s "
        + " / ".join(ARMS) + " | now / then | " + " | ".join(f"{p} saves, WU" for p in PIECES)
        + " | WU then | WU now |",
        "|" + "---|" * (8 + len(PIECES))]

    def row(n: int, case: str) -> str:
        from sevenfold.solvers.gmg import fine_level

        job = shift_bench.problem(n, case)
        apply = rb.apply_seconds(fine_level(job)[0])
        best = rb.best_of_arms(ARMS, args.rounds, lambda arm: warm(job, arm, old))
        t = {arm: b["seconds"] for arm, b in best.items()}
        saves = " | ".join(f"{(t[f'now but {p} then'] - t['now']) / apply:.1f}" for p in PIECES)
        return (f"| {case} | {n}^3 | {apply * 1e3:.2f} | {rb.arm_cells(best, ARMS)} | "
                f"{t['now'] / t['then']:.2f} | {saves} | {t['then'] / apply:.1f} | "
                f"{t['now'] / apply:.1f} |")

    rb.job_rows(args, lines, row)
    engine.write_report(args.results, lines, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
