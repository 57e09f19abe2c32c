"""The z-line sweep with fused multiply-adds (kernels/lines.py as kept, ``fastmath={"contract"}``)
against the same source compiled without them, one pass of two sweeps, alternating.

    python benchmarks/contract_bench.py [--sizes 128 256] [--rounds 15]

The uncontracted kernels are built from kernels/lines.py itself with the flag taken out, so the
two cannot drift apart. For each problem (cycle_bench.py's), size and level precision: the
finest level of gmg's kept hierarchy, one untimed pass each, then ``rounds`` rounds of one
pass each on numba's threads, wall seconds; and the largest difference between the two
passes' results relative to the largest value (contraction rounds once where the plain form
rounds twice). Writes benchmarks/RESULTS_CONTRACT.md.
"""

from __future__ import annotations

import sys
import time
import types
from pathlib import Path

import numba
import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent / "tests"))

import run as engine  # noqa: E402
from cycle_bench import problem_level  # noqa: E402

import sevenfold.kernels.lines as kept  # noqa: E402
from sevenfold.solvers import gmg  # noqa: E402


def plain_lines() -> types.ModuleType:
    """kernels/lines.py compiled without contraction (and without numba's cache)."""
    source = Path(kept.__file__).read_text()
    flagged = source.count(", fastmath=CONTRACT")
    if flagged != source.count("@njit(") or not flagged:
        raise SystemExit("contract_bench: not every kernel in kernels/lines.py carries CONTRACT")
    source = source.replace(", fastmath=CONTRACT", "").replace("cache=True", "cache=False")
    source = source.replace("from .jit import njit", "from numba import njit")
    module = types.ModuleType("lines_plain")
    exec(compile(source, "lines_plain", "exec"), module.__dict__)
    return module


def compare(plain, n: int, case: str, precision: str, rounds: int) -> dict:
    level, b = problem_level(n, case)
    opts = {**gmg.DEFAULTS, "precision": precision}
    opts.pop("start")
    top = gmg.Hierarchy(level, **opts).levels[0]
    rhs = np.asarray(b, dtype=top.diag.dtype).reshape(top.shape)
    threads = numba.get_num_threads()
    sides = {"contracted": kept, "plain": plain}
    results = {}
    for name, module in sides.items():
        u = np.zeros(top.shape, top.diag.dtype)
        module.line_gauss_seidel(top.tx, top.ty, top.tz, top.inv_w, rhs, u, 0, 2, threads, False)
        results[name] = u
    difference = float(np.abs(results["contracted"] - results["plain"]).max()
                       / np.abs(results["plain"]).max())
    seconds: dict[str, list[float]] = {name: [] for name in sides}
    u = results["plain"]
    for _ in range(rounds):
        for name, module in sides.items():
            t = time.perf_counter()
            module.line_gauss_seidel(top.tx, top.ty, top.tz, top.inv_w, rhs, u, 0, 2, threads, False)
            seconds[name].append(time.perf_counter() - t)
    ratios = [c / p for c, p in zip(seconds["contracted"], seconds["plain"])]
    return {"case": case, "n": n, "precision": precision, "difference": difference,
            "plain": min(seconds["plain"]), "contracted": min(seconds["contracted"]),
            "best": min(seconds["contracted"]) / min(seconds["plain"]),
            "median": float(np.median(ratios))}


def report(rows: list[dict], rounds: int) -> list[str]:
    out = engine.opening(
        __doc__, f"*best ratio* = contracted best / plain best over {rounds} rounds; *median "
        "ratio* = the median over rounds of each round's ratio; *difference* = max |contracted "
        "- plain| / max |plain| after one pass.",
        ["case", "cells", "levels", "plain ms (best)", "contracted ms (best)", "best ratio",
         "median ratio", "difference"])
    return out + [f"| {r['case']} | {r['n']}^3 | {r['precision']} | {r['plain'] * 1e3:.1f} | "
                  f"{r['contracted'] * 1e3:.1f} | {r['best']:.3f} | {r['median']:.3f} | {r['difference']:.1e} |"
                  for r in rows]


def main(argv=None) -> int:
    parser = engine.ab_parser(__doc__, "RESULTS_CONTRACT.md", 15)
    parser.add_argument("--sizes", type=int, nargs="+", default=[128, 256])
    parser.add_argument("--cases", nargs="+", default=["column", "inclusions", "layered"])
    args = parser.parse_args(argv)
    lines, info = engine.report_head("contract_bench.py", argv,
                                     "The z-line sweep with fused multiply-adds")
    plain = plain_lines()
    rows = []
    for n in args.sizes:
        for case in args.cases:
            for precision in ("float32", "float64"):
                rows.append(compare(plain, n, case, precision, args.rounds))
                r = rows[-1]
                print(f"{case} {n}^3 {precision}: best {r['best']:.3f}, median {r['median']:.3f}", flush=True)
    engine.write_report(args.results, lines + report(rows, args.rounds), info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
