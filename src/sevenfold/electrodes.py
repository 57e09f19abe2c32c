"""Floating electrodes: ``[[hold]]`` tables with a ``charge`` (C) instead of a ``value``.

A floating electrode is a conductor whose potential V is unknown and whose charge Q is
given (0 for an isolated conductor). Its cells are held like any other hold's, so the
operator stays SPD and every solver applies; V is found by superposition:

1. solve the job with every floating electrode at 0 V: the field u0, and the charge Q0_i
   each floating electrode then carries;
2. for each floating electrode j, solve the *unit problem* (no free charge, Dirichlet and
   Robin faces at 0 V, Neumann faces insulated: capacitance.unit_problem) with j at 1 V and
   every other hold at 0 V: the field u_j and the charges M[i, j] on the floating electrodes
   (a block of the capacitance matrix, symmetric positive definite when some conductor is
   held or a face is grounded);
3. solve M V = Q - Q0; the field is u0 + sum_j V_j u_j.

Charges are computed as in balance.py (the displacement flux leaving the electrode). Every
step is linear in the unknowns, so the result is the solution of the coupled problem up to
the solver's tolerance: exactly, with ``direct``. Nothing here does I/O.
"""

from __future__ import annotations

import dataclasses
from typing import Callable

import numpy as np

from .errors import JobError

# ``Problem.floating`` holds (hold index, charge in C) per floating electrode, in job order.
Floating = tuple[tuple[int, float], ...]


def floating_charges(spec, hold_index: np.ndarray, faces: dict) -> Floating:
    """The floating electrodes of a job, refusing one with no cell of its own or with no
    conductor at a known potential to refer to (its potential would be undetermined)."""
    floating = tuple((i, float(h.charge)) for i, h in enumerate(spec.hold) if h.charge is not None)
    if not floating:
        return ()
    for i, _ in floating:
        if not np.any(hold_index == i):
            raise JobError("this floating electrode has no cell of its own (later holds cover it)", f"hold.{i}")
    held = any(h.value is not None for h in spec.hold)
    grounded = any(np.any(t.conductance) for t in faces.values())  # a dirichlet or robin face (or part)
    if not (held or grounded):
        i = floating[0][0]
        raise JobError("a floating electrode needs a conductor at a known potential to refer to: "
                       "a [[hold]] with a value, or a dirichlet or robin face", f"hold.{i}.charge")
    return floating


def electrode_charges(problem, u: np.ndarray, holds: list[int]) -> np.ndarray:
    """The charge (C) on each hold in ``holds``: minus its inflow, as in the balance."""
    from .balance import compute_balance

    count = int(problem.hold_index.max()) + 1
    bal = compute_balance(problem, u, "C", names=[None] * count, charges=True)
    return np.array([bal.holds[i].charge for i in holds])


class _StopOnly:
    """Forwards only cancellation: the unit solves do not report progress of their own."""

    def __init__(self, inner) -> None:
        self.inner = inner

    def iteration(self, iteration: int, relative_residual: float, elapsed: float) -> None:
        pass

    def stop_requested(self) -> bool:
        return self.inner.stop_requested()


def solve_floating(problem, solver, method: str, monitor, solve: Callable):
    """u on every cell with each floating electrode at the potential that gives it its charge.

    ``solve(problem, solver, method, monitor) -> (u, SolveResult)`` solves a problem without
    floating electrodes. Returns (u, the first solve's SolveResult, with a note of the rest).
    """
    from .capacitance import unit_problem

    fixed = dataclasses.replace(problem, floating=())
    indices = [i for i, _ in problem.floating]
    target = np.array([q for _, q in problem.floating])
    u0, result = solve(fixed, solver, method, monitor)
    q0 = electrode_charges(fixed, u0, indices)
    base = unit_problem(fixed)
    units, M = [], np.empty((len(indices), len(indices)))
    iterations = []
    for col, j in enumerate(indices):
        case = dataclasses.replace(base, held_value=(problem.hold_index == j).astype(np.float64))
        uj, rj = solve(case, solver, method, _StopOnly(monitor))
        iterations.append(rj.iterations)
        M[:, col] = electrode_charges(case, uj, indices)
        units.append(uj)
    potentials = np.linalg.solve(M, target - q0)
    u = u0
    for v, uj in zip(potentials, units):
        u += v * uj
    note = (f"floating electrodes by superposition: the solve at 0 V, then {len(indices)} unit-potential "
            f"solve(s) of {', '.join(map(str, iterations))} iteration(s)")
    result.notes = f"{result.notes}; {note}" if getattr(result, "notes", None) else note
    return u, result


def hold_potentials(problem, u: np.ndarray) -> dict[int, float]:
    """The solved potential of each floating electrode, by hold index (from its cells)."""
    return {i: float(u[problem.hold_index == i].mean()) for i, _ in problem.floating}
