"""The z-line sweeps' wavefront in strips along y, against an earlier revision's whole planes,
alone and in whole gmg solves.

    python benchmarks/strips_bench.py --against REVISION [--sizes 128 256]
        [--cases layered inclusions constant column "graded job"] [--rounds 3]

`lines.line_gauss_seidel` runs the colour passes of its sweeps as stages of a wavefront over
the x-planes, each stage a plane behind the one before. On a 256^3 float32 level one array's
plane is 256 KiB, so the six arrays' planes that the stages pass over (about six planes each)
do not stay in a core's 2 MiB second-level cache, and every stage fetches them again from the
shared last-level cache or memory. Now a plane over twice `lines.STRIP_BYTES` goes in strips
of columns along y, each strip a whole wavefront, each stage's strip one column behind the
stage before. The same solves in another order, so the same numbers bit for bit.

For each job, in one process, the two forms alternating (``--rounds`` times each, best of).
The jobs are `cycle_bench.problem_level`'s, as in restrict_bench.py.

* the kernel alone on the two finest smoothed levels of the solver's hierarchy (float32,
  random b and u): one smoothing step (two sweeps), wall seconds over one float64 operator
  application of the job's grid (best of many): work units; and whether the results are
  equal bit for bit;
* the warm gmg set-up + solve (one untimed solve, then the best of two, as
  ``speed.warm_gmg``), with gmg's z-line kernels as they are and as they were at
  ``REVISION`` (loaded beside them with ``wall_bench.module_at``, compiled without numba's
  cache); the iterations and the final residual must match.

Writes benchmarks/RESULTS_STRIPS.md.
"""

from __future__ import annotations

import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import sweeps_bench  # noqa: E402


def main(argv: list[str] | None = None) -> int:
    return sweeps_bench.lines_ab(__doc__, "RESULTS_STRIPS.md", "strips_bench.py",
                                 "The z-line sweeps' wavefront in strips along y", argv)


if __name__ == "__main__":
    sys.exit(main())
