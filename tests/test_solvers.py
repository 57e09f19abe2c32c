"""AMG-preconditioned CG against the direct solve, residual histories, failures, pure Neumann."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg
import scipy.sparse.linalg as sla
from conftest import make_spec, make_table, reference_system, solve_spec

from sevenfold.errors import JobError, SolverError
from sevenfold.operator import assemble, scatter
from sevenfold.problem import build_problem
from sevenfold.solvers import solve
from sevenfold.solvers.amg import solve_amg
from sevenfold.solvers.direct import solve_direct
from sevenfold.spec import parse_job

# Two materials 1000:1: inclusions of every shape kind in a k = 1 matrix.
INCLUSIONS = {
    "value": 1.0,
    "region": [
        {"sphere": {"center": [0.3, 0.3, 0.3], "radius": 0.18}, "value": 1000.0},
        {"box": {"min": [0.55, 0.1, 0.0], "max": [0.8, 0.9, 0.5]}, "value": 1000.0},
        {"cylinder": {"center": [0.5, 0.5, 0.7], "radius": 0.1, "axis": "y", "length": 0.8}, "value": 1000.0},
    ],
}
# A smooth lognormal-like field, k from about e^-4 to e^4.
LOGNORMAL = {"value": "exp(2.5*sin(3*x)*cos(2*y) + 1.5*sin(5*z + x))"}
MATERIALS = {"inclusions": INCLUSIONS, "lognormal": LOGNORMAL}

BOUNDARY = {
    "x_min": {"type": "dirichlet", "value": 0.0},
    "x_max": {"type": "dirichlet", "value": 1.0},
    "z_max": {"type": "robin", "coefficient": 5.0, "reference": 0.5},
}
SOURCE = {"value": 0.0, "region": [{"box": {"min": [0.1, 0.6, 0.1], "max": [0.4, 0.9, 0.4]}, "value": 50.0}]}


def heterogeneous_system(material: dict, **solver):
    spec = make_spec(
        grid={"cells": [20, 18, 16], "size": [1.0, 1.0, 1.0]},
        material=material,
        source=SOURCE,
        boundary=BOUNDARY,
        solver={"method": "amg", **solver},
    )
    problem = build_problem(spec)
    return spec, problem, assemble(problem)


@pytest.mark.parametrize("kind", ["smoothed_aggregation", "classical"])
@pytest.mark.parametrize("material", MATERIALS)
def test_amg_agrees_with_direct(material, kind):
    """||x_amg - x_direct|| <= (||r_amg|| + ||r_direct||) / lambda_min(A), and rtol * cond relative.

    For SPD A, x - x* = A^-1 r, so ||x - x*|| <= ||r|| / lambda_min (common practice).
    """
    rtol = 1e-10
    spec, problem, system = heterogeneous_system(MATERIALS[material], amg=kind, rtol=rtol)
    k = problem.coefficient[0]
    assert k.max() / k.min() > 300
    A, b = system.matrix, system.rhs
    result = solve(A, b, spec.solver)
    assert result.method == {"smoothed_aggregation": "amg-sa", "classical": "amg-classical"}[kind]
    assert result.converged
    direct = solve_direct(A, b)

    r_amg = np.linalg.norm(b - A @ result.x)
    r_direct = np.linalg.norm(b - A @ direct.x)
    assert r_amg / np.linalg.norm(b) == pytest.approx(result.final_relative_residual, rel=1e-6)
    assert result.final_relative_residual <= 10 * rtol  # true residual, near the recursive one

    lam_min = sla.eigsh(A, k=1, sigma=0, which="LM", return_eigenvectors=False)[0]
    lam_max = sla.eigsh(A, k=1, which="LA", return_eigenvectors=False)[0]
    difference = np.linalg.norm(result.x - direct.x)
    assert difference <= (1 + 1e-6) * (r_amg + r_direct) / lam_min
    # relative form: ||dx|| / ||x|| <= cond(A) ||r|| / ||b||, with ||r|| / ||b|| <= 10 rtol
    assert difference / np.linalg.norm(direct.x) <= lam_max / lam_min * 10 * rtol


class Recorder:
    """A monitor that keeps what it is told."""

    def __init__(self):
        self.calls = []

    def iteration(self, iteration, relative_residual, elapsed):
        self.calls.append((iteration, relative_residual))

    def stop_requested(self):
        return False


@pytest.mark.parametrize("kind", ["smoothed_aggregation", "classical"])
def test_residual_history(kind):
    """History starts at 1.0, has one entry per iteration, and stops at the first value <= rtol."""
    rtol = 1e-9
    _, _, system = heterogeneous_system(INCLUSIONS)
    monitor = Recorder()
    result = solve_amg(system.matrix, system.rhs, rtol, 200, kind, monitor)
    h = result.history
    assert h[0] == 1.0
    assert len(h) == result.iterations + 1 == len(result.times)
    assert h[-1] <= rtol
    assert all(v > rtol for v in h[:-1])
    assert result.iterations > 3  # a real iteration, not a one-step solve
    assert monitor.calls == list(enumerate(h))


def test_too_few_iterations_raise_with_history():
    """max_iterations reached: SolverError keeps every residual recorded so far."""
    _, _, system = heterogeneous_system(INCLUSIONS)
    with pytest.raises(SolverError) as info:
        solve_amg(system.matrix, system.rhs, 1e-12, 3)
    history = info.value.history
    assert len(history) == 4
    assert history[0] == 1.0
    assert min(history) > 1e-12
    assert "3 iterations" in str(info.value)


def test_solver_spec_too_few_iterations():
    """The same through solve() and the job table's solver section."""
    spec, _, system = heterogeneous_system(LOGNORMAL, amg="classical", rtol=1e-11, max_iterations=2)
    with pytest.raises(SolverError) as info:
        solve(system.matrix, system.rhs, spec.solver)
    assert len(info.value.history) == 3 and info.value.history[0] == 1.0


