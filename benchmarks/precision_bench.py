"""The preconditioner's float type against the coefficient's contrast.

    python benchmarks/precision_bench.py [--sizes 64 128] [--contrasts 1e3 1e4 1e5 1e6 1e8]

The speed suite's layered problem (``baseline.pattern_boxes("layered")``: five layers across
x, edges off the dyadic planes, shifted between y < 0.5 and y > 0.5, so every path from x_min
to x_max crosses them) with the layers' k set to 1 / contrast instead of 1e-3. For each size
and contrast, gmg-CG to rtol 1e-8 from zero with the levels in float32 and in float64
(``solve_gmg(..., precision=...)``), everything else the product's default, in this process:
one untimed solve, then the two alternating, best of ``--rounds`` by set-up + solve wall
seconds; iterations and the true relative residual, or where the solve stopped short (at most
100 iterations; stagnation over 50). ``preconditioner_precision`` gives the type the product
picks for that contrast (``solvers.precision.FLOAT32_CONTRAST``).

This process runs BLAS on one thread, as the `sevenfold` command does (``run.py``).
Writes benchmarks/RESULTS_PRECISION.md.
"""

from __future__ import annotations

import argparse
import gc
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import run as engine  # noqa: E402  (first: BLAS on one thread, as the command runs it)

import speed  # noqa: E402
from sevenfold.errors import SolverError  # noqa: E402
from sevenfold.problem import build_problem  # noqa: E402
from sevenfold.solvers.gmg import solve_gmg  # noqa: E402
from sevenfold.solvers.precision import FLOAT32_CONTRAST, preconditioner_precision  # noqa: E402
from sevenfold.spec import load_job  # noqa: E402

MAX_ITERATIONS = 100


def layered(n: int, contrast: float, folder: Path):
    text = speed.job_text(n, "layered", str(folder / "out.zarr"))
    weak = "value = 0.001"
    assert weak in text, "baseline's layered pattern changed its weak value"
    path = folder / f"layered{n}-{contrast:g}.toml"
    path.write_text(text.replace(weak, f"value = {1.0 / contrast!r}"))
    return build_problem(load_job(path))


def solve(problem, precision: str) -> dict:
    try:
        _, r = solve_gmg(problem, 1e-8, MAX_ITERATIONS, precision=precision)
        return {"seconds": r.setup_seconds + r.solve_seconds, "iterations": r.iterations,
                "residual": f"{r.final_relative_residual:.1e}"}
    except SolverError as exc:
        p = exc.partial
        return {"seconds": p.setup_seconds + p.solve_seconds, "iterations": p.iterations,
                "residual": f"stopped at {p.final_relative_residual:.1e} ({p.stop})"}


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[64, 128])
    ap.add_argument("--contrasts", type=float, nargs="+", default=[1e3, 1e4, 1e5, 1e6, 1e8])
    ap.add_argument("--rounds", type=int, default=2)
    args = ap.parse_args(argv)
    lines, info = engine.report_head("precision_bench.py", argv,
                                     "The preconditioner's float type against coefficient contrast")
    lines += [__doc__.split("\n\n")[2].replace("\n", " "), "",
              f"The product picks float32 up to a contrast of {FLOAT32_CONTRAST:.0e} "
              "(`solvers.precision.FLOAT32_CONTRAST`), float64 above.", "",
              "| cells | contrast | product picks | float32 iterations | float32 residual | float32 s | "
              "float64 iterations | float64 residual | float64 s | float64 / float32 time |",
              "|---|---|---|---|---|---|---|---|---|---|"]
    with tempfile.TemporaryDirectory() as tmp:
        for n in args.sizes:
            for contrast in args.contrasts:
                problem = layered(n, contrast, Path(tmp))
                best: dict[str, dict] = {}
                solve(problem, "float32")  # untimed: kernels loaded, memory touched
                for _ in range(args.rounds):
                    for precision in ("float32", "float64"):
                        row = solve(problem, precision)
                        if precision not in best or row["seconds"] < best[precision]["seconds"]:
                            best[precision] = row
                        gc.collect()
                f32, f64 = best["float32"], best["float64"]
                picks = preconditioner_precision(contrast)
                lines.append(f"| {n}^3 | {contrast:.0e} | {picks} | {f32['iterations']} | {f32['residual']} | "
                             f"{f32['seconds']:.3f} | {f64['iterations']} | {f64['residual']} | "
                             f"{f64['seconds']:.3f} | {f64['seconds'] / f32['seconds']:.2f} |")
                print(lines[-1], flush=True)
                del problem
                gc.collect()
    engine.write_report(HERE / "RESULTS_PRECISION.md", lines, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
