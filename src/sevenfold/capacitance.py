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
    if index is None or n < 2:
        raise JobError("the capacitance matrix needs two or more [[hold]] electrodes", "hold")
    for i, name in enumerate(names):
        if not np.any(index == i):
            raise JobError(f"electrode {name!r} has no cell of its own (later holds cover it)", f"hold.{i}")
    base = unit_problem(problem)
    grounded = [f for f, t in base.faces.items() if t.kind != "neumann"]
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
    return CapacitanceResult(list(names), C, ground, grounded, asym, solver_.method, iterations)
