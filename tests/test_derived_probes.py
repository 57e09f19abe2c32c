"""Derived fields and probes: exact on linear solutions, second order on a smooth one, stored
with the solution's coordinates and units."""

from __future__ import annotations

import csv
import math
from pathlib import Path

import numpy as np
import pytest
from conftest import make_spec, solve_spec
from scipy.interpolate import RegularGridInterpolator

from sevenfold.derived import derived_fields, flux
from sevenfold.probes import interpolate
from sevenfold.runner import run_job

LINEAR = "1.5 + 2*x - 3*y + 0.5*z"
GRAD = np.array([2.0, -3.0, 0.5])
K = 4.0


def linear_spec(**extra):
    """k constant and Dirichlet data linear on every face: the finite-volume solution is the
    linear function itself at the cell centres (both the interior difference and the half-cell
    boundary difference are exact for linear functions; common practice)."""
    faces = {f: {"type": "dirichlet", "value": LINEAR} for f in ("x_min", "x_max", "y_min", "y_max", "z_min", "z_max")}
    return make_spec(
        physics="heat",
        grid={"cells": [5, 4, 6], "size": [1.0, 0.8, 1.2], "origin": [-0.3, 0.1, 2.0]},
        material={"value": K}, boundary=faces, **extra)


def exact_linear(x, y, z):
    return 1.5 + 2 * x - 3 * y + 0.5 * z


def test_flux_of_a_linear_solution_is_exact() -> None:
    u, problem = solve_spec(linear_spec())
    x, y, z = problem.grid.mesh()
    np.testing.assert_allclose(u, np.broadcast_to(exact_linear(x, y, z), u.shape), atol=1e-12)
    out = derived_fields(problem, u, "heat", ("heat_flux", "temperature_gradient_magnitude", "conductivity", "heat_source"))
    for c, g in zip("xyz", GRAD):
        np.testing.assert_allclose(out[f"heat_flux_{c}"], -K * g, rtol=1e-11, atol=1e-11)
    np.testing.assert_allclose(out["temperature_gradient_magnitude"], np.linalg.norm(GRAD), rtol=1e-11)
    assert np.all(out["conductivity"] == K) and np.all(out["heat_source"] == 0.0)


def test_layered_wall_keeps_each_layers_gradient() -> None:
    """Series wall: one heat flux q = dT / (L1/k1 + L2/k2); grad T = -q/k in each layer.

    Composite wall, Incropera & DeWitt, Fundamentals of Heat and Mass Transfer, chapter 3
    (from memory).
    """
    k1, k2 = 10.0, 0.5
    spec = make_spec(
        physics="heat", grid={"cells": [8, 2, 2], "size": [0.08, 0.02, 0.02]},
        material={"value": k1, "region": [{"box": {"min": [0.05, 0.0, 0.0], "max": [0.08, 0.02, 0.02]}, "value": k2}]},
        boundary={"x_min": {"type": "dirichlet", "value": 350.0}, "x_max": {"type": "dirichlet", "value": 300.0}},
    )
    u, problem = solve_spec(spec)
    q = 50.0 / (0.05 / k1 + 0.03 / k2)
    Fx, Fy, Fz = flux(problem, u)
    np.testing.assert_allclose(Fx, q, rtol=1e-11)
    np.testing.assert_allclose(Fy, 0.0, atol=1e-9 * q)
    out = derived_fields(problem, u, "heat", ("temperature_gradient_magnitude",))
    grad = out["temperature_gradient_magnitude"][:, 0, 0]
    np.testing.assert_allclose(grad[:5], q / k1, rtol=1e-11)
    np.testing.assert_allclose(grad[5:], q / k2, rtol=1e-11)


