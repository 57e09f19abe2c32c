"""Preconditioned conjugate gradients that record every iteration's relative residual.

The recorded residual is the recursively updated r_k, whose norm equals ||b - A x_k|| in
exact arithmetic. In floating point the two drift apart on ill-conditioned systems, so when
r_k reaches rtol the true residual is recomputed: it is what is reported as final, and when it
is still above rtol CG restarts from x_k with the true residual (at most MAX_RESTARTS times).
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Callable, Protocol

import numpy as np

from ..errors import Cancelled, SolverError
from ..kernels.vector import vector_ops


MAX_RESTARTS = 3


class Monitor(Protocol):
    """Receives progress; ``stop_requested`` is polled once per iteration."""

    def iteration(self, iteration: int, relative_residual: float, elapsed: float) -> None: ...

    def stop_requested(self) -> bool: ...


class QuietMonitor:
    def iteration(self, iteration: int, relative_residual: float, elapsed: float) -> None:
        pass

    def stop_requested(self) -> bool:
        return False


@dataclass
class SolveResult:
    x: np.ndarray
    method: str
    iterations: int
    converged: bool
    final_relative_residual: float
    setup_seconds: float
    solve_seconds: float
    history: list[float] = field(default_factory=list)  # relative residual, index = iteration
    times: list[float] = field(default_factory=list)  # seconds since the solve began
    notes: str = ""
    assembly_seconds: float = 0.0  # building the operator (CSR matrix or face arrays)
    # auto's switch from one method to another before this solve: from, to, after_iterations
    # (of the method left), rate, reason; None when the solve used one method throughout
    switch: dict | None = None

    def summary(self) -> dict:
        return {
            "method": self.method,
            "iterations": self.iterations,
            "converged": self.converged,
            "final_relative_residual": self.final_relative_residual,
            "assembly_seconds": self.assembly_seconds,
            "setup_seconds": self.setup_seconds,
            "solve_seconds": self.solve_seconds,
            "notes": self.notes,
            "switch": self.switch,
        }


def relative_residual(A, x: np.ndarray, b: np.ndarray) -> float:
    """||b - A x|| / ||b|| (and ||A x|| when b = 0)."""
    nb = float(np.linalg.norm(b))
    r = float(np.linalg.norm(b - A @ x))
    return r / nb if nb > 0 else r


def pcg(
    A,
    b: np.ndarray,
    precondition: Callable[[np.ndarray], np.ndarray],
    rtol: float,
    max_iterations: int,
    monitor: Monitor | None = None,
    stagnation_window: int = 50,
    method: str = "cg",
    setup_seconds: float = 0.0,
) -> SolveResult:
    """Solve the SPD system A x = b from x = 0 until ||r|| <= rtol ||b||.

    Raises :class:`SolverError` (with the history) on NaN, stagnation or reaching
    ``max_iterations``, and :class:`Cancelled` when the monitor asks to stop.
    """
    monitor = monitor or QuietMonitor()
    start = time.perf_counter()
    n = b.shape[0]
    x = np.zeros(n)
    nb = float(np.linalg.norm(b))
    history, times = [1.0 if nb > 0 else 0.0], [0.0]
    monitor.iteration(0, history[0], 0.0)
    if nb == 0.0:
        return SolveResult(x, method, 0, True, 0.0, setup_seconds, 0.0, history, times)
    ops = vector_ops(n)
    dot = ops.dot
    r = b.astype(np.float64, copy=True)
    z = precondition(r)
    p = z.copy()
    rz = dot(r, z)
    best_before = np.inf
    restarts = 0
    for it in range(1, max_iterations + 1):
        if monitor.stop_requested():
            raise Cancelled("the solve was cancelled")
        q = A @ p
        pq = dot(p, q)
        if not np.isfinite(pq) or pq <= 0.0:
            raise SolverError(
                "conjugate gradients broke down (non-finite or non-positive curvature); "
                "the operator or preconditioner is not positive definite or produced NaN",
                history,
            )
        alpha = rz / pq
        res = np.sqrt(ops.update_solution_and_residual(x, r, p, q, alpha)) / nb
        elapsed = time.perf_counter() - start
        history.append(res)
        times.append(elapsed)
        monitor.iteration(it, res, elapsed)
        if not np.isfinite(res):
            raise SolverError(f"residual became {res} at iteration {it}", history)
        if res <= rtol:
            final = relative_residual(A, x, b)
            if final <= rtol:
                return SolveResult(x, method, it, True, final, setup_seconds, elapsed, history, times)
            restarts += 1
            if restarts > MAX_RESTARTS:
                raise SolverError(
                    f"the updated residual reached {res:.1e} but the true residual ||b - Au||/||b|| "
                    f"stays at {final:.1e} after {MAX_RESTARTS} restarts: the system is too "
                    f"ill-conditioned (coefficient contrast) for rtol {rtol:.1e}; loosen solver.rtol",
                    history,
                )
            r = b - A @ x  # restart from the true residual
            history[-1] = final
            z = precondition(r)
            p = z.copy()
            rz = dot(r, z)
            continue
        if it > stagnation_window:
            best_before = min(best_before, history[it - stagnation_window])
            if min(history[it - stagnation_window + 1 :]) >= 0.999 * best_before:
                raise SolverError(
                    f"stagnated: no progress over the last {stagnation_window} iterations "
                    f"(relative residual {res:.3e}, asked for {rtol:.1e})",
                    history,
                )
        z = precondition(r)
        rz_new = dot(r, z)
        ops.update_direction(p, z, rz_new / rz)
        rz = rz_new
    raise SolverError(
        f"did not converge in {max_iterations} iterations (relative residual {history[-1]:.3e}, "
        f"asked for {rtol:.1e}); raise solver.max_iterations or loosen solver.rtol",
        history,
    )
