"""Wells: the Thiem solution on a graded grid, Peaceman's well-bore head, rate splitting by
transmissivity, head-specified wells, and the balance."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
from conftest import make_spec, make_table

from sevenfold.balance import compute_balance
from sevenfold.errors import JobError
from sevenfold.operator import assemble, face_arrays
from sevenfold.problem import build_problem
from sevenfold.solvers import method_for, solve_problem
from sevenfold.spec import SolverSpec, parse_job
from sevenfold.wells import peaceman_radius

K, B = 1.0e-4, 10.0  # hydraulic conductivity (m/s) and aquifer thickness (m)
T = K * B  # transmissivity (m^2/s)
Q, RW = -0.01, 0.1  # rate into the aquifer (m^3/s, extraction) and bore radius (m)
H0, R = 20.0, 500.0  # head held on the circle r >= R (m)
X = 560.0  # the box is [-X, X]^2


def graded_edges(first: float = 1.0, uniform: int = 4, growth: float = 1.2, widest: float = 10.0) -> list[float]:
    """Edges symmetric about 0 with the well cell of width ``first`` centred on 0, ``uniform``
    more cells of that width on each side (Peaceman's radius assumes equal neighbours), then
    widths growing by ``growth`` up to ``widest`` until X."""
    e, w = [first / 2], first
    for _ in range(uniform):
        e.append(e[-1] + w)
    while e[-1] < X:
        w = min(w * growth, widest)
        e.append(e[-1] + w)
    half = np.array(e)
    return np.concatenate([-half[::-1], half]).tolist()


def radial_problem(well: dict, solver: str = "gmg"):
    """A confined aquifer one cell (B) thick, insulated top and bottom, a fully penetrating well
    at the origin, and the head held at H0 on every cell whose centre lies at r >= R (a circle
    of held head, approximated by whole cells). The job holds one corner box at H0 so that it is
    not pure Neumann; the circle is then held by replacing the problem's held cells."""
    e = graded_edges()
    spec = make_spec(physics="groundwater", grid={"edges": {"x": e, "y": e, "z": [0.0, B]}},
                     material={"value": K},
                     hold=[{"box": {"min": [-X, -X, 0], "max": [-X + 30, -X + 30, B]}, "value": H0, "name": "circle"}],
                     well=[{"name": "w", "x": 0.0, "y": 0.0, "top": B, "bottom": 0.0, "radius": RW, **well}],
                     solver={"method": solver, "rtol": 1e-12})
    p = build_problem(spec)
    x, y, _ = p.grid.mesh()
    ring = np.broadcast_to(x**2 + y**2 >= R**2, p.grid.shape)
    p = dataclasses.replace(p, held=p.held | ring, held_value=np.where(ring, H0, p.held_value),
                            hold_index=np.where(ring, 0, p.hold_index).astype(np.int32))
    u, _ = solve_problem(p, spec.solver, solver)
    return p, u


def thiem(r, q: float = Q):
    """Thiem (1906) for steady radial flow to a fully penetrating well in a confined aquifer
    (any groundwater hydraulics text, e.g. Bear, Hydraulics of Groundwater, from memory):
    h(r) = h(R) + q / (2 pi T) ln(R / r), q the rate INTO the aquifer (negative pumping)."""
    return H0 + q / (2.0 * math.pi * T) * np.log(R / np.asarray(r))


def test_pumped_well_matches_thiem_on_a_graded_grid() -> None:
    """Heads between 5 m and 400 m from the well within 0.4 % of the drawdown at the bore
    (13.56 m; measured 0.26 %: the whole-cell circle at R, 10 m cells, and the grading); the
    head difference between observation wells at about 18 m and 197 m (Thiem's own use: the
    circle's offset cancels) within 0.4 % of Thiem's difference (measured 0.20 %); Peaceman's
    well-bore head within 0.4 % of the drawdown of Thiem's head at the bore radius (measured
    0.20 %, 0.027 m low). The grid is graded: 1 m cells at the well (four more each side)
    growing by 1.2 to 10 m."""
    p, u = radial_problem({"rate": Q})
    grid = p.grid
    assert not grid.is_uniform(0) and grid.max_neighbour_ratio(0) <= 1.25
    x, y, _ = grid.mesh()
    r = np.broadcast_to(np.sqrt(x**2 + y**2), grid.shape)
    drawdown = abs(float(thiem(RW)) - H0)
    near = (r >= 5.0) & (r <= 400.0)
    assert np.abs(u[near] - thiem(r[near])).max() <= 4e-3 * drawdown
    # two observation wells on the x axis, at the cell centres nearest 20 m and 200 m
    xc = grid.centres(0)
    j = int(np.argmin(np.abs(grid.centres(1))))
    i1, i2 = int(np.argmin(np.abs(xc - 20.0))), int(np.argmin(np.abs(xc - 200.0)))
    exact = float(thiem(abs(xc[i1])) - thiem(abs(xc[i2])))
    assert u[i1, j, 0] - u[i2, j, 0] == pytest.approx(exact, rel=4e-3)
    bal = compute_balance(p, u, "m^3/s", names=["circle"])
    well = bal.wells[0]
    assert well.given == "rate" and well.rate == pytest.approx(Q, rel=1e-12)
    assert abs(well.head - float(thiem(RW))) <= 4e-3 * drawdown
    assert well.head < u[p.wells[0].cells].min()  # the bore is below its cell when pumping
    assert bal.holds[0].inflow == pytest.approx(Q, rel=1e-8)  # the circle supplies what is pumped
    assert bal.relative_imbalance < 1e-9


def test_head_well_gives_the_thiem_rate_and_reciprocates_the_rate_well() -> None:
    """The bore held at Thiem's head at r_w draws Thiem's rate q = 2 pi T (h_w - H0) / ln(R/r_w)
    within 0.4 % (the same tolerance, as a rate); and held at the bore head the rate well
    reported, it draws that rate to 1e-8 (the same equations)."""
    p, u = radial_problem({"rate": Q})
    head = compute_balance(p, u, "m^3/s", names=["circle"]).wells[0].head
    p2, u2 = radial_problem({"head": head})
    w2 = compute_balance(p2, u2, "m^3/s", names=["circle"]).wells[0]
    assert w2.given == "head" and w2.head == head
    assert w2.rate == pytest.approx(Q, rel=1e-8)
    np.testing.assert_allclose(u2, u, atol=1e-8 * abs(head - H0))
    p3, u3 = radial_problem({"head": float(thiem(RW))})
    rate = compute_balance(p3, u3, "m^3/s", names=["circle"]).wells[0].rate
    assert rate == pytest.approx(Q, rel=4e-3)


@pytest.mark.parametrize("solver", ["direct", "amg"])
def test_every_solver_agrees_on_a_head_well(solver: str) -> None:
    """The head well enters the diagonal: direct, amg (on the CSR matrix) and gmg (matrix-free)
    give the same field to the solver tolerance."""
    _, u = radial_problem({"head": 12.0}, "gmg")
    _, v = radial_problem({"head": 12.0}, solver)
    np.testing.assert_allclose(v, u, atol=1e-8 * 8.0)


def test_peaceman_radius_reduces_to_the_square_cell_value() -> None:
    """Peaceman (1978): r_e = 0.198 dx for square cells and isotropic k; his 1983 form gives
    0.14 sqrt(dx^2 + dy^2) for rectangular cells and is unchanged by stretching the cell and
    k together, e.g. kx = 4 ky with dx = 2 dy is the isotropic square in stretched coordinates
    (from memory)."""
    one = np.array([1.0])
    assert peaceman_radius(one, one, 3.0, 3.0)[0] == pytest.approx(0.28 / math.sqrt(2) * 3.0, rel=1e-14)
    assert peaceman_radius(one, one, 3.0, 3.0)[0] == pytest.approx(0.198 * 3.0, rel=1e-3)
    assert peaceman_radius(one, one, 3.0, 4.0)[0] == pytest.approx(0.14 * 5.0, rel=1e-14)
    # stretched: x' = x (k/kx)^(1/2), y' = y (k/ky)^(1/2) with k = sqrt(kx ky) makes both dx' = dy'
    kx, ky, dx, dy = 4.0, 1.0, 2.0, 1.0
    square = dx * (math.sqrt(kx * ky) / kx) ** 0.5
    assert square == pytest.approx(dy * (math.sqrt(kx * ky) / ky) ** 0.5)
    # ... and r_e there maps back as the geometric mean of the two stretches (Peaceman 1983)
    stretch = 0.5 * ((ky / kx) ** 0.25 + (kx / ky) ** 0.25)
    expected = 0.28 / math.sqrt(2) * square / stretch
    assert peaceman_radius(np.array([kx]), np.array([ky]), dx, dy)[0] == pytest.approx(expected, rel=1e-12)


def layered(**well):
    """Three layers (kx = ky = 1e-4, 4e-4, 2e-4 m/s; 2 m, 4 m, 4 m thick cells) and a well
    screened from z = 1 to 8 m: 1 m of the first cell, all 4 m of the second, 2 m of the third."""
    return parse_job(layered_table(**well), "test")


def layered_table(**well):
    return make_table(physics="groundwater",
                     grid={"edges": {"x": [0, 10, 20, 30], "y": [0, 10, 20, 30], "z": [0, 2, 6, 10]}},
                     material={"value": 1e-4, "region": [
                         {"box": {"min": [0, 0, 2], "max": [30, 30, 6]}, "value": 4e-4},
                         {"box": {"min": [0, 0, 6], "max": [30, 30, 10]}, "value": [2e-4, 2e-4, 1e-5]}]},
                     boundary={"x_min": {"type": "dirichlet", "value": 5.0}},
                     well=[{"name": "p1", "x": 15.0, "y": 15.0, "top": 8.0, "bottom": 1.0, "radius": 0.1, **well}],
                     solver={"method": "direct"})


def test_rate_is_split_by_transmissivity_over_the_screen() -> None:
    """Shares proportional to sqrt(kx ky) times the screened length: 1e-4 x 1, 4e-4 x 4,
    2e-4 x 2 (the brief's rule; common practice), added to the cells' balances."""
    problem = build_problem(layered(rate=-0.003))
    well = problem.wells[0]
    assert (well.i, well.j) == (1, 1) and well.k.tolist() == [0, 1, 2]
    np.testing.assert_allclose(well.length, [1.0, 4.0, 2.0], rtol=1e-14)
    weights = np.array([1e-4 * 1, 4e-4 * 4, 2e-4 * 2])
    np.testing.assert_allclose(well.share, -0.003 * weights / weights.sum(), rtol=1e-14)
    without = build_problem(layered(rate=-0.003).model_copy(update={"well": ()}))
    added = face_arrays(problem).b - face_arrays(without).b
    assert added.sum() == pytest.approx(-0.003, rel=1e-14)
    np.testing.assert_allclose(added[1, 1, :], well.share, rtol=1e-14)
    u, _ = solve_problem(problem, SolverSpec(method="direct"), "direct")
    bal = compute_balance(problem, u, "m^3/s")
    assert bal.wells[0].rate == pytest.approx(-0.003, rel=1e-14)
    assert bal.faces["x_min"] == pytest.approx(-0.003, rel=1e-9)  # outflow -Q: the river supplies the well
    assert bal.relative_imbalance < 1e-10


def test_head_well_keeps_the_matrix_symmetric_and_adds_its_index() -> None:
    problem = build_problem(layered(head=3.0))
    without = build_problem(layered(head=3.0).model_copy(update={"well": ()}))
    A, A0 = assemble(problem).matrix, assemble(without).matrix
    assert abs(A - A.T).max() == 0.0
    diff = (A - A0).toarray()
    w = problem.wells[0]
    expected = 2 * math.pi * w.kh * w.length / np.log(w.r_e / 0.1)
    np.testing.assert_allclose(np.diag(diff)[np.flatnonzero(diff.any(axis=0))], expected, rtol=1e-14)
    assert method_for(SolverSpec(method="auto"), problem) == "gmg"  # fft refuses wells


def test_pure_neumann_job_with_wells_balances_the_rates() -> None:
    """No held head anywhere: an injection and an extraction of equal rate balance, so the job is
    solved in the mean-zero gauge; unequal rates are refused as unbalanced."""
    wells = [{"name": "in", "x": 5.0, "y": 15.0, "top": 10.0, "bottom": 0.0, "radius": 0.1, "rate": 0.002},
             {"name": "out", "x": 25.0, "y": 15.0, "top": 10.0, "bottom": 0.0, "radius": 0.1, "rate": -0.002}]
    spec = make_spec(physics="groundwater", grid={"cells": [3, 3, 1], "size": [30.0, 30.0, 10.0]},
                     material={"value": 1e-4}, well=wells)
    problem = build_problem(spec)
    assert problem.gauge_mean_zero
    u, _ = solve_problem(problem, spec.solver, "direct")
    assert u[0, 1, 0] > u[2, 1, 0]
    wells[1]["rate"] = -0.001
    with pytest.raises(JobError, match="unbalanced"):
        build_problem(make_spec(physics="groundwater", grid={"cells": [3, 3, 1], "size": [30.0, 30.0, 10.0]},
                                material={"value": 1e-4}, well=wells))


@pytest.mark.parametrize("well, message", [
    ({"x": 15.0, "radius": 5.0}, "not smaller than Peaceman's equivalent radius"),
    ({"x": 31.0}, "outside the box"),
    ({"top": 12.0}, "outside the box"),
])
def test_refusals(well: dict, message: str) -> None:
    with pytest.raises(JobError, match=message):
        build_problem(layered(rate=-1e-3, **well))


def test_anisotropic_aquifer_matches_thiem_in_stretched_coordinates() -> None:
    """kx = 4 ky: stretching x' = x (k/kx)^(1/2), y' = y (k/ky)^(1/2), k = sqrt(kx ky), makes the
    aquifer isotropic with conductivity k, so Thiem holds in r' with the held circle r' >= R'
    (an ellipse on the grid) and the bore becomes an ellipse of semi-axes r_w (k/kx)^(1/2) and
    r_w (k/ky)^(1/2), whose equivalent circle (its conformal radius, the mean of the
    semi-axes) is r_w' = r_w ((ky/kx)^(1/4) + (kx/ky)^(1/4)) / 2 (Bear, Hydraulics of
    Groundwater, anisotropic media; the ellipse's conformal radius: from memory). Cells are
    dx = 2 dy, square in the stretched plane. Heads for r' in [7, 560] m within 0.4 % of the
    bore drawdown (7.0 m; measured 0.24 %); Peaceman's anisotropic bore head within 0.4 %
    (measured 0.19 %; the isotropic rectangular-cell radius 0.14 sqrt(dx^2 + dy^2) would be
    1.9 % off, so this checks the anisotropic form)."""
    kx, ky = 4e-4, 1e-4
    k = math.sqrt(kx * ky)
    r_far = 700.0
    e = np.array(graded_edges())
    spec = make_spec(physics="groundwater", grid={"edges": {"x": (2 * e).tolist(), "y": e.tolist(), "z": [0.0, B]}},
                     material={"value": [kx, ky, 1e-5]},
                     hold=[{"box": {"min": [-2 * X, -X, 0], "max": [-2 * X + 60, -X + 30, B]}, "value": H0}],
                     well=[{"name": "w", "x": 0.0, "y": 0.0, "top": B, "bottom": 0.0, "radius": RW, "rate": Q}],
                     solver={"method": "gmg", "rtol": 1e-12})
    p = build_problem(spec)
    x, y, _ = p.grid.mesh()
    r = np.broadcast_to(np.sqrt(x**2 * k / kx + y**2 * k / ky), p.grid.shape)  # r' on the cell centres
    ring = r >= r_far
    p = dataclasses.replace(p, held=p.held | ring, held_value=np.where(ring, H0, p.held_value),
                            hold_index=np.where(ring, 0, p.hold_index).astype(np.int32))
    u, _ = solve_problem(p, spec.solver, "gmg")

    def exact(rr):
        return H0 + Q / (2.0 * math.pi * k * B) * np.log(r_far / rr)

    r_bore = RW / 2.0 * ((ky / kx) ** 0.25 + (kx / ky) ** 0.25)
    drawdown = abs(float(exact(r_bore)) - H0)
    near = (r >= 7.0) & (r <= 560.0)
    assert np.abs(u[near] - exact(r[near])).max() <= 4e-3 * drawdown
    head = compute_balance(p, u, "m^3/s").wells[0].head
    assert abs(head - float(exact(r_bore))) <= 4e-3 * drawdown
