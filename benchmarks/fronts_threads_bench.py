"""The coarsest level's factor on one thread against two (the root's two subtrees at once).

    python benchmarks/fronts_threads_bench.py [--rounds 7]
        [--shapes 17x17x16 16x16x16 9x9x16 8x8x32 10x10x10 8x8x8 6x6x6]
        [--results benchmarks/RESULTS_FRONTS_THREADS.md]

For each level shape (17 x 17 x 16 is the coarsest level of 128^3 jobs, 16^3 of most others,
9 x 9 x 16 and 8 x 8 x 32 of long thin ones; the smaller ones, around
``solvers.coarsest.TWO_THREADS_FROM``, of small jobs solved on one level), a level with
random positive couplings (the factor's work depends on the shape alone: dense fronts, no
pivoting) is factored by ``solvers.coarsest.factor`` serially and on two threads,
alternating, best of 15 calls per round, best over the rounds (milliseconds; the tree built
beforehand, cached per shape as in a run). *Parts*: the serial factor's three calls timed one
after another (the root's first subtree, its second, the root), whose max(first, second) +
root is what two threads could reach at best. numba must have two threads or more (the run
factors on one otherwise).

Writes benchmarks/RESULTS_FRONTS_THREADS.md.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import run as engine  # noqa: E402  (first: BLAS on one thread, as the command runs it)

import numpy as np  # noqa: E402

import timing  # noqa: E402

REPEATS = 15


def random_level(shape: tuple[int, int, int]):
    """An SPD 7-point level: random couplings, 0 on each axis's last plane; the diagonal their
    row sums plus 1e-2."""
    from sevenfold.solvers.levels import Level

    rng = np.random.default_rng(0)
    t = [rng.uniform(0.1, 10.0, shape) for _ in range(3)]
    diag = np.full(shape, 1e-2)
    for axis in range(3):
        last = [slice(None)] * 3
        last[axis] = -1
        t[axis][tuple(last)] = 0.0
        diag += t[axis] + np.roll(t[axis], 1, axis=axis)
    return Level(*t, diag, np.ones(shape, dtype=bool), np.ones(3, dtype=np.int64))


def level_times(shape: tuple[int, int, int], rounds: int) -> dict[str, float]:
    """Milliseconds of the factor on one and two threads and of the serial factor's parts."""
    from sevenfold.kernels.fronts import fronts_factor
    from sevenfold.solvers.coarsest import factor
    from sevenfold.solvers.dissection import fronts

    tree = fronts(shape)
    level = random_level(shape)
    out = {side: np.empty(int(tree.factor_start[-1])) for side in ("one", "two")}
    nodes = tree.own.size
    middle, first_stack, second_stack = tree.halves
    stack, offset = np.empty(first_stack + second_stack), np.empty(nodes, dtype=np.int64)
    args = (level.tx, level.ty, level.tz, level.diag, tree.index, tree.start, tree.own,
            tree.first, tree.factor_start, out["one"])
    parts = {"first": (0, middle, 0), "second": (middle, nodes - 1, first_stack),
             "root": (nodes - 1, nodes, 0)}

    def in_parts() -> dict[str, float]:
        seconds = {}
        for name, (begin, end, used) in parts.items():
            t = time.perf_counter()
            fronts_factor(*args, stack, offset, begin, end, used)
            seconds[name] = time.perf_counter() - t
        return seconds

    calls = {"one": lambda: factor(tree, level, out["one"], False),
             "two": lambda: factor(tree, level, out["two"], True)}
    for call in calls.values():  # untimed: compiled, helper thread started, memory touched
        assert call() == 0
    times: dict[str, list[float]] = {}
    for i in range(rounds):
        for side in engine.rotation(list(calls), i):
            times.setdefault(side, []).append(timing.best(calls[side], REPEATS, time.perf_counter))
        for _ in range(REPEATS):
            for name, s in in_parts().items():
                times.setdefault(name, []).append(s)
    assert np.array_equal(out["one"], out["two"])
    return {key: min(v) * 1e3 for key, v in times.items()}


def main(argv: list[str] | None = None) -> int:
    import numba

    p = engine.ab_parser(__doc__, "RESULTS_FRONTS_THREADS.md", rounds=7)
    p.add_argument("--shapes", nargs="*", default=["17x17x16", "16x16x16", "9x9x16", "8x8x32",
                                                   "10x10x10", "8x8x8", "6x6x6"])
    args = p.parse_args(argv)
    if numba.get_num_threads() < 2:
        raise SystemExit("numba has one thread: nothing to compare")
    lines, info = engine.report_head("fronts_threads_bench.py", argv,
                                     "The coarsest level's factor: one thread against two")
    lines += engine.opening(
        __doc__, "Milliseconds, best over the rounds; ratio = two threads / one; parts: the "
        "serial factor's first subtree, second subtree and root; bound = max(first, second) + "
        "root, over one thread's time.",
        ["level", "cells", "one thread", "two threads", "ratio", "first", "second", "root",
         "bound"])
    for item in args.shapes:
        shape = tuple(int(s) for s in item.split("x"))
        t = level_times(shape, args.rounds)
        bound = max(t["first"], t["second"]) + t["root"]
        lines.append(f"| {item} | {int(np.prod(shape))} | {t['one']:.2f} | {t['two']:.2f} | "
                     f"{t['two'] / t['one']:.2f} | {t['first']:.2f} | {t['second']:.2f} | "
                     f"{t['root']:.2f} | {bound / t['one']:.2f} |")
        print(lines[-1], flush=True)
    info["numba threads"] = str(numba.get_num_threads())
    engine.write_report(args.results, lines, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
