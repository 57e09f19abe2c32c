"""Fields derived from a solution on the cell centres: flux, gradient, coefficient and source.

Scheme. The flux density ``F = -k grad u`` is first taken on every cell face exactly as the
operator sees it: ``-T_PN (u_N - u_P) / A`` on an interior face (T the operator's face
conductance, A the face's area), and the boundary condition's own flux ``G (value - u_P) + q``
(inward) on a domain face. A cell's component along an axis is the mean of its two faces'
values (the centre is midway between them, on graded grids too), which is second-order
accurate on smooth solutions and equals the central difference ``-k (u_E - u_W) / 2h`` for
constant k on a uniform grid. The gradient is ``grad u = -F / k_P`` per cell, with k_P the
coefficient's component along that axis, so across a material interface
each side keeps its own gradient while the normal flux stays continuous. Held cells get the
same treatment with their held values.

Signs: F is positive along +x, +y, +z. Units: F in the physics' flux units (W/m^2, C/m^2,
m/s), grad u in solution units per metre. Nothing here does I/O.
"""

from __future__ import annotations

import numpy as np

from .grid import FACE_AXIS
from .physics import DERIVED
from .operator import conductances
from .problem import Problem
from .spec import FACES


def _boundary(a: np.ndarray, axis: int, side: int) -> np.ndarray:
    return np.take(a, 0 if side == 0 else a.shape[axis] - 1, axis=axis)


def face_flux(problem: Problem, u: np.ndarray, axis: int,
              conductance: np.ndarray | None = None) -> np.ndarray:
    """Flux density along +``axis`` on every face normal to it: ``cells[axis] + 1`` planes.
    ``conductance`` is that axis's array from :func:`sevenfold.operator.conductances` (computed
    when not given)."""
    t_axis = conductances(problem)[axis] if conductance is None else conductance
    n = u.shape[axis]
    shape = list(u.shape)
    shape[axis] = n + 1
    F = np.empty(shape)
    lo = [slice(None)] * 3
    hi = [slice(None)] * 3
    mid = [slice(None)] * 3
    lo[axis], hi[axis], mid[axis] = slice(0, n - 1), slice(1, n), slice(1, n)
    area = problem.grid.face_areas(axis)
    area = np.expand_dims(area, axis)
    F[tuple(mid)] = -t_axis[tuple(lo)] * (u[tuple(hi)] - u[tuple(lo)]) / area
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
    t = conductances(problem)
    for axis in range(3):
        F = face_flux(problem, u, axis, t[axis])
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
            for c, comp, k in zip("xyz", F, problem.coefficient):
                out[f"{name}_{c}"] = comp / k
        elif info.kind == "gradient_magnitude":
            kx, ky, kz = problem.coefficient
            out[name] = np.sqrt((F[0] / kx) ** 2 + (F[1] / ky) ** 2 + (F[2] / kz) ** 2)
        elif info.kind == "coefficient":
            if problem.isotropic:
                out[name] = problem.coefficient[0]
            else:
                for c, k in zip("xyz", problem.coefficient):
                    out[f"{name}_{c}"] = k
        elif info.kind == "source":
            out[name] = problem.source
        else:  # pragma: no cover - the catalogue has no other kind
            raise ValueError(info.kind)
    return out
