"""Boundary faces as per-cell terms of the finite-volume equations.

Each condition acts at the domain face, half a cell from the boundary cell's centre. With
``h`` the boundary cell's own width normal to the face and ``k_P`` its coefficient along
that normal, the inward
flux per unit area is ``G * (value - u_P)`` with

* Dirichlet ``value``:           G = 2 k_P / h
* Robin ``coefficient c, reference``: G = 1 / (1/c + h / (2 k_P))  (film in series with half a cell)
* Neumann ``flux q``:            a fixed inward flux q, no G.

Times the face's area, G joins the cell's diagonal and G*value (or q) its right-hand side
(the rows of the operator are balances over each cell: amount per unit time).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import JobError
from .expressions import evaluate
from .grid import FACE_AXIS, Grid
from .spec import FACES, BoundarySpec, Dirichlet, Neumann, Robin


@dataclass(frozen=True)
class FaceTerms:
    """One face's conductance ``G`` per unit area (zero for Neumann) and its driving value.

    Inward flux per unit area through each boundary face is ``conductance*(value - u_P) + flux``.
    Arrays are 2D over the face's two other axes, in axis order.
    """

    kind: str
    conductance: np.ndarray
    value: np.ndarray
    flux: np.ndarray

    def diagonal(self, area: np.ndarray) -> np.ndarray:
        """Addition to the boundary cells' diagonal (conductance times face area)."""
        return self.conductance * area

    def rhs(self, area: np.ndarray) -> np.ndarray:
        """Addition to the boundary cells' right-hand side (inflow at u_P = 0)."""
        return (self.conductance * self.value + self.flux) * area


def _on_face(value: float | str, grid: Grid, face: str, where: str, positive: bool = False) -> np.ndarray:
    axis, _ = FACE_AXIS[face]
    shape = tuple(n for a, n in enumerate(grid.cells) if a != axis)
    if isinstance(value, str):
        out = np.array(evaluate(value, *grid.face_mesh(face)), dtype=np.float64)
    else:
        out = np.full(shape, float(value))
    if not np.all(np.isfinite(out)):
        raise JobError("evaluates to NaN or infinity on the face", where)
    if positive and not np.all(out > 0):
        raise JobError(f"must be positive on the whole face, minimum is {float(out.min())!r}", where)
    return out


def boundary_cells(k: np.ndarray, face: str) -> np.ndarray:
    """The coefficient of the cells touching ``face``, as a 2D array."""
    axis, side = FACE_AXIS[face]
    return np.take(k, 0 if side == 0 else k.shape[axis] - 1, axis=axis)


def face_terms(spec: BoundarySpec, grid: Grid, k: tuple[np.ndarray, np.ndarray, np.ndarray]) -> dict[str, FaceTerms]:
    """The six faces' terms, unlisted faces insulated; ``k`` is (kx, ky, kz)."""
    out: dict[str, FaceTerms] = {}
    for face in FACES:
        cond = spec.face(face)
        axis, _ = FACE_AXIS[face]
        h = grid.boundary_width(face)
        kp = boundary_cells(k[axis], face)
        zero = np.zeros_like(kp)
        where = f"boundary.{face}"
        if isinstance(cond, Dirichlet):
            g = 2.0 * kp / h
            out[face] = FaceTerms("dirichlet", g, _on_face(cond.value, grid, face, f"{where}.value"), zero)
        elif isinstance(cond, Robin):
            c = _on_face(cond.coefficient, grid, face, f"{where}.coefficient", positive=True)
            g = 1.0 / (1.0 / c + h / (2.0 * kp))
            out[face] = FaceTerms("robin", g, _on_face(cond.reference, grid, face, f"{where}.reference"), zero)
        elif isinstance(cond, Neumann):
            out[face] = FaceTerms("neumann", zero, zero, _on_face(cond.flux, grid, face, f"{where}.flux"))
        else:  # pragma: no cover - the spec admits no other type
            raise TypeError(cond)
    return out
