"""Graded grids and directional coefficients, checked against closed forms and reference loops."""

from __future__ import annotations

import math

import numpy as np
import pytest
from conftest import eliminate, make_spec, make_table, reference_system, solve_spec

from sevenfold.balance import compute_balance
from sevenfold.grid import grid_from_spec
from sevenfold.operator import assemble
from sevenfold.problem import build_problem
from sevenfold.solvers.gmg import solve_gmg
from sevenfold.spec import parse_job

D = lambda v: {"type": "dirichlet", "value": v}  # noqa: E731
N = lambda q: {"type": "neumann", "flux": q}  # noqa: E731
R = lambda c, r: {"type": "robin", "coefficient": c, "reference": r}  # noqa: E731


def geometric(n: int, length: float, growth: float, start: float = 0.0) -> list[float]:
    """Edges of n cells whose widths grow by ``growth`` (computed here, not by sevenfold)."""
    w = growth ** np.arange(n)
    return list(start + np.concatenate([[0.0], np.cumsum(w / w.sum() * length)]))


# ---------------------------------------------------------------- grids from the job file
def test_segments_give_the_lengths_counts_and_widths_asked():
    spec = make_spec(grid={"cells": [2, 2, "edges"], "size": [1.0, 1.0, "edges"], "edges": {"z": {
        "start": -1e-3, "segments": [
            {"length": 1.6e-3, "cells": 8, "last": 0.1e-3},
            {"length": 0.2e-3, "cells": 4, "growth": 1.0},
            {"length": 5e-3, "cells": 14, "first": 0.06e-3},
            {"length": 3e-3, "cells": 5, "last": 0.4e-3},
        ]}}})
    g = grid_from_spec(spec.grid)
    w = g.widths(2)
    assert g.cells == (2, 2, 31)
    assert g.edges[2][0] == -1e-3 and g.edges[2][-1] == pytest.approx(-1e-3 + 9.8e-3, rel=1e-14)
    assert w[:8].sum() == pytest.approx(1.6e-3, rel=1e-12) and w[7] == pytest.approx(0.1e-3, rel=1e-9)
    assert np.allclose(w[8:12], 0.05e-3)
    assert w[12] == pytest.approx(0.06e-3, rel=1e-9) and w[12:26].sum() == pytest.approx(5e-3, rel=1e-12)
    ratios = w[13:26] / w[12:25]
    assert np.allclose(ratios, ratios[0], rtol=1e-9) and ratios[0] > 1  # geometric growth
    assert w[-1] == pytest.approx(0.4e-3, rel=1e-9) and w[26:].sum() == pytest.approx(3e-3, rel=1e-12)
    assert g.is_uniform(0) and not g.is_uniform(2)


def test_explicit_edges_for_all_axes():
    edges = {"x": [0.0, 0.1, 0.3, 0.6], "y": [0.0, 1.0], "z": [-1.0, -0.5, 0.0]}
    g = grid_from_spec(make_spec(grid={"edges": edges}).grid)
    assert g.cells == (3, 1, 2) and g.origin == (0.0, 0.0, -1.0)
    assert np.allclose(g.centres(0), [0.05, 0.2, 0.45])
    assert g.cell_volumes().sum() == pytest.approx(0.6 * 1.0 * 1.0, rel=1e-14)


# ---------------------------------------------------------------- the operator
def test_graded_anisotropic_operator_equals_cell_loop():
    """Every boundary type, holds, a region with its own directional k, an expression k, on
    graded x and z axes: the assembled system equals conftest's independent loop."""
    table = make_table(
        grid={"cells": ["edges", 3, "edges"], "size": ["edges", 0.6, "edges"],
              "edges": {"x": geometric(5, 1.0, 1.5), "z": geometric(4, 2.0, 0.6, start=-1.0)}},
        material={"value": ["1 + x", 0.5, "2 + z*z"],
                  "region": [{"box": {"min": [0.0, 0.0, -1.0], "max": [0.3, 0.3, 0.0]}, "value": [40.0, 3.0, 0.2]}]},
        source={"value": "1 + y", "region": [{"box": {"min": [0.5, 0.0, 0.0], "max": [1.0, 0.6, 1.0]}, "total": 2.0}]},
        boundary={"x_min": D(1.0), "x_max": R(3.0, "2 - z"), "y_min": N(0.5), "y_max": D("x"),
                  "z_min": R(0.7, -3.0), "z_max": N("x*y")},
        hold=[{"box": {"min": [0.6, 0.25, 0.0], "max": [0.9, 0.45, 0.9]}, "value": 2.5}],
    )
    problem = build_problem(parse_job(table, "test"))
    system = assemble(problem)
    A_full, b_full, held, held_value = reference_system(table)
    assert held.any() and (problem.held == held).all()
    A_ref, b_ref = eliminate(A_full, b_full, held, held_value)
    scale = abs(A_ref).max()
    assert abs(system.matrix - A_ref).max() <= 1e-13 * scale
    assert np.allclose(system.rhs, b_ref, rtol=1e-13, atol=1e-13 * np.abs(b_ref).max())
    assert abs(system.matrix - system.matrix.T).max() == 0.0  # symmetric on graded cells


