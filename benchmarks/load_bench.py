"""Whole `sevenfold run` processes loading their kernels from numba's cache: the lean load
against numba's own.

    python benchmarks/load_bench.py [--sizes 32 128 256] [--rounds 6]

Before numba's cache hands back a kernel, it refreshes its target context, importing and
installing every lowering registry numba has; a fresh process pays that at its first kernel.
sevenfold's kernels load through ``kernels.jit.KernelCache``, which starts numba's runtime and
loads the machine code without that refresh (*lean*). *numba's load* is the same command
with ``KernelCache.load_overload`` put back to numba's ``FunctionCache.load_overload``. Both
sides import the same modules in the same order; nothing else differs.

The job is column.py's 1000:1 column on n^3 cells (gmg, rtol 1e-8). One untimed run per size
first (the kernels' cache filled); then ``--rounds`` rounds of one ``sevenfold run --here
--no-progress`` process per side, the side that goes first alternating (on this host a
process right after another's exit can meet slow first touches of memory). *whole* = the
process's wall seconds; *job* = its own clock (`job X s`, job file read to result written).
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
import sys
from numba.core.caching import FunctionCache
from sevenfold.kernels import jit
{restore}
from sevenfold.cli import main
sys.exit(main())
"""
SIDES = {"lean": COMMAND.format(restore=""),
         "numba's load": COMMAND.format(restore="jit.KernelCache.load_overload = FunctionCache.load_overload")}


def one_run(folder: Path, side: str, job: Path) -> tuple[float, float]:
    """Wall and job seconds of one ``sevenfold run`` process of ``side``."""
    r = engine.run_process([sys.executable, "-c", SIDES[side], "run", "--here", "--no-progress", str(job)], folder)
    own = speed.sevenfold_job_seconds(r.stdout)
    if own != own:  # nan: no summary line
        raise RuntimeError(f"no 'job X s' in the output of {side}:\n{r.stdout}")
    return r.wall, own


def main(argv: list[str] | None = None) -> int:
    p = engine.ab_parser(__doc__, "RESULTS_LOAD.md", rounds=6)
    p.add_argument("--sizes", nargs="+", type=int, default=[32, 128, 256])
    args = p.parse_args(argv)
    lines, info = engine.report_head("load_bench.py", argv, "Loading cached kernels: lean against numba's own")
    lines += [engine.description(__doc__), "",
              "Seconds, median of the rounds (every round in order in the last column); ratio = lean / "
              "numba's load.", "",
              "| cells | side | whole s | job s | whole min s | whole ratio | job ratio | whole s, every round |",
              "|" + "---|" * 8]
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        for n in args.sizes:
            job = folder / f"column-{n}.toml"
            job.write_text(column.job_text(n, folder / f"column-{n}.zarr"))
            one_run(folder, "lean", job)  # untimed: fills the cache at this size's signatures
            runs: dict[str, list[tuple[float, float]]] = {side: [] for side in SIDES}
            for i in range(args.rounds):
                for side in (list(SIDES) if i % 2 == 0 else list(SIDES)[::-1]):
                    runs[side].append(one_run(folder, side, job))
                    print(n, side, " ".join(f"{x:.2f}" for x in runs[side][-1]), flush=True)
            whole = {side: statistics.median(w for w, _ in r) for side, r in runs.items()}
            own = {side: statistics.median(o for _, o in r) for side, r in runs.items()}
            for side, r in runs.items():
                other = "numba's load"
                ratios = (f"{whole[side] / whole[other]:.2f} | {own[side] / own[other]:.2f}"
                          if side == "lean" else " | ")
                lines.append(f"| {n}^3 | {side} | {whole[side]:.2f} | {own[side]:.2f} | "
                             f"{min(w for w, _ in r):.2f} | {ratios} | " + " ".join(f"{w:.2f}" for w, _ in r) + " |")
    engine.write_report(args.results, lines, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
