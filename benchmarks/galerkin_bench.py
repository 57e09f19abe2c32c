"""The coarse operator's Galerkin product as it is against an earlier revision's: its time in
the set-up and its first compile.

    python benchmarks/galerkin_bench.py --against REVISION [--sizes 128 256]
        [--cases inclusions "graded job"] [--rounds 5] [--compiles 3]

`multigrid.galerkin_scaled` builds each coarse level once per solve. Until this change it
walked a fine row along z and added every cell to its aggregate as it went, with branches for
the cell's place in its aggregate and for held cells, so the loop did not vectorise (about 2-4
work units of a solve's 55-70). Now each fine row's contributions go to row buffers through
0/1 factors (loops that vectorise) and are then added to the row's aggregates.

For each job (``cycle_bench.problem_level``'s), on the finest level of the solver's hierarchy
(its float32 copy, with the aggregates gmg arranges for it), the two kernels alternating,
best of ``--rounds``: wall seconds over one float64 operator application (work units), and
whether their coarse arrays are equal bit for bit (else the largest difference relative to
each array's largest value). Then the first compile of each for one signature (a float32
level) in fresh processes, alternating, ``--compiles`` each: numba's own start included,
both compiled without numba's cache (the revision's module as ``wall_bench.kernels_at``
loads it, the working tree's source the same way; an empty cache folder for the rest): the
time a first run after installation pays.

Writes benchmarks/RESULTS_GALERKIN.md.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

MODULE = "sevenfold.kernels.multigrid"


def tree_uncached():
    """The working tree's kernels.multigrid compiled without numba's cache, as
    ``wall_bench.kernels_at`` loads a revision's (its relative imports resolve in the
    installed package)."""
    import importlib.util
    import types

    path = HERE.parent / "src" / (MODULE.replace(".", "/") + ".py")
    name = "sevenfold.kernels._multigrid_tree"
    module = types.ModuleType(name)
    module.__package__ = "sevenfold.kernels"
    module.__spec__ = importlib.util.spec_from_loader(name, loader=None)
    sys.modules[name] = module
    exec(compile(path.read_text().replace("cache=True", "cache=False"), str(path), "exec"),
         module.__dict__)
    return module


def compile_seconds(which: str, revision: str) -> float:
    """One compile of galerkin_scaled for a float32 level in this (fresh) process, the
    working tree's ("now") or ``revision``'s ("then"): numba's own start included, as on a
    first run."""
    import numba

    if which == "now":
        kernel = tree_uncached().galerkin_scaled
    else:
        import wall_bench

        kernel = wall_bench.kernels_at(revision, MODULE).galerkin_scaled  # (one taking agg)
    f32 = np.float32
    level = [np.ones((4, 4, 4), f32) for _ in range(4)] + [np.ones((4, 4, 4), np.bool_)]
    agg = tuple(np.arange(4, dtype=np.int64) // 2 for _ in range(3))
    coarse = [np.ones((2, 2, 2), f32) for _ in range(4)] + [np.ones((2, 2, 2), np.bool_)]
    signature = tuple(numba.typeof(a) for a in (*level, agg, *coarse))
    t = time.perf_counter()
    kernel.compile(signature)
    return time.perf_counter() - t


def z_kind(agg: np.ndarray) -> str:
    """How the level's z cells are aggregated: whole, pairs (shifted or not), or pairs with
    cells alone inside."""
    sizes = np.bincount(agg)
    if sizes.max() == 1:
        return "whole"
    return "pairs" if (sizes[1:-1] == 2).all() else "pairs, cells alone"


def compare(n: int, case: str, old, rounds: int) -> dict:
    import cycle_bench as cb
    import restrict_bench as rb
    import timing
    from sevenfold.kernels import multigrid
    from sevenfold.solvers.gmg import DEFAULTS, Hierarchy

    fine, _ = cb.problem_level(n, case)
    apply = rb.apply_seconds(fine)
    hierarchy = Hierarchy(fine, **{k: v for k, v in DEFAULTS.items() if k != "start"})
    top, coarse = hierarchy.levels[0], hierarchy.levels[1]
    outs = {k: [np.empty(coarse.shape, hierarchy.dtype) for _ in range(4)]
            + [np.empty(coarse.shape, np.bool_)] for k in ("then", "now")}
    args = (top.tx, top.ty, top.tz, top.diag, top.free, top.agg)
    calls = {"then": lambda: old.galerkin_scaled(*args, *outs["then"]),
             "now": lambda: multigrid.galerkin_scaled(*args, *outs["now"])}
    best = {k: np.inf for k in calls}
    for _ in range(rounds):
        for k, call in calls.items():
            best[k] = min(best[k], timing.best(call, 3, time.perf_counter))
    equal = all(np.array_equal(a, b) for a, b in zip(outs["then"], outs["now"]))
    difference = max(float(np.abs(a.astype(float) - b).max() / max(float(np.abs(a).max()), 1e-300))
                     for a, b in zip(outs["then"][:4], outs["now"][:4]))
    return {"step": top.step, "z": z_kind(top.agg[2]), "apply": apply, **best, "equal": equal,
            "difference": difference, "dtype": np.dtype(hierarchy.dtype).name}


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--against", required=True, metavar="REVISION")
    p.add_argument("--sizes", type=int, nargs="+", default=[128, 256])
    p.add_argument("--cases", nargs="+", default=["inclusions", "graded job"])
    p.add_argument("--rounds", type=int, default=5)
    p.add_argument("--compiles", type=int, default=3)
    p.add_argument("--results", type=Path, default=HERE / "RESULTS_GALERKIN.md")
    p.add_argument("--compile-one", choices=["then", "now"], help=argparse.SUPPRESS)
    args = p.parse_args(argv)
    if args.compile_one:
        print(compile_seconds(args.compile_one, args.against))
        return 0
    import run as engine
    import wall_bench

    lines, info = engine.report_head("galerkin_bench.py", argv,
                                     "The Galerkin product through row buffers")
    lines += engine.opening(
        __doc__, f"*then* = `multigrid.galerkin_scaled` at revision {args.against}, *now* = the "
        "working tree's; *WU* = wall seconds over one two-thread float64 operator application of "
        "the job's grid (*apply*).",
        ["job", "cells", "step", "z aggregates", "level", "apply ms", "then WU", "now WU",
         "now / then", "coarse arrays"])
    old = wall_bench.kernels_at(args.against, MODULE)
    for n in args.sizes:
        for case in args.cases:
            r = compare(n, case, old, args.rounds)
            lines.append(
                f"| {case} | {n}^3 | {'x'.join(map(str, r['step']))} | {r['z']} | {r['dtype']} | "
                f"{r['apply'] * 1e3:.2f} | {r['then'] / r['apply']:.2f} | {r['now'] / r['apply']:.2f} | "
                f"{r['now'] / r['then']:.2f} | "
                f"{'equal' if r['equal'] else 'differ by %.1e' % r['difference']} |")
            print(lines[-1], flush=True)
    seconds: dict[str, list[float]] = {"then": [], "now": []}
    for _ in range(args.compiles):
        for which in seconds:
            with tempfile.TemporaryDirectory() as cache:  # (nothing compiled before, either)
                out = subprocess.run([sys.executable, __file__, "--against", args.against,
                                      "--compile-one", which], check=True, capture_output=True,
                                     text=True, env={**os.environ, "NUMBA_CACHE_DIR": cache}).stdout
            seconds[which].append(float(out.split()[-1]))
    lines += ["", "First compile, one float32 signature, fresh processes alternating (numba's own "
              "start included), seconds:", "", "| kernel | compiles | min | max |", "|---|---|---|---|"]
    lines += [f"| {k} | {', '.join(f'{s:.2f}' for s in v)} | {min(v):.2f} | {max(v):.2f} |"
              for k, v in seconds.items()]
    print("\n".join(lines[-4:]), flush=True)
    engine.write_report(args.results, lines, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
