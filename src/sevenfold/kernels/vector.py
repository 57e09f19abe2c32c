"""Fused vector updates for conjugate gradients: one pass over memory instead of several.

Each comes threaded and serial; below ``PARALLEL_FROM`` entries the threads cost more to start
than they save (on 2 busy cores a 24^3 solve ran slower threaded). The serial builds are
separate functions because numba's on-disk cache does not tell builds of one function apart
by their ``parallel`` flag.
"""

from __future__ import annotations

from typing import NamedTuple

from numba import prange

from .jit import njit

PARALLEL_FROM = 100_000
# Sums may be reordered (reassociated) so that reductions vectorise: a dot product then runs
# at memory speed instead of one dependent addition per entry (0.70 to 0.3x work units at
# 128^3 on one thread, benchmarks/RESULTS_CYCLE.md). The order is fixed for a given thread
# count, so a solve repeats exactly.
REDUCE = {"reassoc", "nsz", "contract"}


@njit(cache=True, parallel=True, fastmath=REDUCE)
def update_residual(r, q, alpha, copy):
    """r -= alpha q, and copy = r in copy's float type (a float32 preconditioner's right-hand
    side, written in the same pass; r itself where there is none); returns ||r||^2."""
    s = 0.0
    for i in prange(r.shape[0]):
        ri = r[i] - alpha * q[i]
        r[i] = ri
        copy[i] = ri
        s += ri * ri
    return s


@njit(cache=True, parallel=True)
def update_solution_and_direction(x, p, z, alpha, beta):
    """x += alpha p, then p = z + beta p: the last step's solution update rides on the next
    direction's pass (p is read once for both)."""
    for i in prange(p.shape[0]):
        pi = p[i]
        x[i] += alpha * pi
        p[i] = z[i] + beta * pi


@njit(cache=True, parallel=True, fastmath=REDUCE)
def dot(a, b):
    s = 0.0
    for i in prange(a.shape[0]):
        s += a[i] * b[i]
    return s


@njit(cache=True, parallel=True, fastmath=REDUCE)
def distance_squared(a, b):
    """||a - b||^2 without storing a - b (the true residual's norm from b and A x)."""
    s = 0.0
    for i in prange(a.shape[0]):
        d = a[i] - b[i]
        s += d * d
    return s


@njit(cache=True, fastmath=REDUCE)
def update_residual_serial(r, q, alpha, copy):
    s = 0.0
    for i in range(r.shape[0]):
        ri = r[i] - alpha * q[i]
        r[i] = ri
        copy[i] = ri
        s += ri * ri
    return s


@njit(cache=True)
def update_solution_and_direction_serial(x, p, z, alpha, beta):
    for i in range(p.shape[0]):
        pi = p[i]
        x[i] += alpha * pi
        p[i] = z[i] + beta * pi


@njit(cache=True, fastmath=REDUCE)
def dot_serial(a, b):
    s = 0.0
    for i in range(a.shape[0]):
        s += a[i] * b[i]
    return s


@njit(cache=True, fastmath=REDUCE)
def distance_squared_serial(a, b):
    s = 0.0
    for i in range(a.shape[0]):
        d = a[i] - b[i]
        s += d * d
    return s


class VectorOps(NamedTuple):
    update_residual: object
    update_solution_and_direction: object
    dot: object
    distance_squared: object


THREADED = VectorOps(update_residual, update_solution_and_direction, dot, distance_squared)
SERIAL = VectorOps(update_residual_serial, update_solution_and_direction_serial, dot_serial,
                   distance_squared_serial)


def vector_ops(n: int) -> VectorOps:
    """The build suited to vectors of ``n`` entries."""
    return THREADED if n >= PARALLEL_FROM else SERIAL
