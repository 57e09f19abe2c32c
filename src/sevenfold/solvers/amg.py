"""CG preconditioned by one V-cycle of pyamg's algebraic multigrid."""

from __future__ import annotations

import time
from contextlib import contextmanager
from typing import Iterator

import numpy as np
import pyamg

from .cg import Monitor, SolveResult, pcg


@contextmanager
def _seeded() -> Iterator[None]:
    """pyamg draws the start vectors of its spectral-radius estimates from numpy's global
    random state; a fixed seed, restored afterwards, makes the same job give the same answer."""
    state = np.random.get_state()
    np.random.seed(20261201)
    try:
        yield
    finally:
        np.random.set_state(state)


def build_hierarchy(A, kind: str = "smoothed_aggregation"):
    """pyamg's hierarchy for A: ``smoothed_aggregation`` or ``classical`` (Ruge-Stueben)."""
    with _seeded():
        if kind == "classical":
            return pyamg.ruge_stuben_solver(A)
        return pyamg.smoothed_aggregation_solver(A, symmetry="hermitian")


def solve_amg(A, b, rtol: float, max_iterations: int, kind: str = "smoothed_aggregation",
              monitor: Monitor | None = None, stagnation_window: int = 50) -> SolveResult:
    """``kind`` is ``smoothed_aggregation`` (default) or ``classical`` (Ruge-Stueben)."""
    t0 = time.perf_counter()
    M = build_hierarchy(A, kind).aspreconditioner(cycle="V")
    setup = time.perf_counter() - t0
    method = "amg-sa" if kind != "classical" else "amg-classical"
    return pcg(A, b, M.matvec, rtol, max_iterations, monitor, stagnation_window, method, setup)
