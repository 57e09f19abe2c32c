"""The balance of a solved problem: sources, flows out through the six faces, flows into holds.

Every flow is computed from the same discrete fluxes the operator uses, so that summing the
free cells' equations gives ``source = sum(face outflows) + sum(hold inflows)
+ sum(exchange outflows)`` up to the solver's residual (the imbalance is the volume-weighted sum of the residuals b - A u).

* Source: sum of f V over the cells not in a hold. Held cells' sources are not part of the
  equations and are left out. For a pure-Neumann problem, f is the rounding-adjusted source
  the solver saw (see problem.py); the pinned cell belongs to no hold and counts as free:
  its equation is implied by the others because the adjusted sources balance exactly.
* Face outflow (positive leaving the domain), for every boundary cell of the face, held or
  free: ``-(G (value - u_P) + q) A``.
* Patch outflow: the part of its face's outflow through the boundary faces a ``[[patch]]``
  owns (where patches overlap, the later one). Face lines include their patches, so the
  patch lines are a breakdown and take no part in the imbalance.
* Exchange outflow (positive leaving the domain into the reference): ``c V (u_P - reference)``
  summed over the free cells of an ``[[exchange]]``.
* Hold inflow (positive into the hold): the flux from every neighbouring cell that is not in
  the same hold, ``T_PN (u_N - u_P)`` with the operator's face conductance T, minus what the hold's own cells
  lose through boundary faces. That is what the agent keeping the hold at its value must
  remove: a heat sink's heat, a well's discharge. An electrode's charge is minus its inflow
  (Gauss's law: the charge is the displacement flux leaving the electrode).

Amounts are in the physics' amount units (W, C, m^3/s); A is a cell face's area (m^2).
Nothing here does I/O.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field

import numpy as np

from .conditions import exchange_outflow
from .electrodes import hold_potentials
from .grid import FACE_AXIS, Grid
from .operator import conductances
from .problem import Problem
from .spec import FACES
from .wells import WellFlow, well_flows

# Cells per slab when summing face fluxes: bounds the temporaries on large grids.
_SLAB_CELLS = 1 << 22


@dataclass(frozen=True)
class HoldFlow:
    """One ``[[hold]]``: its index in the job, name, value, cells it holds, and inflow."""

    index: int
    name: str
    value: float
    cells: int
    inflow: float  # amount per time into the hold, positive in (units of the physics' amount)
    charge: float | None = None  # electrostatics: -inflow (C)
    floating: bool = False  # a floating electrode: ``value`` is its solved potential


@dataclass(frozen=True)
class PatchFlow:
    """One ``[[patch]]``: outflow through the boundary faces it owns (a part of its face's line)."""

    name: str
    face: str
    area: float  # m^2 of the faces the patch selects
    outflow: float  # amount per time leaving the domain, positive out


@dataclass(frozen=True)
class ExchangeFlow:
    """One ``[[exchange]]``: the amount its free cells send into its reference."""

    name: str
    cells: int
    outflow: float  # amount per time leaving the domain into the reference, positive out
    acting: int | None = None  # a drain (only = "outflow"): its free cells that act


@dataclass(frozen=True)
class Balance:
    """Sources, face outflows and hold inflows of one solution, in ``units``."""

    units: str
    source: float
    faces: dict[str, float]  # outflow per face, positive leaving the domain
    holds: list[HoldFlow] = field(default_factory=list)
    imbalance: float = 0.0  # source + sum(well rates) - sum(faces) - sum(hold inflows)
    scale: float = 0.0  # the largest term's magnitude
    relative_imbalance: float = 0.0  # |imbalance| / scale (0 when every term is 0)
    patches: list[PatchFlow] = field(default_factory=list)  # a breakdown of the faces' lines
    exchanges: list[ExchangeFlow] = field(default_factory=list)
    wells: list[WellFlow] = field(default_factory=list)  # rate INTO the aquifer, bore head (wells.py)

    def to_dict(self) -> dict:
        """JSON-friendly form for the result attributes."""
        return asdict(self)


def _hold_index(problem: Problem) -> np.ndarray:
    if problem.hold_index is not None:
        return problem.hold_index
    return np.where(problem.held, 0, -1).astype(np.int32)


def _slabs(n: int, per_slab: int):
    step = max(1, _SLAB_CELLS // max(per_slab, 1))
    for i0 in range(0, n, step):
        yield i0, min(n, i0 + step)


def interior_hold_inflow(problem: Problem, u: np.ndarray, holds: int) -> np.ndarray:
    """Flux into each hold from cells not in that hold, over interior faces (amount per time).

    Conductances are computed only for the x slabs where some face joins cells of two
    different holds (or a hold and a free cell): with no hold, nothing is read.
    """
    out = np.zeros(holds + 1)  # slot ``holds`` collects index -1 (free), then is dropped
    if holds == 0:
        return out[:0]
    grid = problem.grid
    index = _hold_index(problem)
    nx = grid.cells[0]
    for i0, i1 in _slabs(nx, grid.cells[1] * grid.cells[2]):
        crossings = []  # (axis, P, N, T, cross): cells P in the slab, their + neighbour N
        for axis in range(3):
            P = [np.s_[i0:i1], slice(None), slice(None)]
            N = list(P)
            T = [slice(None)] * 3
            if axis == 0:
                top = min(i1, nx - 1)
                if top <= i0:
                    continue
                P[0], N[0], T[0] = np.s_[i0:top], np.s_[i0 + 1:top + 1], np.s_[:top - i0]
            else:
                if grid.cells[axis] < 2:
                    continue
                P[axis], N[axis], T[axis] = np.s_[:-1], np.s_[1:], np.s_[:-1]
            P, N = tuple(P), tuple(N)
            cross = index[P] != index[N]
            if cross.any():
                crossings.append((axis, P, N, tuple(T), cross))
        if not crossings:
            continue
        t = conductances(problem, i0, i1)
        for axis, P, N, T, cross in crossings:
            flow = t[axis][T][cross] * (u[P][cross] - u[N][cross])  # P -> N
            hp, hn = index[P][cross], index[N][cross]
            out += np.bincount(np.where(hn >= 0, hn, holds), weights=flow, minlength=holds + 1)
            out -= np.bincount(np.where(hp >= 0, hp, holds), weights=flow, minlength=holds + 1)
    return out[:holds]


def _boundary(a: np.ndarray, face: str) -> np.ndarray:
    axis, side = FACE_AXIS[face]
    return np.take(a, 0 if side == 0 else a.shape[axis] - 1, axis=axis)


def face_outflow_density(problem: Problem, u: np.ndarray, face: str) -> np.ndarray:
    """Outward flux per unit area through each boundary face of ``face`` (2D array)."""
    t = problem.faces[face]
    return -(t.conductance * (t.value - _boundary(u, face)) + t.flux)


def compute_balance(problem: Problem, u: np.ndarray, units: str = "1",
                    names: list[str | None] | None = None, values: list[float] | None = None,
                    charges: bool = False) -> Balance:
    """The balance of solution ``u`` (full field, held cells at their values) of ``problem``.

    ``names`` and ``values`` label the holds (one per ``[[hold]]``); ``charges`` adds each
    hold's charge (minus its inflow) for electrostatics.
    """
    grid: Grid = problem.grid
    index = _hold_index(problem)
    count = int(index.max()) + 1 if index.size else 0
    if names is not None:
        count = max(count, len(names))
    source = grid.integrate(problem.source, index < 0 if count else None)  # (no hold: every cell)

    inflow = interior_hold_inflow(problem, u, count)
    faces: dict[str, float] = {}
    for face in FACES:
        axis, _ = FACE_AXIS[face]
        out = face_outflow_density(problem, u, face) * grid.face_areas(axis)
        faces[face] = float(out.sum())
        idx = _boundary(index, face)
        if count and (idx >= 0).any():
            # a hold's own cells lose this through the boundary, so it does not flow into the hold
            inflow -= np.bincount(idx[idx >= 0], weights=out[idx >= 0], minlength=count)[:count]

    cells = np.bincount(index[index >= 0].ravel(), minlength=count) if count else np.zeros(0, int)
    floating = hold_potentials(problem, u)
    holds = []
    for i in range(count):
        name = (names[i] if names is not None and i < len(names) else None) or f"hold {i}"
        given = values[i] if values is not None and i < len(values) else None
        value = floating.get(i, float(given) if given is not None else float("nan"))
        holds.append(HoldFlow(i, name, value, int(cells[i]), float(inflow[i]),
                              -float(inflow[i]) if charges else None, i in floating))
    patches, exchanges = placed_flows(problem, u)
    exchanged = [e.outflow for e in exchanges]
    wells = well_flows(problem.wells, u)
    rates = [w.rate for w in wells]
    imbalance = source + sum(rates) - sum(faces.values()) - float(inflow.sum()) - sum(exchanged)
    scale = max([abs(source), *map(abs, faces.values()), *map(abs, inflow), *map(abs, exchanged),
                 *map(abs, rates)], default=0.0)
    relative = abs(imbalance) / scale if scale > 0 else 0.0
    return Balance(units, source, faces, holds, imbalance, scale, relative,
                   patches=patches, exchanges=exchanges, wells=wells)


def placed_flows(problem: Problem, u: np.ndarray) -> tuple[list[PatchFlow], list[ExchangeFlow]]:
    """Each patch's outflow through the faces it owns (later patches own overlaps; the faces'
    own lines include their patches) and each exchange's outflow into its reference."""
    patches = []
    for p in problem.patches:
        out = face_outflow_density(problem, u, p.face) * problem.grid.face_areas(FACE_AXIS[p.face][0])
        patches.append(PatchFlow(p.name, p.face, p.area, float(out[p.owned].sum())))
    exchanges = []
    for e in problem.exchanges:
        free = ~problem.held.reshape(-1)[e.cells]
        acting = int(np.count_nonzero(free & (e.effective > 0))) if e.outflow_only else None
        exchanges.append(ExchangeFlow(e.name, int(np.count_nonzero(free)),
                                      exchange_outflow(e, u, problem.held), acting))
    return patches, exchanges


def balance_rows(balance: dict) -> list[tuple[str, float]]:
    """(label, amount) rows for a printed balance table, from ``Balance.to_dict()``.

    Shared by ``sevenfold run`` and anything else that shows a result's balance.
    """
    rows: list[tuple[str, float]] = [("source (free cells)", balance["source"])]
    for face, v in balance["faces"].items():
        rows.append((f"out through {face}", v))
        rows.extend((f"  of which through patch {p['name']}", p["outflow"])
                    for p in balance.get("patches", []) if p["face"] == face)
    for e in balance.get("exchanges", []):
        acting = e.get("acting")
        rows.append((f"out into exchange {e['name']}"
                     + (f" (drain: {acting} of {e['cells']} cells acting)" if acting is not None else ""),
                     e["outflow"]))
    for h in balance["holds"]:
        if h.get("floating"):
            rows.append((f"charge on {h['name']} (floating, solved {h['value']:.6g} V)", h["charge"]))
        elif h.get("charge") is not None:
            rows.append((f"charge on {h['name']} ({h['value']:g})", h["charge"]))
        else:
            rows.append((f"into {h['name']} ({h['value']:g})", h["inflow"]))
    for w in balance.get("wells", ()):
        given = "given rate" if w["given"] == "rate" else "given head"
        rows.append((f"from well {w['name']} ({given}; bore head {w['head']:.6g} m)", w["rate"]))
    rows.append(("imbalance", balance["imbalance"]))
    return rows
