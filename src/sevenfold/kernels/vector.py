"""Fused vector updates for conjugate gradients: one pass over memory instead of several."""

from __future__ import annotations

from numba import njit, prange


@njit(cache=True, parallel=True)
def update_solution_and_residual(x, r, p, q, alpha):
    """x += alpha p; r -= alpha q; returns ||r||^2."""
    s = 0.0
    for i in prange(x.shape[0]):
        x[i] += alpha * p[i]
        ri = r[i] - alpha * q[i]
        r[i] = ri
        s += ri * ri
    return s


@njit(cache=True, parallel=True)
def update_direction(p, z, beta):
    """p = z + beta p."""
    for i in prange(p.shape[0]):
        p[i] = z[i] + beta * p[i]


@njit(cache=True, parallel=True)
def dot(a, b):
    s = 0.0
    for i in prange(a.shape[0]):
        s += a[i] * b[i]
    return s