# Pure Neumann: 4.0 per unit time generated in a box of cells, the same leaving through x_max.
NEUMANN_CELLS = [8, 6, 5]
NEUMANN_SIZE = [0.8, 0.6, 1.0]
GENERATED = 4.0
X_MAX_AREA = NEUMANN_SIZE[1] * NEUMANN_SIZE[2]


def neumann_table(outflow: float) -> dict:
    return make_table(
        grid={"cells": NEUMANN_CELLS, "size": NEUMANN_SIZE},
        material={"value": "1 + x + 0.5*sin(3*y)*z"},
        source={
            "value": 0.0,
            "region": [{"box": {"min": [0.1, 0.1, 0.1], "max": [0.35, 0.45, 0.5]}, "total": GENERATED}],
        },
        boundary={"x_max": {"type": "neumann", "flux": -outflow / X_MAX_AREA}},
    )


@pytest.mark.parametrize("method", ["direct", "amg"])
def test_pure_neumann_balanced(method):
    """Balanced: u has mean zero and satisfies the full (unpinned) discrete equations."""
    table = neumann_table(GENERATED)
    spec = parse_job(table, "test")
    if method == "direct":
        u, problem = solve_spec(spec)
    else:
        problem = build_problem(spec)
        system = assemble(problem)
        result = solve_amg(system.matrix, system.rhs, 1e-12, 300)
        u = scatter(system, problem, result.x)
    assert problem.gauge_mean_zero
    assert np.ptp(u) > 0.1  # a real field, not zero
    assert abs(u.mean()) <= 1e-14 * np.abs(u).max()

    A, b, _, _ = reference_system(table)
    assert abs(b.sum()) <= 1e-12 * np.abs(b).sum()  # the reference data balance too
    assert np.linalg.norm(A @ u.ravel() - b) <= 1e-10 * np.linalg.norm(b)
    # a least-squares solution of the singular operator, up to a constant (its null space)
    u_ls = scipy.linalg.lstsq(A.toarray(), b)[0]
    u_ls -= u_ls.mean()
    assert np.allclose(u.ravel(), u_ls, rtol=0, atol=1e-9 * np.abs(u_ls).max())


