"""Geometric multigrid on the cell-centred grid, as a preconditioner for conjugate gradients.

Design (measured against the alternatives in benchmarks/RESULTS_CYCLE.md):

* coarsening by aggregating 2 cells per coarsened axis (any cell count: an odd last cell forms
  its own aggregate), the axes chosen per level from the operator (:func:`coarsening_step`):
  an axis that is weakly coupled in more than a tenth of the cells is not coarsened
  (semi-coarsening), which is what keeps a grid graded along z, anisotropic only near its
  fine end, robust;
* where the job has contact resistances (``planes``), the pairs of an axis are arranged per
  level so that every contact plane lies between aggregates (:func:`.levels.aggregates`:
  pairs from the planes' parity, a cell alone where a pair would hold a plane; along z, planes
  of both parities keep z uncoarsened instead, since the z-lines solve along it): the Galerkin
  product drops a coupling inside an aggregate, and with it the contact (12 iterations
  against 5 at 128^3, benchmarks/RESULTS_SHIFT.md; 39 against 8 for three contacts across x,
  benchmarks/RESULTS_PARTITION.md); walls in the conductivity across x and y (a 1000:1
  column's sides) are kept between aggregates the same way while an axis has few of them
  (:func:`.levels.material_walls`: 7 iterations against 9 for the 1000:1 column at 256^3);
* coarse operators from the aggregation's Galerkin product P^T A P, which stays a 7-point
  stencil: every coarse coupling is the sum of the fine couplings crossing between two
  aggregates, so jumps in k reach the coarse levels as fluxes instead of being averaged; each
  axis's part is divided by its aggregate size ("scaled"), which makes the coarse operator
  consistent with a rediscretisation on the aggregates (the factor piecewise-constant
  aggregation loses on smooth errors, Braess 1995, per axis rather than one overcorrection),
  and so usable by full multigrid;
* piecewise-constant transfers in the cycle (restriction P^T, fused with the residual so the
  fine residual is never stored), linear interpolation between cell centres for full
  multigrid;
* z-line Gauss-Seidel smoothing (tridiagonal solves along z, columns in two colours, blocks of
  columns solved side by side so the recurrences vectorise, each colour pass trailing the one
  before by one x-plane so both sweeps on a side are one pass over memory), two sweeps red
  then black before and black then red after the coarse correction, so the cycle is a
  symmetric positive definite preconditioner and CG stays valid; lines make strong z
  couplings (thin cells, a graded z axis) harmless;
* a W-cycle (the V-cycle of aggregation multigrid loses accuracy with every level), a
  sparse Cholesky factor of the coarsest level in nested-dissection order (at most 16^3
  cells; :mod:`.coarsest`);
* the preconditioner's levels in float32 by default, CG, the residual-defining operator and
  the true-residual check in float64; the finest level is smoothed on a float32 copy of its
  face arrays, or, on large grids and where memory is short
  (:func:`sevenfold.memory.gmg_finest`), on the float64 arrays themselves with the z-line
  pivots refactored every cycle in a borrowed buffer (24 bytes per cell less; the sweeps
  read more bytes, up to a quarter more solve time in some runs, whole runs equal within
  noise, benchmarks/RESULTS_FINEST.md); CG takes the float32 z as it is (no float64 z);
* CG starts from zero: W(2,2) cycles reach rtol 1e-8 in fewer work units from zero than
  W(1,1) cycles after a full-multigrid start (benchmarks/RESULTS_CYCLE.md);
  :meth:`Hierarchy.full_multigrid` (coarsest first, interpolated up, one V-cycle per level)
  stays available (``start="fmg"``) and reaches discretisation accuracy by itself;
* CG's dot product p . A p rides on the operator's pass, ||r|| and the finest level's float32
  copy of r on the residual's update, x += alpha p on the next direction's pass; r . z is a
  pass of its own (z read as float32); A p and z share one buffer.

The finest level is never stored as a CSR matrix: only its face arrays (tx, ty, tz, diag).
"""

from __future__ import annotations

import time

import numpy as np

from ..kernels import stencil
from .cg import Monitor, SolveResult, pcg
from .hierarchy import COARSEST_CELLS, SERIAL_BELOW, Hierarchy  # noqa: F401 (benchmarks import them from here)
from .levels import Level
from .precision import coefficient_contrast, precision_note, preconditioner_precision

class FineOperator:
    """The finest level as a linear operator on flat vectors (for CG).

    Products go to one buffer that the next product overwrites (CG needs one at a time);
    :meth:`apply_dot` also returns p . A p from the same pass.
    """

    def __init__(self, level: Level) -> None:
        self.level = level
        self.shape = (level.diag.size, level.diag.size)
        self.out = np.empty(level.shape)

    def __matmul__(self, x: np.ndarray) -> np.ndarray:
        return self.apply_dot(x)[0]  # one kernel for both (one compile less on a first run)

    def apply_dot(self, p: np.ndarray) -> tuple[np.ndarray, float]:
        lv = self.level
        pq = stencil.apply_dot(lv.tx, lv.ty, lv.tz, lv.diag, p.reshape(lv.shape), self.out)
        return self.out.ravel(), pq


