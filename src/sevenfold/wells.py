"""Wells in groundwater jobs: ``[[well]]`` tables, a vertical screen in one column of cells.

Sign convention: a well's rate Q is the flow INTO the aquifer from the well (m^3/s), so a
pumping (extraction) well has Q < 0, as in the job file's ``rate``.

* Screened cells: the column of cells containing (x, y) (a point on a cell edge goes to the
  cell above it along the axis; the box's far edge to the last cell), each cell whose z-range
  overlaps [bottom, top] by a length L > 0. Held cells are left out (their head is fixed).
* Each screened cell's horizontal conductivity is k_h = sqrt(kx ky) and its transmissivity
  along the screen k_h L.
* Peaceman's equivalent radius (Peaceman, 1978, and his 1983 extension to anisotropic k and
  non-square cells, from memory): the radius at which the radial-flow head equals the cell's
  head,

      r_e = 0.28 sqrt(sqrt(ky/kx) dx^2 + sqrt(kx/ky) dy^2) / ((ky/kx)^(1/4) + (kx/ky)^(1/4)),

  0.198 dx for a square cell and isotropic k. The well index of a cell (m^2/s) is
  WI = 2 pi k_h L / ln(r_e / r_w), so that the flow into the aquifer from the bore in that
  cell is q = WI (h_well - h_cell). A bore at least as wide as r_e is refused: the cell then
  lies inside the well and the correction has no meaning.
* A ``rate`` well: Q is split over its screened cells in proportion to k_h L and added to the
  cells' right-hand sides (amount per second, like a source f V). The well-bore head is the
  one head that drives the cells' shares through their well indices in total:
  h_well = (Q + sum WI h_cell) / sum WI (for one cell: h_well = h_cell + q ln(r_e/r_w) /
  (2 pi k_h L), below the cell's head when pumping).
* A ``head`` well: each screened cell exchanges with the bore, diag += WI and rhs += WI h_well
  (a conductance to a fixed head, so the operator stays SPD and every solver applies); the
  rate reported is Q = sum WI (h_well - h_cell).

Nothing here does I/O.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .errors import JobError
from .grid import Grid
from .spec import WellSpec

PEACEMAN = 0.28  # the constant of Peaceman's equivalent radius (0.28 / sqrt(2) = 0.198 for a square cell)


@dataclass(frozen=True)
class Well:
    """A well placed on the grid: its column (i, j), screened free cells ``k`` and per cell the
    screened length (m), k_h (m/s), Peaceman radius (m), well index (m^2/s) and, for a rate
    well, its share of the rate (m^3/s into the aquifer)."""

    name: str
    x: float
    y: float
    top: float
    bottom: float
    radius: float
    rate: float | None
    head: float | None
    i: int
    j: int
    k: np.ndarray
    length: np.ndarray
    kh: np.ndarray
    r_e: np.ndarray
    index: np.ndarray
    share: np.ndarray

    @property
    def cells(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Index arrays of the screened cells, for fancy indexing of (nx, ny, nz) arrays."""
        return np.full(self.k.size, self.i), np.full(self.k.size, self.j), self.k


def peaceman_radius(kx: np.ndarray, ky: np.ndarray, dx: float, dy: float) -> np.ndarray:
    """Peaceman's equivalent radius (m) of cells dx by dy with directional conductivities kx, ky."""
    ratio = ky / kx
    return PEACEMAN * np.sqrt(np.sqrt(ratio) * dx**2 + np.sqrt(1.0 / ratio) * dy**2) / (
        ratio**0.25 + ratio**-0.25)


def _column(edges: np.ndarray, c: float) -> int:
    return int(min(max(np.searchsorted(edges, c, side="right") - 1, 0), edges.size - 2))


