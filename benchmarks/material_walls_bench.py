"""Walls in the conductivity kept between aggregates, against the same hierarchy without them,
in warm gmg solves.

    python benchmarks/material_walls_bench.py [--sizes 128 256] [--rounds 3]
        [--cases contact joints "x joints" layered inclusions constant column "graded job"]

gmg pairs cells (0, 1), (2, 3), ... on every coarsened axis, and arranges the pairs around the
job's contact planes (`solvers.levels.aggregates`). A pair that straddles a jump in the
conductivity, a cell of issue 10's 1000:1 column with one of its surroundings, is one unknown on
the coarse level where the errors on the two sides differ: at 256^3 the column's walls (between
cells 76 and 77, and 178 and 179) lie inside pairs and the solve took 9 iterations, against 7 at
128^3, where they lie between pairs. Now the hierarchy reads the walls across x and y from the
operator's diagonal (`solvers.levels.material_walls`: neighbours more than WALL_RATIO times
apart over WALL_COVER of a cell boundary's plane) and keeps them between aggregates like contact
planes while an axis has at most one per WALL_SPACING cells (many walls, a stack of layers,
would leave many cells alone for nothing).

For each job, in one process, three arms alternating (``--rounds`` times each, the order
turning every round, best of): the warm gmg set-up + solve (one untimed solve, then the best of
two) as the code is (*walls*), with the Hierarchy's ``walls=False`` (*without*, the code before
this change), and with every wall found kept between aggregates on every level (*every wall*:
WALL_SPACING 1, the rule without its limit); the same code otherwise.

Writes benchmarks/RESULTS_MATERIAL_WALLS.md.
"""

from __future__ import annotations

import argparse
import re
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import restrict_bench as rb  # noqa: E402
import run as engine  # noqa: E402
import shift_bench  # noqa: E402


ARMS = ("without", "walls", "every wall")


def warm(job, arm: str) -> dict:
    """``rb.warm_gmg`` (its row has the solve's notes, its levels) for one arm."""
    from sevenfold.solvers import gmg, levels

    kept, spacing = gmg.Hierarchy, levels.WALL_SPACING
    if arm == "without":
        gmg.Hierarchy = lambda fine, **options: kept(fine, **{**options, "walls": False})
    elif arm == "every wall":
        levels.WALL_SPACING = 1
    try:
        return rb.warm_gmg(job)
    finally:
        gmg.Hierarchy, levels.WALL_SPACING = kept, spacing


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--sizes", type=int, nargs="+", default=[128, 256])
    p.add_argument("--cases", nargs="+", default=list(shift_bench.CASES), choices=shift_bench.CASES)
    p.add_argument("--rounds", type=int, default=3)
    p.add_argument("--results", type=Path, default=HERE / "RESULTS_MATERIAL_WALLS.md")
    args = p.parse_args(argv)
    lines, info = engine.report_head("material_walls_bench.py", argv,
                                     "Walls in the conductivity kept between aggregates")
    from sevenfold.solvers import gmg
    from sevenfold.solvers.levels import material_walls

    lines += [__doc__.split("\n\n", 2)[2].split("\n\nWrites")[0], "",
              "*solve* = warm gmg set-up + solve, wall seconds, two threads, best of the rounds; "
              "*WU* = those seconds over one two-thread float64 operator application of the "
              "job's grid (best of many); *walls* = the cell boundaries found across x and y.", "",
              "| job | cells | walls x / y | iterations without / walls / every wall | "
              "solve s without / walls / every wall | walls / without | every wall / without | "
              "WU without / walls | levels with walls | levels with every wall |",
              "|" + "---|" * 10]
    def row(n: int, case: str) -> str:
        job = shift_bench.problem(n, case)
        fine, _ = gmg.fine_level(job)
        found = material_walls(fine)
        apply = rb.apply_seconds(fine)
        del fine
        best = rb.best_of_arms(ARMS, args.rounds, lambda arm: warm(job, arm))
        t = {arm: b["seconds"] for arm, b in best.items()}
        walls = " / ".join(", ".join(map(str, at)) or "-" for at in found[:2])

        def levels(arm: str) -> str:
            notes = best[arm]["notes"]
            return notes.split("levels ", 1)[1].split(";")[0] + "".join(
                f"; {m[1]} on {m[2]}" for m in re.finditer(
                    r"(pairs arranged|z not coarsened) on (levels? [\d, ]+?) to keep", notes))

        return (f"| {case} | {n}^3 | {walls} | {rb.arm_cells(best, ARMS)} | "
                f"{t['walls'] / t['without']:.2f} | {t['every wall'] / t['without']:.2f} | "
                f"{t['without'] / apply:.1f} / {t['walls'] / apply:.1f} | {levels('walls')} | "
                f"{levels('every wall')} |")

    rb.job_rows(args, lines, row)
    engine.write_report(args.results, lines, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