def fine_level(problem) -> tuple[Level, np.ndarray]:
    """The finest level's face arrays and the full-grid right-hand side (0 on held cells)."""
    from ..operator import face_arrays

    faces = face_arrays(problem)
    grid = problem.grid
    # effective spacing for the coarsening rule: the mean cell width per axis
    spacing = tuple(e / n for e, n in zip(grid.extent, grid.cells))
    level = Level(faces.tx, faces.ty, faces.tz, faces.diag, ~problem.held,
                  np.ones(3, dtype=np.int64), spacing)
    return level, faces.b


DEFAULTS = dict(cycle="W", smoothing=2, smoother="line", transfer="scaled", precision="float32",
                start="zero")


def solve_levels(fine: Level, b: np.ndarray, rtol: float, max_iterations: int,
                 monitor: Monitor | None = None, stagnation_window: int = 50,
                 **options) -> tuple[SolveResult, Hierarchy]:
    """gmg-CG on given face arrays (the finest level, float64) and right-hand side.

    ``options``: Hierarchy's (cycle, smoothing, smoother, transfer, precision,
    overcorrection, planes) and ``start``: "fmg" (full multigrid start) or "zero".
    """
    opts = {**DEFAULTS, **options}
    start = opts.pop("start")
    if start == "fmg" or opts["transfer"] == "linear":
        opts.pop("planes", None)  # (their interpolation assumes plain pairs)
        opts["walls"] = False
    t1 = time.perf_counter()
    operator = FineOperator(fine)
    # the preconditioner writes z where the operator writes A p: CG is done with A p by then
    hierarchy = Hierarchy(fine, out=operator.out, **opts)
    setup = time.perf_counter() - t1
    flat = b.ravel()
    t2 = time.perf_counter()
    x0 = hierarchy.full_multigrid(flat) if start == "fmg" else None
    start_seconds = time.perf_counter() - t2
    result = pcg(operator, flat, hierarchy, rtol, max_iterations,
                 monitor, stagnation_window, "gmg", setup, x0=x0)
    result.solve_seconds += start_seconds  # the full multigrid start is part of the solve
    precision = "" if hierarchy.dtype == fine.diag.dtype else f", {hierarchy.dtype.name} preconditioner"
    if opts.get("finest") == "operator" and precision:
        precision += " (finest level smoothed on the float64 arrays to save memory)"
    result.notes = ("levels " + " > ".join("x".join(map(str, s)) for s in hierarchy.shapes)
                    + f"; {'W' if hierarchy.gamma == 2 else 'V'}-cycle, "
                    + hierarchy.smoothing_note() + f" smoothing{precision}"
                    + (", full multigrid start" if start == "fmg" else "")
                    + hierarchy.planes_note())
    return result, hierarchy


def contact_planes(problem) -> tuple[tuple[int, ...], ...]:
    """Per axis, the cell boundaries that carry a ``[[contact]]`` (for Hierarchy's planes)."""
    planes: tuple[list[int], ...] = ([], [], [])
    for c in problem.contacts:
        planes[c.axis].append(c.index + 1)
    return tuple(tuple(sorted(set(p))) for p in planes)


def solve_gmg(problem, rtol: float, max_iterations: int, monitor: Monitor | None = None,
              stagnation_window: int = 50, **options) -> tuple[np.ndarray, SolveResult]:
    """CG preconditioned by the multigrid cycle; returns u on the full grid (0 on held cells)
    and the solve's record (face arrays built in ``assembly_seconds``, levels in ``setup``).
    The levels run in float32 unless the coefficient's contrast asks for float64
    (:func:`coefficient_contrast`, :func:`preconditioner_precision`) or ``precision`` is given."""
    from ..memory import gmg_finest

    contrast = coefficient_contrast(problem)
    chosen = "precision" not in options
    options.setdefault("precision", preconditioner_precision(contrast))
    options.setdefault("planes", contact_planes(problem))
    t0 = time.perf_counter()
    fine, b = fine_level(problem)
    if hasattr(monitor, "operator_built"):  # the problem's cell fields may go now
        monitor.operator_built()
    options.setdefault("finest", gmg_finest(fine.diag.size))
    t1 = time.perf_counter()
    result, hierarchy = solve_levels(fine, b, rtol, max_iterations, monitor, stagnation_window,
                                     **options)
    result.assembly_seconds = t1 - t0
    if chosen and precision_note(contrast):
        result.notes += ", " + precision_note(contrast)
    return result.x.reshape(fine.shape), result
