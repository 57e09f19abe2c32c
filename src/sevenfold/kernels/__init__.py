"""Numba kernels. They take plain arrays and numbers, do no I/O and know nothing of specs.

Importing this package asks OpenMP (numba's threading layer here) to let threads that wait at
the end of a parallel loop sleep rather than spin, unless the user set ``OMP_WAIT_POLICY``
themselves. A solve runs thousands of short parallel loops; on a machine where another process
holds a core, spinning threads take the time slices the working thread needs: gmg at 128^3 on
two threads beside a busy process took 1.38-1.53 times its one-thread time with spinning
threads and 0.94-1.10 times with sleeping ones; on a quiet machine the two are within 15 % of
each other (benchmarks/RESULTS_THREADS.md). It must be set before the OpenMP runtime starts,
which is at the first parallel kernel's launch.
"""

import os

os.environ.setdefault("OMP_WAIT_POLICY", "PASSIVE")
