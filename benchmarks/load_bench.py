"""Whole `sevenfold run` processes: what loading the cached kernels and exiting cost, as
shipped and as numba and Python do them by default.

    python benchmarks/load_bench.py [--sizes 32 128 256] [--rounds 6] [--sides ...]

Three fixed costs of a fresh process, each against the code without its change:

- *numba's load*: before numba's cache hands back a kernel, it refreshes its target context,
  importing and installing every lowering registry numba has; a fresh process pays that at
  its first kernel. sevenfold's kernels load through ``kernels.jit.KernelCache``, which starts
  numba's runtime and loads the machine code without that refresh. This side puts
  ``KernelCache.load_overload`` back to numba's ``FunctionCache.load_overload``.
- *bitcode parsed on load*: a cached kernel's LLVM bitcode, which only a later compile that
  links the kernel needs, is parsed when that compile asks for it, and the names its machine
  code defines are read from the object's symbol table (``kernels.jit.LazyLibrary``). This
  side parses and walks the bitcode on every load, as numba does.
- *collected at exit*: the console command (``cli.program``) freezes every object out of the
  garbage collector before it exits, so that the interpreter's shutdown does not walk them all
  several times over. This side makes that freeze do nothing.

*shipped* has all three; ``--sides`` picks the others to run beside it. The sides run the same command (``cli.program`` in ``python -c``)
and import the same modules in the same order.

The job is column.py's 1000:1 column on n^3 cells (gmg, rtol 1e-8). One untimed run per size
first (the kernels' cache filled); then ``--rounds`` rounds of one ``sevenfold run --here
--no-progress`` process per side, the order of the sides rotating from round to round (on
this host a process right after another's exit can meet slow first touches of memory).
*whole* = the process's wall seconds; *job* = its own clock (`job X s`, job file read to
result written).
Writes benchmarks/RESULTS_LOAD.md.
"""

from __future__ import annotations

import statistics
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import column  # noqa: E402
import run as engine  # noqa: E402
import speed  # noqa: E402

COMMAND = """
import contextlib, gc
from numba.core.caching import FunctionCache
from sevenfold import cli
from sevenfold.kernels import jit
{change}
cli.program()
"""
SIDES = {"shipped": COMMAND.format(change=""),
         "numba's load": COMMAND.format(change="jit.KernelCache.load_overload = FunctionCache.load_overload"),
         "bitcode parsed on load": COMMAND.format(change="jit._lazy_libraries = lambda codegen: contextlib.nullcontext()"),
         "collected at exit": COMMAND.format(change="gc.freeze = lambda: None")}


def one_run(folder: Path, side: str, job: Path) -> tuple[float, float]:
    """Wall and job seconds of one ``sevenfold run`` process of ``side``."""
    r = engine.run_process([sys.executable, "-c", SIDES[side], "run", "--here", "--no-progress", str(job)], folder)
    return r.wall, speed.required_job_seconds(r.stdout, side)


def main(argv: list[str] | None = None) -> int:
    p = engine.ab_parser(__doc__, "RESULTS_LOAD.md", rounds=6)
    p.add_argument("--sizes", nargs="+", type=int, default=[32, 128, 256])
    p.add_argument("--sides", nargs="+", choices=[s for s in SIDES if s != "shipped"],
                   default=[s for s in SIDES if s != "shipped"])
    args = p.parse_args(argv)
    sides = ["shipped", *args.sides]
    lines, info = engine.report_head("load_bench.py", argv, "A fresh process: loading cached kernels and exiting")
    lines += engine.opening(
        __doc__, "Seconds, median of the rounds (every round in order in the last column); ratio = shipped / the side.",
        ["cells", "side", "whole s", "job s", "whole min s", "shipped / side, whole", "shipped / side, job",
         "whole s, every round"])
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        for n in args.sizes:
            job = folder / f"column-{n}.toml"
            job.write_text(column.job_text(n, folder / f"column-{n}.zarr"))
            one_run(folder, "shipped", job)  # untimed: fills the cache at this size's signatures
            runs: dict[str, list[tuple[float, float]]] = {side: [] for side in sides}
            for i in range(args.rounds):
                for side in engine.rotation(sides, i):
                    runs[side].append(one_run(folder, side, job))
                    print(n, side, " ".join(f"{x:.2f}" for x in runs[side][-1]), flush=True)
            whole = {side: statistics.median(w for w, _ in r) for side, r in runs.items()}
            own = {side: statistics.median(o for _, o in r) for side, r in runs.items()}
            for side, r in runs.items():
                ratios = (f"{whole['shipped'] / whole[side]:.2f} | {own['shipped'] / own[side]:.2f}"
                          if side != "shipped" else " | ")
                lines.append(f"| {n}^3 | {side} | {whole[side]:.2f} | {own[side]:.2f} | "
                             f"{min(w for w, _ in r):.2f} | {ratios} | " + " ".join(f"{w:.2f}" for w, _ in r) + " |")
    engine.write_report(args.results, lines, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