def place_wells(wells: tuple[WellSpec, ...], grid: Grid,
                k: tuple[np.ndarray, np.ndarray, np.ndarray], held: np.ndarray) -> tuple[Well, ...]:
    """The wells on the grid, refusing one outside the box, screening no free cell, or wider
    than its cells' Peaceman radius."""
    out = []
    ex, ey, ez = grid.edges
    for n, w in enumerate(wells):
        where = f"well.{n}"
        for key, c, e in (("x", w.x, ex), ("y", w.y, ey)):
            slack = 1e-9 * (e[-1] - e[0])  # as sevenfold.spec: rounding of a coordinate given on a face
            if not e[0] - slack <= c <= e[-1] + slack:
                raise JobError(f"{w.name!r} at {key} = {c:g} m lies outside the box [{e[0]:g}, {e[-1]:g}]",
                               f"{where}.{key}")
        i, j = _column(ex, w.x), _column(ey, w.y)
        length = np.clip(np.minimum(w.top, ez[1:]) - np.maximum(w.bottom, ez[:-1]), 0.0, None)
        screened = (length > 1e-12 * (ez[-1] - ez[0])) & ~held[i, j, :]
        if not screened.any():
            raise JobError(f"the screen of {w.name!r} [{w.bottom:g}, {w.top:g}] m meets no free cell of "
                           f"its column (outside the box along z, or every cell held)", where)
        ks = np.flatnonzero(screened)
        L = length[ks]
        kx, ky = k[0][i, j, ks], k[1][i, j, ks]
        kh = np.sqrt(kx * ky)
        dx, dy = float(ex[i + 1] - ex[i]), float(ey[j + 1] - ey[j])
        r_e = peaceman_radius(kx, ky, dx, dy)
        if np.any(r_e <= w.radius):
            raise JobError(
                f"{w.name!r} has radius {w.radius:g} m, not smaller than Peaceman's equivalent radius "
                f"{float(r_e.min()):.3g} m of its cells ({dx:.3g} x {dy:.3g} m; about 0.2 times the cell "
                f"width); use wider cells at the well, or model the bore as a [[hold]]", f"{where}.radius")
        index = 2.0 * math.pi * kh * L / np.log(r_e / w.radius)
        share = (w.rate * kh * L / float(np.sum(kh * L))) if w.rate is not None else np.zeros(ks.size)
        out.append(Well(w.name, w.x, w.y, w.top, w.bottom, w.radius, w.rate, w.head, i, j, ks, L, kh, r_e,
                        index, share))
    return tuple(out)


def add_wells(wells: tuple[Well, ...], held: np.ndarray, diag: np.ndarray, b: np.ndarray) -> None:
    """Add the wells to a finest level's diagonal and right-hand side (cell balances, amount per
    second), in place; held cells are left alone."""
    for w in wells:
        cells = w.cells
        free = ~held[cells]
        idx = tuple(c[free] for c in cells)
        if w.rate is not None:
            b[idx] += w.share[free]
        else:
            diag[idx] += w.index[free]
            b[idx] += w.index[free] * w.head


def total_rate(wells: tuple[Well, ...], absolute: bool = False) -> float:
    """The prescribed rates of the rate wells together (m^3/s into the aquifer); with
    ``absolute``, the sum of their magnitudes."""
    return float(sum(abs(w.rate) if absolute else w.rate for w in wells if w.rate is not None))


@dataclass(frozen=True)
class WellFlow:
    """One well's result: rate into the aquifer (m^3/s, negative when extracting) and the
    well-bore head (m); ``given`` says which of the two the job prescribed."""

    name: str
    given: str  # "rate" or "head"
    rate: float
    head: float
    cells: int
    cell_rates: list[float]


def well_flows(wells: tuple[Well, ...], u: np.ndarray) -> list[WellFlow]:
    """Each well's rate and well-bore head from the solved heads ``u``."""
    out = []
    for w in wells:
        h = u[w.cells]
        if w.rate is not None:
            q = w.share
            head = (w.rate + float(np.sum(w.index * h))) / float(np.sum(w.index))
        else:
            q = w.index * (w.head - h)
            head = float(w.head)
        out.append(WellFlow(w.name, "rate" if w.rate is not None else "head", float(np.sum(q)), head,
                            int(w.k.size), [float(v) for v in q]))
    return out
