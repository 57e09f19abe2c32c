"""Fields derived from a solution on the cell centres: flux, gradient, coefficient and source.

Scheme. The flux density ``F = -k grad u`` is first taken on every cell face exactly as the
operator sees it: ``-harmonic(k_P, k_N) (u_N - u_P) / h`` on an interior face, and the
boundary condition's own flux ``G (value - u_P) + q`` (inward) on a domain face. A cell's
component along an axis is the mean of its two faces' values, which is second-order
accurate on smooth solutions and equals the central difference ``-k (u_E - u_W) / 2h`` for
constant k. The gradient is ``grad u = -F / k_P`` per cell, so across a material interface
each side keeps its own gradient while the normal flux stays continuous. Held cells get the
same treatment with their held values.

Signs: F is positive along +x, +y, +z. Units: F in the physics' flux units (W/m^2, C/m^2,
m/s), grad u in solution units per metre. Nothing here does I/O.
"""

from __future__ import annotations

import numpy as np

from .grid import FACE_AXIS
from .physics import DERIVED
from .problem import Problem
from .spec import FACES


def _boundary(a: np.ndarray, axis: int, side: int) -> np.ndarray:
    return np.take(a, 0 if side == 0 else a.shape[axis] - 1, axis=axis)


def face_flux(problem: Problem, u: np.ndarray, axis: int) -> np.ndarray:
    """Flux density along +``axis`` on every face normal to it: ``cells[axis] + 1`` planes."""
    k = problem.coefficient
    h = problem.grid.spacing[axis]
    n = u.shape[axis]
    shape = list(u.shape)
    shape[axis] = n + 1
    F = np.empty(shape)
    lo = [slice(None)] * 3
    hi = [slice(None)] * 3
    mid = [slice(None)] * 3
    lo[axis], hi[axis], mid[axis] = slice(0, n - 1), slice(1, n), slice(1, n)
    kp, kn = k[tuple(lo)], k[tuple(hi)]
    F[tuple(mid)] = -2.0 * kp * kn / (kp + kn) * (u[tuple(hi)] - u[tuple(lo)]) / h
    for face in FACES:
        a, side = FACE_AXIS[face]
        if a != axis:
            continue
        t = problem.faces[face]
        inward = t.conductance * (t.value - _boundary(u, axis, side)) + t.flux
        plane = [slice(None)] * 3
        plane[axis] = 0 if side == 0 else n
        # +axis component: inward on the minimum face, outward on the maximum face
        F[tuple(plane)] = inward if side == 0 else -inward
    return F


def flux(problem: Problem, u: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """-k grad u on the cell centres, as three (nx, ny, nz) arrays (x, y, z components)."""
    out = []
    for axis in range(3):
        F = face_flux(problem, u, axis)
        n = u.shape[axis]
        a = [slice(None)] * 3
        b = [slice(None)] * 3
        a[axis], b[axis] = slice(0, n), slice(1, n + 1)
        out.append(0.5 * (F[tuple(a)] + F[tuple(b)]))
    return out[0], out[1], out[2]


def derived_fields(problem: Problem, u: np.ndarray, physics: str, names: tuple[str, ...]) -> dict[str, np.ndarray]:
    """The requested fields by output name; vector fields become ``<name>_x/_y/_z``."""
    catalogue = DERIVED[physics]
    out: dict[str, np.ndarray] = {}
    F = None
    for name in names:
        info = catalogue[name]
        if info.kind in ("flux", "negative_gradient", "gradient_magnitude") and F is None:
            F = flux(problem, u)
        if info.kind == "flux":
            for c, comp in zip("xyz", F):
                out[f"{name}_{c}"] = comp
        elif info.kind == "negative_gradient":
            for c, comp in zip("xyz", F):
                out[f"{name}_{c}"] = comp / problem.coefficient
        elif info.kind == "gradient_magnitude":
            out[name] = np.sqrt(F[0] ** 2 + F[1] ** 2 + F[2] ** 2) / problem.coefficient
        elif info.kind == "coefficient":
            out[name] = problem.coefficient
        elif info.kind == "source":
            out[name] = problem.source
        else:  # pragma: no cover - the catalogue has no other kind
            raise ValueError(info.kind)
    return out
