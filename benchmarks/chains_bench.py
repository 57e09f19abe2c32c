"""The z-line sweep's recurrences as eight written-out chains, against an earlier revision's
loops across a column-interleaved block, alone and in whole gmg solves.

    python benchmarks/chains_bench.py --against REVISION [--sizes 128 256]
        [--cases layered inclusions constant column "graded job"] [--rounds 3]

`lines._line_plane` solves the z-line systems of a block of eight columns. It gathered
the block's right-hand sides, pivots and couplings into buffers interleaved by column and ran
the Thomas recurrences as loops across the block, meant to vectorise. numba does not enable
LLVM's SLP vectoriser, so those eight-iteration loops were unrolled into scalar code, and the
negative-index wraparound of their signed indices stayed in on every access. Now the
right-hand sides are formed column by column at unit stride, and the recurrences run as eight
written-out scalar chains with unsigned indices that read the couplings and pivots where they
are: no gather of them, no wraparound, each chain's value in a register. Same operations on
every value, so the same numbers bit for bit.

For each job, in one process, the two forms alternating (``--rounds`` times each, best of).
The jobs are `cycle_bench.problem_level`'s, as in restrict_bench.py.

* the kernel alone on the two finest smoothed levels of the solver's hierarchy (float32,
  random b and u): one smoothing step (two sweeps, `lines.line_gauss_seidel`), wall
  seconds over one float64 operator application of the job's grid (best of many): work
  units; and whether the results are equal bit for bit;
* the warm gmg set-up + solve (one untimed solve, then the best of two, as
  ``speed.warm_gmg``), with gmg's multigrid kernels as they are and as they were at
  ``REVISION`` (loaded beside them with ``wall_bench.module_at``, compiled without numba's
  cache); the iterations and the final residual must match.

Writes benchmarks/RESULTS_LINE_CHAINS.md.
"""

from __future__ import annotations

import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import sweeps_bench  # noqa: E402


def main(argv: list[str] | None = None) -> int:
    return sweeps_bench.lines_ab(__doc__, "RESULTS_LINE_CHAINS.md", "chains_bench.py",
                                 "The z-line recurrences as written-out chains", argv)


if __name__ == "__main__":
    sys.exit(main())