def test_electric_field_is_displacement_over_permittivity() -> None:
    spec = make_spec(
        physics="electrostatics", material={"value": "2 + x"}, source={"value": "1e-9*y"},
        boundary={"z_min": {"type": "dirichlet", "value": 0.0}, "z_max": {"type": "dirichlet", "value": 10.0}})
    u, problem = solve_spec(spec)
    out = derived_fields(problem, u, "electrostatics", ("electric_displacement", "electric_field", "electric_field_magnitude", "permittivity"))
    for c in "xyz":
        np.testing.assert_allclose(out[f"electric_field_{c}"] * out["permittivity"], out[f"electric_displacement_{c}"], rtol=1e-13)
    E = np.sqrt(sum(out[f"electric_field_{c}"] ** 2 for c in "xyz"))
    np.testing.assert_allclose(out["electric_field_magnitude"], E, rtol=1e-13)
    assert np.mean(out["electric_field_z"]) < 0  # E points from 10 V (top) down to 0 V


def test_flux_on_cell_centres_is_second_order() -> None:
    """u = sin(pi x) sin(pi y) sin(pi z), k = 1 + x: the centre flux converges at order 2.

    Manufactured solution, f = -div(k grad u) written by hand; observed order from the
    max-norm errors on three grids (common practice).
    """
    f = ("3*pi**2*(1 + x)*sin(pi*x)*sin(pi*y)*sin(pi*z) - pi*cos(pi*x)*sin(pi*y)*sin(pi*z)")
    faces = {n: {"type": "dirichlet", "value": 0.0} for n in ("x_min", "x_max", "y_min", "y_max", "z_min", "z_max")}
    errors, hs = [], []
    for n in (6, 12, 24):
        spec = make_spec(grid={"cells": [n, n, n], "size": [1.0, 1.0, 1.0]}, material={"value": "1 + x"},
                         source={"value": f}, boundary=faces)
        u, problem = solve_spec(spec)
        x, y, z = problem.grid.mesh()
        Fx, Fy, Fz = flux(problem, u)
        exact = -(1 + x) * np.pi * np.cos(np.pi * x) * np.sin(np.pi * y) * np.sin(np.pi * z)
        errors.append(float(np.abs(Fx - exact).max()))
        hs.append(1.0 / n)
    orders = [math.log(errors[i] / errors[i + 1]) / math.log(hs[i] / hs[i + 1]) for i in range(2)]
    assert orders[-1] == pytest.approx(2.0, abs=0.2), orders


def test_probes_are_exact_on_a_linear_solution() -> None:
    u, problem = solve_spec(linear_spec())
    rng = np.random.default_rng(7)
    lo = np.array(problem.grid.origin)
    hi = lo + np.array(problem.grid.extent)
    points = lo + rng.random((200, 3)) * (hi - lo)
    corners = np.array([[a, b, c] for a in (lo[0], hi[0]) for b in (lo[1], hi[1]) for c in (lo[2], hi[2])])
    points = np.vstack([points, corners])  # includes the half cells next to the faces
    values = interpolate(problem.grid, u, points)
    np.testing.assert_allclose(values, exact_linear(*points.T), atol=1e-11)


def test_probes_match_scipy_trilinear() -> None:
    """Against scipy's RegularGridInterpolator (linear, extrapolating outside the centres)."""
    spec = make_spec(grid={"cells": [5, 4, 3], "size": [1.0, 2.0, 0.6]})
    from sevenfold.problem import build_problem

    grid = build_problem(spec).grid
    u = np.random.default_rng(3).random(grid.shape)
    ref = RegularGridInterpolator([grid.centres(a) for a in range(3)], u, method="linear",
                                  bounds_error=False, fill_value=None)
    pts = np.random.default_rng(4).random((300, 3)) * np.array(grid.extent)
    np.testing.assert_allclose(interpolate(grid, u, pts), ref(pts), rtol=1e-12, atol=1e-12)


