"""CG preconditioned by one V-cycle of pyamg's algebraic multigrid."""

from __future__ import annotations

import time

import pyamg

from .cg import Monitor, SolveResult, pcg


def solve_amg(A, b, rtol: float, max_iterations: int, kind: str = "smoothed_aggregation",
              monitor: Monitor | None = None, stagnation_window: int = 50) -> SolveResult:
    """``kind`` is ``smoothed_aggregation`` (default) or ``classical`` (Ruge-Stueben)."""
    t0 = time.perf_counter()
    if kind == "classical":
        ml = pyamg.ruge_stuben_solver(A)
    else:
        ml = pyamg.smoothed_aggregation_solver(A, symmetry="hermitian")
    M = ml.aspreconditioner(cycle="V")
    setup = time.perf_counter() - t0
    method = "amg-sa" if kind != "classical" else "amg-classical"
    return pcg(A, b, M.matvec, rtol, max_iterations, monitor, stagnation_window, method, setup)
