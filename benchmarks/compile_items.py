"""What each kernel of a gmg run costs to compile the first time, against other revisions.

    python benchmarks/compile_items.py [--cells 64] [--rounds 3] [--against REVISION ...]

A first run after installation compiles the gmg kernels in two processes at once
(`sevenfold.kernels.warmup`), its items split into two halves by their compile costs
(``warmup.COST``). This script measures those costs: in a fresh process with an empty numba
cache, after numba's own start (paid on a trivial kernel first), it compiles the warm-up's
items of a gmg run on ``--cells``^3 one after another, in the order the warm-up lists them,
and times each. A kernel that calls others compiles them too, unless an earlier item did.
Each side (this working tree's ``src`` and each ``--against`` revision, checked out in a
temporary worktree) runs ``--rounds`` times, the sides rotating from round to round.

Writes benchmarks/RESULTS_COMPILE_ITEMS.md.
"""

from __future__ import annotations

import json
import os
import statistics
import subprocess
import sys
import tempfile
from contextlib import ExitStack
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

import run  # noqa: E402  (benchmarks/run.py: the report's head and machine table)

CHILD = """
import json, sys, time
t0 = time.perf_counter()
import numba
numba.njit(lambda x: x + 1)(1.0)  # numba's own start, paid before the first item
from sevenfold.kernels import warmup
n = int(sys.argv[1])
items, _ = warmup._items(warmup.gmg_plan((n, n, n)))
out = {"numba's start": time.perf_counter() - t0}
for name, call in items.items():
    t = time.perf_counter()
    call()
    out[name] = time.perf_counter() - t
print(json.dumps(out))
"""


def compile_once(src: Path, cells: int) -> dict[str, float]:
    """Seconds of each item in a fresh process on ``src``'s sevenfold, from an empty cache."""
    with tempfile.TemporaryDirectory() as cache:
        env = {**os.environ, "PYTHONPATH": str(src), "NUMBA_CACHE_DIR": cache}
        out = subprocess.run([sys.executable, "-c", CHILD, str(cells)], capture_output=True, text=True,
                             env=env, cwd=cache)
    if out.returncode != 0:
        raise RuntimeError(f"compiling the items of {src} failed:\n{out.stderr}")
    return json.loads(out.stdout.strip().splitlines()[-1])


def main(argv: list[str] | None = None) -> int:
    p = run.ab_parser(__doc__, "RESULTS_COMPILE_ITEMS.md", 3)
    p.add_argument("--cells", type=int, default=64)
    p.add_argument("--against", nargs="*", default=[], metavar="REVISION")
    args = p.parse_args(argv)
    lines, info = run.report_head("compile_items.py", argv, "First compile of each gmg kernel")
    with ExitStack() as stack:
        sides = {"this": HERE.parent / "src"}
        for rev in args.against:
            folder = Path(stack.enter_context(tempfile.TemporaryDirectory()))
            sides[rev] = stack.enter_context(run.revision_tree(rev, folder))
        seconds: dict[str, list[dict[str, float]]] = {side: [] for side in sides}
        for i in range(args.rounds):
            for side in run.rotation(list(sides), i):
                seconds[side].append(compile_once(sides[side], args.cells))
                print(f"round {i + 1}, {side}: {sum(seconds[side][-1].values()):.1f} s", flush=True)
    names = list(dict.fromkeys(k for side in seconds.values() for r in side for k in r))
    median = {side: {k: statistics.median(r[k] for r in runs if k in r) for k in names
                     if any(k in r for r in runs)} for side, runs in seconds.items()}
    totals = {side: [sum(r.values()) for r in runs] for side, runs in seconds.items()}
    columns = ["item"] + [f"{side} s" for side in sides] + [f"this / {rev}" for rev in args.against]
    reading = (f"Seconds, medians of {args.rounds} rounds, a gmg run on {args.cells}^3 (its items and "
               "argument types as `warmup._items` lists them for that grid). *total* = the sum over a "
               "round (median of the rounds); every round's total in the last lines.")
    lines += run.opening(__doc__, reading, columns)
    for k in names + ["total"]:
        cells = []
        for side in sides:
            v = statistics.median(totals[side]) if k == "total" else median[side].get(k)
            cells.append("" if v is None else f"{v:.2f}")
        for rev in args.against:
            a = statistics.median(totals["this"]) if k == "total" else median["this"].get(k)
            b = statistics.median(totals[rev]) if k == "total" else median[rev].get(k)
            cells.append(f"{a / b:.2f}" if a and b else "")
        lines.append(f"| {'**total**' if k == 'total' else k} | " + " | ".join(cells) + " |")
    lines.append("")
    for side in sides:
        lines.append(f"- {side}, total per round: " + ", ".join(f"{t:.1f}" for t in totals[side]) + " s")
    run.write_report(args.results, lines, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