# ---------------------------------------------------------------- closed forms
def test_composite_wall_across_a_graded_axis():
    """Interface layer, metal layer and board between two held temperatures: the temperature
    is piecewise linear and the heat flow is dT / sum(L / (k A)) (series thermal resistances:
    Incropera and DeWitt, the one-dimensional composite wall, from memory). The layer
    interfaces lie on cell edges, so the cell-centred scheme is exact to rounding."""
    layers = [(0.2e-3, 3.0, 4), (2.0e-3, 390.0, 10), (1.6e-3, 0.35, 12)]  # length, k, cells
    t_hot, t_cold, area = 360.0, 300.0, 0.02 * 0.03
    segments, regions, z = [], [], 0.0
    for length, k, n in layers:
        segments.append({"length": length, "cells": n})
        regions.append({"box": {"min": [0.0, 0.0, z], "max": [0.02, 0.03, z + length]}, "value": k})
        z += length
    # grade inside the metal layer so widths change smoothly across the interfaces
    segments[1] = {"length": 2.0e-3, "cells": 10, "first": 0.08e-3}
    spec = make_spec(
        physics="heat",
        grid={"cells": [2, 3, "edges"], "size": [0.02, 0.03, "edges"], "edges": {"z": {"segments": segments}}},
        material={"value": 1.0, "region": regions},
        boundary={"z_min": D(t_hot), "z_max": D(t_cold)},
    )
    u, problem = solve_spec(spec)
    resistances = [length / (k * area) for length, k, _ in layers]
    q = (t_hot - t_cold) / sum(resistances)
    # closed form at every cell centre: walk the layers
    zc = problem.grid.centres(2)
    exact = np.empty_like(zc)
    z0, t0 = 0.0, t_hot
    for (length, k, _), r in zip(layers, resistances):
        inside = (zc >= z0) & (zc <= z0 + length)
        exact[inside] = t0 - q * (zc[inside] - z0) / (k * area)
        z0, t0 = z0 + length, t0 - q * r
    assert np.allclose(u, exact[None, None, :], rtol=1e-9, atol=0)
    bal = compute_balance(problem, u)
    assert -bal.faces["z_min"] == pytest.approx(q, rel=1e-9)
    assert bal.faces["z_max"] == pytest.approx(q, rel=1e-9)


MMS_U = "sin(pi*x)*sin(pi*y)*exp(z)"
MMS_K = ["1 + x", "0.1*(1 + y)", "10*(1 + z*z)"]
# f = -div(K grad u) for u and K above (derived by hand; each term is d/dx_i (k_i du/dx_i))
MMS_F = ("-(pi*cos(pi*x)*sin(pi*y)*exp(z) - (1 + x)*pi**2*sin(pi*x)*sin(pi*y)*exp(z)"
         " + 0.1*pi*sin(pi*x)*cos(pi*y)*exp(z) - 0.1*(1 + y)*pi**2*sin(pi*x)*sin(pi*y)*exp(z)"
         " + 20*z*sin(pi*x)*sin(pi*y)*exp(z) + 10*(1 + z*z)*sin(pi*x)*sin(pi*y)*exp(z))")


def _split(edges: list[float], parts: int) -> list[float]:
    e = np.asarray(edges)
    t = np.arange(parts) / parts
    return list(np.append((e[:-1, None] + np.diff(e)[:, None] * t).ravel(), e[-1]))


