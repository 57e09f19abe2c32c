"""Sparse LU (SuperLU through scipy) for small problems and as the test reference."""

from __future__ import annotations

import time

import numpy as np
import scipy.sparse.linalg as sla

from ..errors import SolverError
from .cg import Monitor, QuietMonitor, SolveResult, relative_residual


def solve_direct(A, b, monitor: Monitor | None = None) -> SolveResult:
    monitor = monitor or QuietMonitor()
    start = 1.0 if np.any(b) else 0.0  # the same convention as pcg: 0 when b = 0
    monitor.iteration(0, start, 0.0)
    t0 = time.perf_counter()
    lu = sla.splu(A.tocsc(), permc_spec="COLAMD")
    setup = time.perf_counter() - t0
    x = lu.solve(b)
    elapsed = time.perf_counter() - t0
    final = relative_residual(A, x, b)
    if not np.isfinite(final):
        raise SolverError("the direct solve produced non-finite values", [start, final])
    monitor.iteration(1, final, elapsed)
    return SolveResult(x, "direct", 1, True, final, setup, elapsed - setup, [start, final], [0.0, elapsed])
