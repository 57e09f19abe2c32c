"""The z-line back substitution from the block's buffer, against a revision's reads of tz and
the pivots in place: a power-of-two column stride, alone and in warm gmg solves.

    python benchmarks/block_buffer_bench.py --against REVISION [--sizes 128 256] [--rounds 3]
        [--cases layered inclusions constant column "graded job"]

A zebra sweep solves the columns of one colour eight at a time, as eight chains side by side.
In REVISION the back substitution read tz and the pivots where they lie: with the block's
right-hand sides and u, 32 columns in flight. On a 256^3 level two same-colour columns lie
2 KiB apart, and every such column falls in one of two sets of the first-level cache. Now the
products l = tz / w go to the thread's buffer as the right-hand sides are formed, the forward
pass leaves y = z / w there, and the back substitution reads the buffer alone. The same
products, so the same numbers bit for bit.

In one process:

* *stride*: one smoothing step (two sweeps, both colours) on random float32 levels of
  256 x 256 x nz cells, nz = 256 (a power of two) and 248, 264 (not), and on 128^3: nanoseconds
  per cell for REVISION's kernel and this one, rounds alternating, best of;
* for each job, the kernel alone on the finest level of the solver's hierarchy (float32, random
  b and u): one smoothing step (two sweeps) in work units (seconds over one two-thread float64
  operator application, best of many), the two kernels alternating, best of the rounds, and
  the largest difference between their results;
* the warm gmg set-up + solve (one untimed solve, then the best of two) with each kernel, the
  order turning every round, best of the rounds.

Writes benchmarks/RESULTS_BLOCK_BUFFER.md.
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

ARMS = ("then", "now")
CASES = ("layered", "inclusions", "constant", "column", "graded job")
STRIDE_SHAPES = ((256, 256, 256), (256, 256, 248), (256, 256, 264), (128, 128, 128))


def kernels(old) -> dict:
    from sevenfold.kernels import lines

    return {"then": old, "now": lines}


def random_level(shape: tuple[int, int, int], seed: int = 0) -> tuple[np.ndarray, ...]:
    """Face arrays of random conductances (0.5 to 1.5) in float32, the face-array convention's
    zero couplings on the last planes, their z-line pivots, random b and u."""
    from sevenfold.kernels import lines

    rng = np.random.default_rng(seed)
    tx, ty, tz = (rng.uniform(0.5, 1.5, shape).astype(np.float32) for _ in range(3))
    tx[-1], ty[:, -1], tz[:, :, -1] = 0.0, 0.0, 0.0
    diag = 2.0 * (tx + ty + tz + np.float32(0.1))
    inv_w = np.empty_like(diag)
    lines.line_factor(tz, diag, inv_w)
    b, u = (rng.standard_normal(shape).astype(np.float32) for _ in range(2))
    return tx, ty, tz, inv_w, b, u


def step_times(level: tuple[np.ndarray, ...], old, rounds: int) -> tuple[dict, float]:
    """Seconds of one smoothing step (two sweeps) with each arm's kernel, best of ``rounds``
    rounds of 5, alternating; and max |now - then| / max |then| after one step from the same u."""
    import numba

    threads = numba.get_num_threads()
    *faces, u0 = level
    arms = kernels(old)
    after = {}
    for arm, module in arms.items():
        u = u0.copy()
        module.line_gauss_seidel(*faces, u, 0, 2, threads, False)
        after[arm] = u
    difference = float(np.abs(after["now"] - after["then"]).max() / np.abs(after["then"]).max())
    times: dict[str, list[float]] = {arm: [] for arm in arms}
    u = u0.copy()
    for _ in range(rounds):
        for arm, module in arms.items():
            times[arm].append(timing.best(
                lambda: module.line_gauss_seidel(*faces, u, 0, 2, threads, False), 5))
    return {arm: min(t) for arm, t in times.items()}, difference


def job_step(job, old, rounds: int) -> tuple[dict, float, float]:
    """:func:`step_times` on the job's finest level as the hierarchy holds it, and the unit."""
    from sevenfold.solvers.gmg import DEFAULTS, Hierarchy, fine_level

    fine, _ = fine_level(job)
    top = Hierarchy(fine, **{k: v for k, v in DEFAULTS.items() if k != "start"}).levels[0]
    if top.diag.dtype != np.float32:
        raise SystemExit("the finest level is not float32 here: pick another job")
    rng = np.random.default_rng(0)
    b, u = (rng.standard_normal(top.shape).astype(np.float32) for _ in range(2))
    times, difference = step_times((top.tx, top.ty, top.tz, top.inv_w, b, u), old, rounds)
    return times, difference, rb.apply_seconds(fine)


def warm(job, module) -> dict:
    """``rb.warm_gmg`` with the hierarchy's line kernels from ``module``."""
    from sevenfold.solvers import hierarchy

    kept = hierarchy.lines
    hierarchy.lines = module
    try:
        return rb.warm_gmg(job)
    finally:
        hierarchy.lines = kept


def main(argv: list[str] | None = None) -> int:
    args = rb.ab_arguments(__doc__, "RESULTS_BLOCK_BUFFER.md", argv, CASES)
    lines, info = engine.report_head("block_buffer_bench.py", argv,
                                     "The z-line back substitution from the block's buffer")
    old = wall_bench.kernels_at(args.against, "sevenfold.kernels.lines")
    arms = kernels(old)
    lines += [__doc__.split("\n\n", 2)[2].split("\n\nWrites")[0], "",
              f"*then* = revision {args.against}; *now* = this revision.", "",
              "### One smoothing step on random levels, ns per cell", "",
              "| cells | then | now | now / then | difference |", "|---|---|---|---|---|"]
    for shape in STRIDE_SHAPES:
        times, difference = step_times(random_level(shape), old, 2 * args.rounds + 1)
        cells = float(np.prod(shape))
        lines.append(f"| {' x '.join(map(str, shape))} | {times['then'] / cells * 1e9:.2f} | "
                     f"{times['now'] / cells * 1e9:.2f} | {times['now'] / times['then']:.2f} | "
                     f"{difference:.1e} |")
        print(lines[-1], flush=True)
    lines += ["", "### The jobs", "",
              "*step* = one smoothing step alone on the finest level, WU; *solve* = warm gmg "
              "set-up + solve, wall seconds, two threads; *WU* = solve seconds over one "
              "two-thread float64 operator application of the job's grid; *difference* = "
              "max |now - then| / max |then| after one step.", "",
              "| job | cells | step then / now | now / then | difference | iterations then / now "
              "| solve s then / now | now / then | WU then / now |", "|" + "---|" * 9]
    def row(n: int, case: str) -> str:
        job = shift_bench.problem(n, case)
        step, difference, unit = job_step(job, old, args.rounds)
        best = rb.best_of_arms(ARMS, args.rounds, lambda arm: warm(job, arms[arm]))
        t = {arm: b["seconds"] for arm, b in best.items()}
        return (f"| {case} | {n}^3 | {step['then'] / unit:.2f} / {step['now'] / unit:.2f} | "
                f"{step['now'] / step['then']:.2f} | {difference:.1e} | {rb.arm_cells(best, ARMS)} | "
                f"{t['now'] / t['then']:.2f} | {t['then'] / unit:.1f} / {t['now'] / unit:.1f} |")

    rb.job_rows(args, lines, row)
    engine.write_report(args.results, lines, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
