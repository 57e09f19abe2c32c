"""Boundary faces as per-cell terms of the finite-volume equations.

Each condition acts at the domain face, half a cell from the boundary cell's centre. With
``h`` the boundary cell's own width normal to the face and ``k_P`` its coefficient along
that normal, the inward
flux per unit area is ``G * (value - u_P)`` with

* Dirichlet ``value``:           G = 2 k_P / h
* Robin ``coefficient c, reference``: G = 1 / (1/c + h / (2 k_P))  (film in series with half a cell)
* Neumann ``flux q``:            a fixed inward flux q, no G.

``[[patch]]`` tables overwrite parts of a face with their own terms (see conditions.py);
a face whose boundary faces then differ in type has ``kind`` "mixed".

Times the face's area, G joins the cell's diagonal and G*value (or q) its right-hand side
(the rows of the operator are balances over each cell: amount per unit time).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import JobError
from .expressions import evaluate
from .grid import FACE_AXIS, Grid
from .spec import FACES, BoundarySpec


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


def _on_face(value: float | str, grid: Grid, face: str, where: str, positive: bool = False,
             not_negative: bool = False) -> np.ndarray:
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
    if not_negative and not np.all(out >= 0):
        raise JobError(f"must not be negative on the face (0 insulates), minimum is "
                       f"{float(out.min())!r}", where)
    return out


def condition_terms(cond, grid: Grid, face: str, kp: np.ndarray, where: str,
                    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(G, value, flux) of a condition over the whole of ``face``: ``cond`` has a ``type`` and
    the keys of that type (a ``boundary.<face>`` entry or a ``[[patch]]``). A robin
    ``coefficient`` may be 0 where an expression says so: insulated there (G = 0)."""
    axis, _ = FACE_AXIS[face]
    h = grid.boundary_width(face)
    zero = np.zeros_like(kp)
    if cond.type == "dirichlet":
        return 2.0 * kp / h, _on_face(cond.value, grid, face, f"{where}.value"), zero
    if cond.type == "robin":
        c = _on_face(cond.coefficient, grid, face, f"{where}.coefficient", not_negative=True)
        g = c / (1.0 + c * h / (2.0 * kp))  # 1 / (1/c + h/(2 k_P)), and 0 where c = 0
        return g, _on_face(cond.reference, grid, face, f"{where}.reference"), zero
    if cond.type == "neumann":
        flux = cond.flux if cond.flux is not None else 0.0
        return zero, zero, _on_face(flux, grid, face, f"{where}.flux")
    raise TypeError(cond)  # pragma: no cover - the spec admits no other type


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
        kp = boundary_cells(k[axis], face)
        out[face] = FaceTerms(cond.type, *condition_terms(cond, grid, face, kp, f"boundary.{face}"))
    return out
