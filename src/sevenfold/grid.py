"""The cell-centred box grid: cell counts, spacing and origin (metres)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .spec import GridSpec

# Face name -> (axis, side): side 0 is the minimum face, 1 the maximum.
FACE_AXIS = {
    "x_min": (0, 0), "x_max": (0, 1),
    "y_min": (1, 0), "y_max": (1, 1),
    "z_min": (2, 0), "z_max": (2, 1),
}


@dataclass(frozen=True)
class Grid:
    """``cells[a]`` cells of width ``spacing[a]`` along axis ``a``, starting at ``origin[a]``."""

    cells: tuple[int, int, int]
    spacing: tuple[float, float, float]
    origin: tuple[float, float, float] = (0.0, 0.0, 0.0)

    @classmethod
    def from_spec(cls, spec: GridSpec) -> "Grid":
        return cls(tuple(spec.cells), tuple(spec.cell_spacing), tuple(spec.origin))

    @property
    def shape(self) -> tuple[int, int, int]:
        return self.cells

    @property
    def size(self) -> int:
        """Number of cells."""
        return int(np.prod(self.cells, dtype=np.int64))

    @property
    def cell_volume(self) -> float:
        return float(np.prod(self.spacing))

    @property
    def extent(self) -> tuple[float, float, float]:
        return tuple(n * h for n, h in zip(self.cells, self.spacing))  # type: ignore[return-value]

    def centres(self, axis: int) -> np.ndarray:
        """Cell-centre coordinates along ``axis``."""
        n, h, o = self.cells[axis], self.spacing[axis], self.origin[axis]
        return o + (np.arange(n) + 0.5) * h

    def mesh(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Broadcastable cell-centre coordinates (shapes (nx,1,1), (1,ny,1), (1,1,nz))."""
        return (
            self.centres(0)[:, None, None],
            self.centres(1)[None, :, None],
            self.centres(2)[None, None, :],
        )

    def face_mesh(self, face: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Broadcastable centres of the boundary faces on ``face``; the result is 2D.

        The two remaining axes keep their order, so x faces are (ny, nz), y faces
        (nx, nz) and z faces (nx, ny).
        """
        axis, side = FACE_AXIS[face]
        plane = self.origin[axis] + side * self.extent[axis]
        coords = []
        others = [a for a in range(3) if a != axis]
        for a in range(3):
            if a == axis:
                coords.append(np.full((1, 1), plane))
            elif a == others[0]:
                coords.append(self.centres(a)[:, None])
            else:
                coords.append(self.centres(a)[None, :])
        return coords[0], coords[1], coords[2]

    def face_area(self, axis: int) -> float:
        """Area of one cell face normal to ``axis``."""
        return float(np.prod([h for a, h in enumerate(self.spacing) if a != axis]))