def test_thin_axis_probe_uses_the_single_layer() -> None:
    spec = make_spec(grid={"cells": [4, 3, 1], "size": [1.0, 1.0, 0.1]})
    from sevenfold.problem import build_problem

    grid = build_problem(spec).grid
    u = np.broadcast_to(np.arange(4.0)[:, None, None] + 10 * np.arange(3.0)[None, :, None], grid.shape)
    val = interpolate(grid, np.ascontiguousarray(u), np.array([[0.25, 0.5, 0.0]]))
    assert val[0] == pytest.approx(0.5 + 10.0, rel=1e-13)  # z is ignored: one layer


JOB = """
name = "probed"
physics = "heat"
[grid]
cells = [6, 5, 4]
size = [0.6, 0.5, 0.4]
origin = [0.0, 0.0, -0.2]
[material]
value = 3.0
[source]
value = 500.0
[boundary]
x_min = { type = "dirichlet", value = 300.0 }
x_max = { type = "robin", coefficient = 20.0, reference = 290.0 }
[solver]
method = "direct"
[output]
fields = ["heat_flux", "temperature_gradient_magnitude", "conductivity", "heat_source"]
[[probe]]
name = "tc1"
point = [0.31, 0.2, 0.0]
[[probe]]
name = "centreline"
line = { start = [0.0, 0.25, 0.0], end = [0.6, 0.25, 0.0], points = 13 }
"""


def test_result_opens_in_xarray_with_fields_probes_and_units(tmp_path: Path) -> None:
    xr = pytest.importorskip("xarray")
    job = tmp_path / "probed.toml"
    job.write_text(JOB)
    result = run_job(job)
    ds = xr.open_zarr(result.output)
    assert ds.temperature.dims == ("x", "y", "z")
    for name in ("heat_flux_x", "heat_flux_y", "heat_flux_z", "temperature_gradient_magnitude", "conductivity", "heat_source"):
        assert ds[name].dims == ("x", "y", "z")
        np.testing.assert_array_equal(ds[name].x, ds.temperature.x)
    assert ds.heat_flux_x.attrs["units"] == "W/m^2"
    assert ds.temperature_gradient_magnitude.attrs["units"] == "K/m"
    assert ds.temperature.attrs["units"] == "K" and ds.x.attrs["units"] == "m"
    np.testing.assert_allclose(ds.z.values, -0.2 + (np.arange(4) + 0.5) * 0.1)
    # probes: as interpolated from the stored solution, in the dataset and in the CSV
    u = ds.temperature.values
    grid = result.plan.spec.grid
    from sevenfold.grid import grid_from_spec

    g = grid_from_spec(grid)
    line = ds.probe_centreline
    assert line.dims == ("probe_centreline_distance",) and line.attrs["units"] == "K"
    np.testing.assert_allclose(line.probe_centreline_distance.values, np.linspace(0.0, 0.6, 13), atol=1e-15)
    pts = np.column_stack([np.linspace(0.0, 0.6, 13), np.full(13, 0.25), np.zeros(13)])
    np.testing.assert_allclose(line.values, interpolate(g, u, pts), rtol=1e-14)
    assert float(ds.probe_tc1.values[0]) == pytest.approx(interpolate(g, u, np.array([[0.31, 0.2, 0.0]]))[0], rel=1e-14)
    # the heat leaving through x_min and x_max is the heat generated (nothing else leaves)
    bal = ds.attrs["balance"]
    assert bal["faces"]["x_min"] + bal["faces"]["x_max"] == pytest.approx(500.0 * 0.6 * 0.5 * 0.4, rel=1e-10)
    with open(result.probes_csv, newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert result.probes_csv.name == "probed.probes.csv"
    assert len(rows) == 14 and rows[0]["probe"] == "tc1" and rows[1]["kind"] == "line"
    np.testing.assert_allclose([float(r["temperature (K)"]) for r in rows[1:]], line.values, rtol=1e-15)
    np.testing.assert_allclose([float(r["x_m"]) for r in rows[1:]], pts[:, 0], atol=1e-15)
