"""Preconditioned conjugate gradients that record every iteration's relative residual.

The recorded residual is the recursively updated r_k, whose norm equals ||b - A x_k|| in
exact arithmetic. In floating point the two drift apart on ill-conditioned systems, so when
r_k reaches rtol the true residual is recomputed: it is what is reported as final, and when it
is still above rtol CG restarts from x_k with the true residual (at most MAX_RESTARTS times).

A solve that stops short (maximum iterations, stagnation, or the attainable-accuracy floor
when the restarts do not bring the true residual under rtol) raises :class:`SolverError`
carrying its work: ``partial`` is a SolveResult with ``converged`` False, ``x`` the LAST
iterate (CG's iterates minimise the A-norm of the error over growing Krylov spaces, so the last
is the best in that norm even when its residual norm is not the lowest recorded; keeping it
costs no extra vector), ``final_relative_residual`` the true residual of that x,
``best_relative_residual`` the lowest recorded, and ``stop`` the reason.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Callable, Protocol

import numpy as np

from ..errors import Cancelled, SolverError
from ..helper import fill, halves


MAX_RESTARTS = 3
# SolveResult.stop: why the iteration ended
STOP_CONVERGED = "converged"
STOP_MAX_ITERATIONS = "max_iterations"
STOP_STAGNATION = "stagnation"
STOP_ACCURACY_FLOOR = "accuracy_floor"


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
    stop: str = STOP_CONVERGED  # or max_iterations, stagnation, accuracy_floor
    stop_message: str = ""  # the sentence a user reads when it did not converge
    best_relative_residual: float | None = None  # lowest recorded; None: the final one

    def summary(self) -> dict:
        best = self.best_relative_residual
        return {
            "method": self.method,
            "iterations": self.iterations,
            "converged": self.converged,
            "stop": self.stop,
            **({"stop_message": self.stop_message} if self.stop_message else {}),
            "final_relative_residual": self.final_relative_residual,
            "best_relative_residual": self.final_relative_residual if best is None else best,
            "solution_iterate": "final" if self.converged else "last",
            "assembly_seconds": self.assembly_seconds,
            "setup_seconds": self.setup_seconds,
            "solve_seconds": self.solve_seconds,
            "notes": self.notes,
            "switch": self.switch,
        }


def residual_into(A, x: np.ndarray, b: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
    """b - A x, written over A's product (``A @ x`` returns a fresh array or a buffer that the
    next product overwrites, so either may be reused) or into ``out``: no full-size temporary."""
    q = A @ x
    return np.subtract(b, q, out=q if out is None else out)


def relative_residual(A, x: np.ndarray, b: np.ndarray) -> float:
    """||b - A x|| / ||b|| (and ||A x|| when b = 0)."""
    nb = float(np.linalg.norm(b))
    r = float(np.linalg.norm(residual_into(A, x, b)))
    return r / nb if nb > 0 else r


def widened(a: np.ndarray) -> np.ndarray:
    """A float64 copy of ``a``, the halves on two cores."""
    out = np.empty(a.shape)
    halves(np.copyto, out, a)
    return out


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
    x0: np.ndarray | None = None,
) -> SolveResult:
    """Solve the SPD system A x = b from x0 (default 0) until ||r|| <= rtol ||b||.

    ``A`` needs ``A @ p``; when it has ``apply_dot(p)`` -> (A p, p . A p) that is used instead,
    and a ``precondition`` with ``precondition_dot(r)`` -> (z, r . z) likewise (one pass over
    memory fewer each). Products returned by A and the preconditioner may share one buffer:
    CG is done with A p before it preconditions. z may be float32 (a float32 preconditioner's
    own output): CG widens it where it reads it, which is exact. A preconditioner with a
    ``rhs_buffer`` (a flat array: its float32 copy of r) has it written by CG's residual
    update and is then called as ``precondition_dot(r, filled=True)``: r is not read again
    to copy it.

    Each iteration makes three passes over the vectors besides A p and the preconditioner's:
    r -= alpha A p (with ||r|| and the copy), r . z, and x += alpha p together with the next
    direction p = z + beta p, which reads p once for both (x is brought up to date before
    anything reads it).

    The recorded history starts with x0's relative residual; ``x0`` is not modified.

    Raises :class:`SolverError` (with the history) on NaN or breakdown; on stagnation,
    reaching ``max_iterations`` or the accuracy floor it also carries ``partial``, the
    unconverged SolveResult of the last iterate. Raises :class:`Cancelled` when the monitor
    asks to stop.
    """
    from ..kernels.vector import vector_ops  # numba loads only for a method that iterates

    monitor = monitor or QuietMonitor()
    start = time.perf_counter()
    n = b.shape[0]
    x = np.empty(n)
    fill(x, 0.0)
    # norms by the true residual's kernel (||b - A x|| without storing it), not numpy's: a
    # BLAS call wakes BLAS's threads, which then spin beside ours for tens of milliseconds (the
    # first iterations' smoothing took twice its time at 128^3 in a process with two BLAS
    # threads; benchmarks/ANALYSIS.md); ||b|| is the distance from x = 0
    ops = vector_ops(n)
    dot = ops.dot
    nb = float(np.sqrt(ops.distance_squared(b, x)))
    history, times = [1.0 if nb > 0 else 0.0], [0.0]
    if nb == 0.0:
        monitor.iteration(0, history[0], 0.0)
        return SolveResult(x, method, 0, True, 0.0, setup_seconds, 0.0, history, times)
    if x0 is not None:
        x[...] = x0
        q = A @ x
        history[0] = float(np.sqrt(ops.distance_squared(b, q))) / nb
        r = np.subtract(b, q, out=np.empty(n))
        if history[0] >= 1.0:  # a start worse than zero (possible on extreme grids): drop it
            x[...] = 0.0
            r = widened(b)
            history[0] = 1.0
    else:
        r = widened(b)
    monitor.iteration(0, history[0], 0.0)
    if history[0] <= rtol:
        return SolveResult(x, method, 0, True, history[0], setup_seconds,
                           time.perf_counter() - start, history, times)

    def true_residual() -> float:
        """||b - A x|| / ||b|| in one pass over b and A x (no b - A x stored)."""
        return float(np.sqrt(ops.distance_squared(b, A @ x))) / nb

    def apply_dot(p: np.ndarray) -> tuple[np.ndarray, float]:
        q = A @ p
        return q, dot(p, q)

    def precondition_dot(r: np.ndarray) -> tuple[np.ndarray, float]:
        z = precondition(r)
        return z, dot(r, z)

    apply_dot = getattr(A, "apply_dot", apply_dot)
    precondition_dot = getattr(precondition, "precondition_dot", precondition_dot)
    copy = getattr(precondition, "rhs_buffer", None)
    filled = {} if copy is None else {"filled": True}
    if copy is None:
        copy = r  # (the update stores r twice)
    z, rz = precondition_dot(r)
    p = widened(z)
    best_before = np.inf
    restarts = 0
    pending = 0.0  # the step whose alpha p is not in x yet (it joins the direction's pass)

    def catch_up() -> None:
        """x += pending p now, before x is read (in chunks: no full-size temporary; the
        halves on two cores)."""
        nonlocal pending
        if pending:
            def step(x: np.ndarray, p: np.ndarray) -> None:
                for s in range(0, x.size, 1 << 16):
                    x[s:s + (1 << 16)] += pending * p[s:s + (1 << 16)]

            halves(step, x, p)
            pending = 0.0

    def stopped_short(stop: str, message: str, elapsed: float) -> SolverError:
        catch_up()
        true = true_residual()
        partial = SolveResult(x, method, len(history) - 1, False, true, setup_seconds, elapsed,
                              history, times, stop=stop, stop_message=message,
                              best_relative_residual=min(min(history), true))
        return SolverError(message, history, partial)

    for it in range(1, max_iterations + 1):
        if monitor.stop_requested():
            raise Cancelled("the solve was cancelled")
        q, pq = apply_dot(p)
        if not np.isfinite(pq) or pq <= 0.0:
            raise SolverError(
                "conjugate gradients broke down (non-finite or non-positive curvature); "
                "the operator or preconditioner is not positive definite or produced NaN",
                history,
            )
        alpha = rz / pq
        res = np.sqrt(ops.update_residual(r, q, alpha, copy)) / nb
        pending = alpha
        elapsed = time.perf_counter() - start
        history.append(res)
        times.append(elapsed)
        monitor.iteration(it, res, elapsed)
        if not np.isfinite(res):
            raise SolverError(f"residual became {res} at iteration {it}", history)
        if res <= rtol:
            catch_up()
            final = true_residual()
            if final <= rtol:
                return SolveResult(x, method, it, True, final, setup_seconds, elapsed, history, times)
            restarts += 1
            if restarts > MAX_RESTARTS:
                raise stopped_short(
                    STOP_ACCURACY_FLOOR,
                    f"the updated residual reached {res:.1e} but the true residual ||b - Au||/||b|| "
                    f"stays at {final:.1e} after {MAX_RESTARTS} restarts: the system is too "
                    f"ill-conditioned (coefficient contrast) for rtol {rtol:.1e}; loosen solver.rtol",
                    elapsed,
                )
            residual_into(A, x, b, r)  # restart from the true residual
            history[-1] = final
            z, rz = precondition_dot(r)
            p = widened(z)
            continue
        if it > stagnation_window:
            best_before = min(best_before, history[it - stagnation_window])
            if min(history[it - stagnation_window + 1 :]) >= 0.999 * best_before:
                raise stopped_short(
                    STOP_STAGNATION,
                    f"stagnated: no progress over the last {stagnation_window} iterations "
                    f"(relative residual {res:.3e}, asked for {rtol:.1e})",
                    elapsed,
                )
        z, rz_new = precondition_dot(r, **filled)
        ops.update_solution_and_direction(x, p, z, pending, rz_new / rz)
        pending = 0.0
        rz = rz_new
    raise stopped_short(
        STOP_MAX_ITERATIONS,
        f"did not converge in {max_iterations} iterations (relative residual {history[-1]:.3e}, "
        f"asked for {rtol:.1e}); raise solver.max_iterations or loosen solver.rtol",
        times[-1],
    )