def test_pure_neumann_rounding_imbalance_is_accepted():
    """An imbalance far below BALANCE_RTOL is removed from f and solved in the mean-zero gauge."""
    table = neumann_table(GENERATED * (1 + 1e-7))
    u, problem = solve_spec(parse_job(table, "test"))
    assert problem.gauge_mean_zero
    A, b, _, _ = reference_system(table)
    # left in b, the imbalance would leave a relative residual of about 2e-8 here
    assert np.linalg.norm(A @ u.ravel() - b) > 1e-9 * np.linalg.norm(b)
    b = b - b.mean()  # removed evenly from f, as the problem promises
    assert abs(u.mean()) <= 1e-14 * np.abs(u).max()
    assert np.linalg.norm(A @ u.ravel() - b) <= 1e-12 * np.linalg.norm(b)


@pytest.mark.parametrize("outflow", [0.0, 1.5, 2 * GENERATED])
def test_pure_neumann_unbalanced(outflow):
    """Unbalanced: JobError naming the sources, the boundary fluxes and the net imbalance."""
    table = neumann_table(outflow)
    table["physics"] = "heat"
    spec = parse_job(table, "test")
    with pytest.raises(JobError) as info:
        build_problem(spec)
    message = str(info.value)
    net = GENERATED - outflow
    assert info.value.where == "boundary"
    assert f"net {net:.6g} W" in message
    assert f"sources add {GENERATED:.6g} W" in message
    assert f"boundary fluxes {0.0 - outflow:.6g} W" in message


@pytest.mark.parametrize("method", ["amg", "gmg"])
def test_reported_residual_is_the_true_one_on_extreme_contrast(method: str) -> None:
    """A 1e12:1 checkerboard: the reported final residual, recomputed here from the assembled
    matrix, meets rtol and is the true one."""
    from sevenfold.solvers.select import solve_problem
    from sevenfold.spec import SolverSpec

    n = 20
    i, j, k = np.indices((n, n, n))
    contrast = np.where((i + j + k) % 2 == 0, 1e6, 1e-6)
    spec = make_spec(grid={"cells": [n, n, n], "size": [1.0, 1.0, 1.0]}, material={"file": "k.npy"},
                     source={"value": 1.0}, boundary={"x_min": {"type": "dirichlet", "value": 0.0}})
    problem = build_problem(spec, coefficient_file=contrast)
    system = assemble(problem)
    u, result = solve_problem(problem, SolverSpec(method=method, rtol=1e-8, max_iterations=2000), method)
    true = np.linalg.norm(system.rhs - system.matrix @ u.ravel()) / np.linalg.norm(system.rhs)
    assert result.converged and true <= 1e-8
    assert result.final_relative_residual == pytest.approx(true, rel=1e-3)


def test_cg_never_reports_convergence_its_true_residual_denies() -> None:
    """An operator whose products carry random errors of 1e-6 (a stand-in for rounding drift):
    the updated residual falls below rtol but b - Ax cannot, so CG restarts and then fails
    rather than reporting a converged solve."""
    from sevenfold.solvers.cg import MAX_RESTARTS, pcg

    system = assemble(build_problem(make_spec(
        grid={"cells": [6, 5, 4], "size": [1.0, 1.0, 1.0]}, source={"value": 1.0},
        boundary={"x_min": {"type": "dirichlet", "value": 0.0}})))
    A = system.matrix
    rng = np.random.default_rng(3)

    class Noisy:
        shape = A.shape

        def __matmul__(self, v):
            w = A @ v
            return w + 1e-6 * np.linalg.norm(w) * rng.standard_normal(w.shape) / np.sqrt(w.size)

    with pytest.raises(SolverError, match=f"after {MAX_RESTARTS} restarts"):
        pcg(Noisy(), system.rhs, lambda r: r / A.diagonal(), 1e-8, 500)
    exact = pcg(A, system.rhs, lambda r: r / A.diagonal(), 1e-10, 500)
    assert exact.converged and exact.final_relative_residual <= 1e-10


