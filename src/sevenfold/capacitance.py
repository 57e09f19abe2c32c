"""The capacitance matrix of the electrodes of an electrostatics job, by unit-potential solves.

For N electrodes (the job's ``[[hold]]`` entries), solve N times with electrode i at 1 V and
every other electrode at 0 V; C[i, j] is then the charge on electrode j (C), computed as in
balance.py (the displacement flux leaving the electrode). This is the Maxwell capacitance
matrix: C[i, i] > 0, C[i, j] <= 0 for j != i, and C is symmetric (reciprocity).

For the unit solves the job's free charge is set to zero, Dirichlet faces are grounded
(0 V: together they act as one further conductor at 0 V, whose charge ``ground[i]`` is
reported), Robin faces and [[exchange]] regions take reference 0 V and Neumann faces carry
no flux (an exchange's charge is not part of ``ground``). With no grounded
face, each row of C sums to zero (charge conservation).

A single electrode's entry C[0, 0] is its self-capacitance to the grounded faces (C = Q / V
with every Dirichlet and Robin face at 0 V); it needs a grounded face. Floating electrodes
(holds with a charge) count here as electrodes like any other: the matrix is that of every
conductor.

When the grid is one cell thick along exactly one axis and both faces across that axis are
Neumann (insulated), the problem stands for a long 2D one: ``thin_axis`` names the axis and
``per_length`` divides by the cell's thickness, giving farad per metre along that axis.

The matrix is assembled once and factored (or given its multigrid hierarchy) once; each
electrode only changes the right-hand side. Nothing here does I/O.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from .balance import compute_balance
from .errors import JobError, SolverError
from .operator import assemble, scatter
from .problem import Problem
from .solvers import assembled_method
from .solvers.cg import pcg
from .spec import SolverSpec


@dataclass(frozen=True)
class CapacitanceResult:
    names: list[str]
    matrix: np.ndarray  # (N, N), farad: C[i, j] = charge on j with i at 1 V, others at 0 V
    ground: np.ndarray  # (N,), farad: charge on the grounded faces with i at 1 V
    grounded_faces: list[str]
    asymmetry: float  # max |C - C^T| / max |C|
    method: str
    iterations: list[int]
    thin_axis: str | None = None  # "x", "y" or "z": one cell thick, insulated across (a 2D problem)
    thickness: float | None = None  # that cell's thickness (m)

    @property
    def per_length(self) -> np.ndarray | None:
        """The matrix in farad per metre along ``thin_axis`` (None unless the problem is thin)."""
        return None if self.thickness is None else self.matrix / self.thickness


def thin_axis(problem: Problem) -> int | None:
    """The one axis with a single cell whose two faces are Neumann (insulated in the unit
    solves), or None when there is not exactly one such axis."""
    grid = problem.grid
    thin = [a for a in range(3) if grid.cells[a] == 1]
    if len(thin) != 1:
        return None
    a = thin[0]
    ends = ("xyz"[a] + "_min", "xyz"[a] + "_max")
    return a if all(problem.faces[f].kind == "neumann" for f in ends) else None


def unit_problem(problem: Problem) -> Problem:
    """The problem with no source, grounded Dirichlet and Robin faces and insulating Neumann ones."""
    faces = {
        name: dataclasses.replace(t, value=np.zeros_like(t.value), flux=np.zeros_like(t.flux))
        for name, t in problem.faces.items()
    }
    return dataclasses.replace(problem, source=np.zeros_like(problem.source), faces=faces,
                               exchanges=tuple(e.grounded() for e in problem.exchanges))


class _Solver:
    """Factor once, solve many right-hand sides."""

    def __init__(self, A, solver: SolverSpec) -> None:
        self.A, self.spec = A, solver
        if solver.method in ("fft", "gmg"):
            # matrix-free methods solve from a Problem; here the matrix is reused per electrode,
            # so take what ``auto`` takes for an assembled matrix (direct when small, else AMG)
            solver = solver.model_copy(update={"method": "auto"})
        self.method = assembled_method(solver, A.shape[0])
        if self.method == "direct":
            import scipy.sparse.linalg as sla

            self.lu = sla.splu(A.tocsc(), permc_spec="MMD_AT_PLUS_A")
        else:
            from .solvers.amg import build_hierarchy

            self.M = build_hierarchy(A, solver.amg).aspreconditioner(cycle="V")

    def solve(self, b: np.ndarray) -> tuple[np.ndarray, int]:
        if self.method == "direct":
            x = self.lu.solve(b)
            if not np.all(np.isfinite(x)):
                raise SolverError("the direct solve produced non-finite values")
            return x, 1
        r = pcg(self.A, b, self.M.matvec, self.spec.rtol, self.spec.max_iterations,
                stagnation_window=self.spec.stagnation_window, method=self.method)
        return r.x, r.iterations


def capacitance_matrix(problem: Problem, names: list[str], solver: SolverSpec) -> CapacitanceResult:
    """C[i, j] in farad for the electrodes ``names`` (one per hold, in job order)."""
    n = len(names)
    index = problem.hold_index
    if index is None or n < 1:
        raise JobError("capacitance needs at least one [[hold]] electrode", "hold")
    for i, name in enumerate(names):
        if not np.any(index == i):
            raise JobError(f"electrode {name!r} has no cell of its own (later holds cover it)", f"hold.{i}")
    base = unit_problem(problem)
    grounded = [f for f, t in base.faces.items() if t.kind != "neumann"]
    if n == 1 and not grounded:
        raise JobError("a single electrode's self-capacitance is to the grounded faces, and this job "
                       "has none; make a face dirichlet (or robin), or add a second [[hold]]", "hold")
    C = np.zeros((n, n))
    ground = np.zeros(n)
    solver_ = None
    iterations = []
    for i in range(n):
        case = dataclasses.replace(base, held_value=(index == i).astype(np.float64))
        system = assemble(case)
        if solver_ is None:
            solver_ = _Solver(system.matrix, solver)
        x, its = solver_.solve(system.rhs)
        iterations.append(its)
        u = scatter(system, case, x)
        bal = compute_balance(case, u, "C", names=names, charges=True)
        C[i] = [h.charge for h in bal.holds[:n]]
        ground[i] = -sum(bal.faces[f] for f in grounded)
    scale = float(np.abs(C).max())
    asym = float(np.abs(C - C.T).max()) / scale if scale > 0 else 0.0
    assert solver_ is not None
    thin = thin_axis(problem)
    thickness = None if thin is None else float(problem.grid.extent[thin])
    return CapacitanceResult(list(names), C, ground, grounded, asym, solver_.method, iterations,
                             None if thin is None else "xyz"[thin], thickness)