def test_manufactured_anisotropic_on_graded_grid_is_second_order():
    """Directional, varying k on a grid graded geometrically on every axis (growth 1.25, 0.8
    and 1.3 per cell), each level splitting every cell in two: the observed order of the
    cell-centre error is at least 1.8 in the L2 and max norms (manufactured solution;
    the order itself is the check, common practice)."""
    base = {"x": geometric(8, 1.0, 1.25), "y": geometric(8, 1.0, 0.8), "z": geometric(8, 1.0, 1.3)}
    errors = []
    for parts in (1, 2, 4):
        edges = {a: _split(e, parts) for a, e in base.items()}
        spec = make_spec(grid={"edges": edges}, material={"expression": MMS_K}, source={"expression": MMS_F},
                         boundary={f: D(MMS_U) for f in ("x_min", "x_max", "y_min", "y_max", "z_min", "z_max")})
        u, problem = solve_spec(spec)
        x, y, z = problem.grid.mesh()
        err = u - np.sin(np.pi * x) * np.sin(np.pi * y) * np.exp(z)
        vol = problem.grid.cell_volumes()
        errors.append((math.sqrt(float((err**2 * vol).sum())), float(np.abs(err).max())))
    for norm in (0, 1):
        orders = [math.log2(errors[i][norm] / errors[i + 1][norm]) for i in range(2)]
        assert min(orders) >= 1.8, (norm, orders, errors)


def test_directional_coefficient_equals_isotropic_on_stretched_coordinates():
    """-div(K grad u) = f with K = diag(kx, ky, kz) is the isotropic problem on coordinates
    x' = x sqrt(k / kx) etc. (common practice). On matching grids the two discrete solutions
    agree to rounding: every row of one is the other's divided by a constant."""
    kx, ky, kz = 9.0, 1.0, 0.25
    ex, ey, ez = geometric(6, 3.0, 1.2), geometric(5, 1.0, 1.0), geometric(7, 0.5, 0.85)
    hold = {"box": {"min": [1.0, 0.3, 0.1], "max": [1.8, 0.7, 0.3]}, "value": 4.0}
    boundary = {"x_min": D(1.0), "x_max": D(0.0), "y_min": D(2.0)}
    aniso = make_spec(grid={"edges": {"x": ex, "y": ey, "z": ez}}, material={"value": [kx, ky, kz]},
                      source={"value": 3.0}, boundary=boundary, hold=[hold])
    s = [1.0 / math.sqrt(k) for k in (kx, ky, kz)]
    box = {"min": [hold["box"]["min"][a] * s[a] for a in range(3)],
           "max": [hold["box"]["max"][a] * s[a] for a in range(3)]}
    iso = make_spec(grid={"edges": {"x": list(np.multiply(ex, s[0])), "y": list(np.multiply(ey, s[1])),
                                    "z": list(np.multiply(ez, s[2]))}},
                    material={"value": 1.0}, source={"value": 3.0}, boundary=boundary,
                    hold=[{"box": box, "value": 4.0}])
    u1, p1 = solve_spec(aniso)
    u2, p2 = solve_spec(iso)
    assert (p1.held == p2.held).all() and p1.held.any()
    assert np.allclose(u1, u2, rtol=1e-11, atol=1e-11 * np.abs(u1).max())


# ---------------------------------------------------------------- multigrid on graded grids
@pytest.mark.parametrize("case", ["robin-neumann", "dirichlet-holds"])
def test_gmg_agrees_with_direct_on_graded_anisotropic(case):
    boundary = ({"x_min": R(5.0, 1.0), "z_max": N(0.3), "y_min": D("x")} if case == "robin-neumann"
                else {f: D(0.5) for f in ("x_min", "x_max", "z_min", "z_max")})
    hold = [] if case == "robin-neumann" else [{"box": {"min": [0.2, 0.2, 0.0], "max": [0.4, 0.5, 0.01]}, "value": 3.0}]
    spec = make_spec(
        grid={"cells": ["edges", 12, "edges"], "size": ["edges", 1.0, "edges"],
              "edges": {"x": geometric(16, 1.0, 1.2),
                        "z": {"segments": [{"length": 0.01, "cells": 6, "last": 0.0005},
                                           {"length": 0.002, "cells": 4},
                                           {"length": 0.05, "cells": 10, "first": 0.0008}]}}},
        material={"value": [100.0, 100.0, 1.0],
                  "region": [{"box": {"min": [0.0, 0.0, 0.01], "max": [1.0, 1.0, 0.012]}, "value": 0.01}]},
        source={"value": "1 + x*y"}, boundary=boundary, hold=hold,
    )
    u_ref, problem = solve_spec(spec)
    u, result = solve_gmg(problem, rtol=1e-10, max_iterations=200)
    from sevenfold.problem import complete_field

    u = complete_field(problem, u)
    assert result.converged
    assert np.allclose(u, u_ref, rtol=1e-7, atol=1e-7 * np.abs(u_ref).max())