def test_amg_gives_the_same_answer_twice() -> None:
    """pyamg's setup draws random vectors; the seeded setup makes a job reproducible bit for bit,
    whatever the process did with numpy's random state before."""
    from sevenfold.solvers.amg import solve_amg

    system = assemble(build_problem(make_spec(
        grid={"cells": [14, 12, 10], "size": [1.0, 1.0, 1.0]}, source={"value": 1.0},
        material={"value": "1 + 50*(x > 0.5)"},
        boundary={"x_min": {"type": "dirichlet", "value": 0.0}})))
    first = solve_amg(system.matrix, system.rhs, 1e-10, 200).x
    np.random.seed(7)
    np.random.rand(1000)
    second = solve_amg(system.matrix, system.rhs, 1e-10, 200).x
    assert np.array_equal(first, second)
    state = np.random.get_state()
    solve_amg(system.matrix, system.rhs, 1e-10, 200)
    assert np.array_equal(np.random.get_state()[1], state[1])  # the caller's random state is left alone


def test_a_solve_that_stops_improving_fails_as_stagnated() -> None:
    """rtol 1e-30 lies below rounding: once the residual stops falling for the window, the
    job fails with its history kept, rather than running to max_iterations."""
    from sevenfold.solvers.cg import pcg

    system = assemble(build_problem(make_spec(
        grid={"cells": [6, 5, 4], "size": [1.0, 1.0, 1.0]}, source={"value": 1.0},
        boundary={"x_min": {"type": "dirichlet", "value": 0.0}})))
    A = system.matrix
    with pytest.raises(SolverError, match="stagnated: no progress over the last 8 iterations") as info:
        pcg(A, system.rhs, lambda r: r / A.diagonal(), 1e-30, 10_000, stagnation_window=8)
    history = info.value.history
    assert 8 < len(history) < 10_000
    assert min(history) < 1e-12  # it did converge as far as rounding allows first


def test_cg_iterates_are_the_textbook_recurrence() -> None:
    """pcg's solution after k iterations (stopped by max_iterations, by rtol, by stagnation)
    equals the preconditioned CG recurrence written out plainly (Saad, Iterative Methods for
    Sparse Linear Systems, 2nd ed., Algorithm 9.1; from memory), although pcg adds alpha p to
    x one pass late, together with the next direction: the late update must not be lost or
    counted twice on any way out."""
    from sevenfold.solvers.cg import pcg

    system = assemble(build_problem(make_spec(
        grid={"cells": [9, 7, 6], "size": [1.0, 1.0, 1.0]}, source={"value": 1.0},
        material={"value": "1 + 30*(x > 0.4)"},
        boundary={"x_min": {"type": "dirichlet", "value": 0.0}})))
    A, b = system.matrix, system.rhs
    d = A.diagonal()

    def textbook(k: int) -> np.ndarray:
        x, r = np.zeros_like(b), b.copy()
        z = r / d
        p, rz = z.copy(), r @ z
        for _ in range(k):
            q = A @ p
            alpha = rz / (p @ q)
            x, r = x + alpha * p, r - alpha * q
            z = r / d
            rz, beta = r @ z, (r @ z) / rz
            p = z + beta * p
        return x

    for k in (1, 2, 5, 11):
        with pytest.raises(SolverError) as info:
            pcg(A, b, lambda r: r / d, 1e-14, k)
        x = info.value.partial.x
        assert info.value.partial.iterations == k
        assert np.abs(x - textbook(k)).max() <= 1e-12 * np.abs(x).max()
    done = pcg(A, b, lambda r: r / d, 1e-6, 500)
    assert np.abs(done.x - textbook(done.iterations)).max() <= 1e-12 * np.abs(done.x).max()
    with pytest.raises(SolverError, match="stagnated") as info:
        pcg(A, b, lambda r: r / d, 1e-30, 10_000, stagnation_window=8)
    partial = info.value.partial
    assert np.abs(partial.x - textbook(partial.iterations)).max() <= 1e-9 * np.abs(partial.x).max()
