"""What existed before graded grids, on graded grids: probes, derived fields, balance,
capacitance, converge, results, report and VTK export."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from conftest import make_spec, solve_spec
from scipy.constants import epsilon_0

from sevenfold.capacitance import capacitance_matrix
from sevenfold.cli import main
from sevenfold.derived import derived_fields
from sevenfold.export import open_result, write_vtk
from sevenfold.probes import interpolate
from sevenfold.problem import build_problem
from sevenfold.runner import run_job
from sevenfold.spec import SolverSpec
from sevenfold.study import plan_levels

GRADED_X = [0.0, 0.01, 0.025, 0.045, 0.075, 0.12, 0.18, 0.26, 0.36, 0.5]  # widths grow 1.33..1.5


def linear_wall(**extra):
    """Held 400 K at x_min, 300 K at x_max, constant directional k: T is linear in x."""
    return make_spec(
        physics="heat",
        grid={"cells": ["edges", 3, "edges"], "size": ["edges", 0.2, "edges"],
              "edges": {"x": GRADED_X, "z": {"segments": [{"length": 0.1, "cells": 5, "growth": 0.7}]}}},
        material={"value": [20.0, 5.0, 1.0]},
        boundary={"x_min": {"type": "dirichlet", "value": 400.0}, "x_max": {"type": "dirichlet", "value": 300.0}},
        **extra,
    )


def test_linear_field_probes_flux_and_balance_on_graded_axes():
    """A linear temperature is exact in the scheme on any grid (common practice); probes
    interpolate on the true centres, so they reproduce it anywhere in the box; the derived
    heat flux is k dT/dx; the balance's heat flow is k A dT / L (Fourier's law)."""
    u, problem = solve_spec(linear_wall())
    x = problem.grid.centres(0)
    exact = 400.0 - 100.0 * x / 0.5
    assert np.allclose(u, exact[:, None, None], rtol=1e-12)
    pts = np.array([[0.0, 0.1, 0.05], [0.0131, 0.02, 0.001], [0.333, 0.17, 0.09], [0.5, 0.2, 0.1]])
    assert np.allclose(interpolate(problem.grid, u, pts), 400.0 - 200.0 * pts[:, 0], rtol=1e-12)
    fields = derived_fields(problem, u, "heat", ("heat_flux", "conductivity"))
    assert np.allclose(fields["heat_flux_x"], 20.0 * 200.0, rtol=1e-10)
    assert np.allclose(fields["heat_flux_z"], 0.0, atol=1e-8)
    assert np.allclose(fields["conductivity_z"], 1.0)
    from sevenfold.balance import compute_balance

    bal = compute_balance(problem, u)
    assert bal.faces["x_max"] == pytest.approx(20.0 * 0.2 * 0.1 * 200.0, rel=1e-10)


def test_result_carries_edges_and_exports_a_rectilinear_grid(tmp_path: Path):
    job = tmp_path / "wall.toml"
    job.write_text('''
name = "wall"
physics = "heat"
[grid]
cells = ["edges", 3, 4]
size = ["edges", 0.2, 0.1]
[grid.edges]
x = [0.0, 0.01, 0.025, 0.045, 0.075, 0.12, 0.18, 0.26, 0.36, 0.5]
[material]
value = [20.0, 5.0, 1.0]
[boundary]
x_min = { type = "dirichlet", value = 400.0 }
x_max = { type = "dirichlet", value = 300.0 }
[output]
fields = ["heat_flux"]
[[probe]]
name = "tc"
point = [0.2, 0.1, 0.05]
''')
    result = run_job(job, tmp_path / "wall.zarr")
    stored = open_result(result.output)
    assert np.allclose(stored.edges(0), [0.0, 0.01, 0.025, 0.045, 0.075, 0.12, 0.18, 0.26, 0.36, 0.5])
    assert np.allclose(stored.edges(2), np.linspace(0.0, 0.1, 5))
    assert result.probes[0].values[0] == pytest.approx(400.0 - 200.0 * 0.2, rel=1e-12)
    written = write_vtk(stored, tmp_path / "wall.vti")
    assert written.suffix == ".vtr"
    head = written.read_bytes()[:400].decode("latin-1")
    assert "RectilinearGrid" in head and 'WholeExtent="0 9 0 3 0 4"' in head
    assert main(["report", str(result.output), "--folder", str(tmp_path / "rep")]) == 0
    assert "graded along x" in (tmp_path / "rep" / "index.html").read_text()


def test_graded_plates_match_the_series_formula():
    """Plates at the bottom and top cells of a graded z axis, two dielectric layers between:
    C = eps0 A / sum(d_i / er_i) with d the distances between the held cells' centres and the
    layer interface (capacitors in series: Griffiths, Introduction to Electrodynamics,
    chapter 4, from memory); the scheme is exact for this 1D field."""
    z = np.array([0.0, 1e-4, 1.5e-4, 2.5e-4, 4.5e-4, 7e-4, 1e-3, 1.2e-3, 1.3e-3])
    er1, er2, area = 2.2, 7.5, 0.02 * 0.01
    spec = make_spec(
        physics="electrostatics",
        grid={"cells": [2, 2, "edges"], "size": [0.02, 0.01, "edges"], "edges": {"z": list(z)}},
        material={"value": er1, "region": [{"box": {"min": [0.0, 0.0, 4.5e-4], "max": [0.02, 0.01, 1.3e-3]},
                                           "value": er2}]},
        hold=[{"box": {"min": [0.0, 0.0, 0.0], "max": [0.02, 0.01, 1e-4]}, "value": 0.0, "name": "bottom"},
              {"box": {"min": [0.0, 0.0, 1.2e-3], "max": [0.02, 0.01, 1.3e-3]}, "value": 1.0, "name": "top"}],
    )
    res = capacitance_matrix(build_problem(spec), ["bottom", "top"], SolverSpec(method="direct"))
    d1, d2 = 4.5e-4 - 0.5e-4, 1.25e-3 - 4.5e-4
    c = epsilon_0 * area / (d1 / er1 + d2 / er2)
    assert res.matrix[1, 1] == pytest.approx(c, rel=1e-10)
    assert res.matrix[0, 1] == pytest.approx(-c, rel=1e-10)


def test_converge_splits_every_cell_and_keeps_the_grading(tmp_path: Path):
    spec = linear_wall()
    plans = plan_levels(spec, 3, 2.0)
    widths = [g.widths(0) for g, _, _ in plans]
    assert [g.cells for g, _, _ in plans] == [(9, 3, 5), (18, 6, 10), (36, 12, 20)]
    # each cell split into two equal halves: the coarse widths are pairwise sums
    assert np.allclose(widths[1].reshape(-1, 2).sum(axis=1), widths[0], rtol=1e-14)
    assert np.allclose(widths[1][0::2], widths[1][1::2], rtol=1e-14)
    from sevenfold.errors import JobError

    with pytest.raises(JobError, match="whole number"):
        plan_levels(spec, 3, 1.5)
