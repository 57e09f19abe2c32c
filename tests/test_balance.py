"""The balance report: closure per physics, consistency with the operator, closed-form flows."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import zarr
from conftest import make_spec, solve_spec

from sevenfold.balance import compute_balance
from sevenfold.cli import main
from sevenfold.operator import assemble, scatter
from sevenfold.problem import build_problem
from sevenfold.runner import run_job
from sevenfold.solvers.amg import solve_amg

# Every face type, a source region, two holds (one touching the x_max and z_min faces) and
# anisotropic spacing; the same geometry for each physics.
GEOMETRY = dict(
    grid={"cells": [10, 8, 6], "size": [1.0, 0.6, 0.9], "origin": [0.2, -0.1, 0.0]},
    material={"value": "2 + x + y*z", "region": [{"box": {"min": [0.2, -0.1, 0.0], "max": [0.6, 0.2, 0.4]},
                                                  "value": 0.3}]},
    source={"value": "5*sin(3*x) + 2", "region": [{"sphere": {"center": [0.7, 0.2, 0.5], "radius": 0.2},
                                                   "total": -3.0}]},
    boundary={
        "x_min": {"type": "dirichlet", "value": "1 + y"},
        "y_max": {"type": "robin", "coefficient": 4.0, "reference": -0.5},
        "z_max": {"type": "neumann", "flux": "0.7*x"},
    },
    hold=[
        {"box": {"min": [0.5, 0.1, 0.3], "max": [0.7, 0.3, 0.6]}, "value": 2.0, "name": "block"},
        {"box": {"min": [1.0, 0.3, 0.0], "max": [1.2, 0.5, 0.3]}, "value": -1.0},
    ],
)


def _toml(table: dict) -> str:
    """A small TOML writer for the job tables used here (tables, arrays, numbers, strings)."""
    import json

    def val(v):
        if isinstance(v, dict):
            return "{ " + ", ".join(f"{k} = {val(x)}" for k, x in v.items()) + " }"
        if isinstance(v, (list, tuple)):
            return "[" + ", ".join(val(x) for x in v) + "]"
        return json.dumps(v)

    lines = []
    for key, v in table.items():
        if not isinstance(v, (dict, list)):
            lines.append(f"{key} = {val(v)}")
    for key, v in table.items():
        if isinstance(v, dict):
            lines.append(f"[{key}]")
            for k, x in v.items():
                if isinstance(x, list) and x and isinstance(x[0], dict):
                    continue
                lines.append(f"{k} = {val(x)}")
            for k, x in v.items():
                if isinstance(x, list) and x and isinstance(x[0], dict):
                    for item in x:
                        lines.append(f"[[{key}.{k}]]")
                        lines += [f"{a} = {val(b)}" for a, b in item.items()]
        elif isinstance(v, list) and v and isinstance(v[0], dict):
            for item in v:
                lines.append(f"[[{key}]]")
                lines += [f"{a} = {val(b)}" for a, b in item.items()]
    return "\n".join(lines) + "\n"


def write_table(tmp_path: Path, table: dict, name: str = "job.toml") -> Path:
    path = tmp_path / name
    path.write_text(_toml(table))
    return path


@pytest.mark.parametrize("physics", ["heat", "electrostatics", "groundwater", "generic"])
def test_balance_closes_for_every_physics(tmp_path: Path, physics: str) -> None:
    """AMG-preconditioned CG to rtol 1e-10: the balance closes to 1e-6 of its largest term."""
    table = {"name": f"closure-{physics}", "physics": physics, **GEOMETRY,
             "solver": {"method": "amg", "rtol": 1e-10, "max_iterations": 300}}
    result = run_job(write_table(tmp_path, table))
    bal = result.balance
    assert bal is not None and bal.relative_imbalance <= 1e-6
    # every term takes part: nothing trivially zero that should not be
    assert bal.faces["x_min"] != 0 and bal.faces["y_max"] != 0 and bal.faces["z_max"] != 0
    assert all(h.cells > 0 and h.inflow != 0 for h in bal.holds)
    stored = zarr.open_group(str(result.output), mode="r").attrs["balance"]
    assert stored["relative_imbalance"] == bal.relative_imbalance
    assert [h["name"] for h in stored["holds"]] == ["block", "hold 1"]
    assert stored["units"] == {"heat": "W", "electrostatics": "C", "groundwater": "m^3/s", "generic": "1"}[physics]
    if physics == "electrostatics":
        assert all(h["charge"] == -h["inflow"] for h in stored["holds"])


@pytest.mark.parametrize("slab_cells", [None, 48])
def test_imbalance_is_the_volume_sum_of_the_residual(monkeypatch, slab_cells) -> None:
    """With a loose solve, the imbalance equals sum(b - A x) (rows are cell balances): the balance uses the operator's fluxes.

    ``slab_cells`` 48 reads the 10 x 8 x 6 grid one x plane at a time, so the holds' inflow is
    summed over slabs, and the slabs no hold touches are skipped.
    """
    if slab_cells is not None:
        import sevenfold.balance as balance

        monkeypatch.setattr(balance, "_SLAB_CELLS", slab_cells)
    spec = make_spec(physics="heat", **GEOMETRY)
    problem = build_problem(spec)
    system = assemble(problem)
    result = solve_amg(system.matrix, system.rhs, rtol=1e-3, max_iterations=100)
    u = scatter(system, problem, result.x)
    bal = compute_balance(problem, u)
    residual_sum = float((system.rhs - system.matrix @ result.x).sum())  # rows are cell balances
    assert abs(bal.imbalance) > 1e-8 * bal.scale  # loose enough to see
    assert bal.imbalance == pytest.approx(residual_sum, rel=1e-9, abs=1e-12 * bal.scale)


def test_composite_wall_with_film() -> None:
    """Two-layer wall with a convective face: q = (T_in - T_inf) / (L1/k1 + L2/k2 + 1/h) per unit area.

    Thermal resistances in series: Incropera & DeWitt, Fundamentals of Heat and Mass
    Transfer, chapter 3 (the composite wall), from memory. The finite-volume scheme is exact
    here (piecewise-linear temperature, layer interface on a cell face).
    """
    k1, k2, L1, L2, h_film = 15.0, 0.8, 0.06, 0.04, 25.0
    area = 0.3 * 0.2
    spec = make_spec(
        physics="heat",
        grid={"cells": [10, 3, 2], "size": [L1 + L2, 0.3, 0.2]},
        material={"value": k1, "region": [{"box": {"min": [L1, 0.0, 0.0], "max": [1.0, 1.0, 1.0]}, "value": k2}]},
        boundary={"x_min": {"type": "dirichlet", "value": 400.0},
                  "x_max": {"type": "robin", "coefficient": h_film, "reference": 300.0}},
    )
    u, problem = solve_spec(spec)
    bal = compute_balance(problem, u, "W")
    q = (400.0 - 300.0) / (L1 / k1 + L2 / k2 + 1.0 / h_film) * area
    assert bal.faces["x_max"] == pytest.approx(q, rel=1e-12)
    assert bal.faces["x_min"] == pytest.approx(-q, rel=1e-12)
    assert bal.relative_imbalance <= 1e-12


def test_well_takes_all_recharge() -> None:
    """Closed aquifer with recharge and a well: by continuity the well discharges all the recharge.

    Steady groundwater continuity (the water entering equals the water leaving), common practice.
    """
    recharge, sources = 2.0e-8, 1.0e-9
    spec = make_spec(
        physics="groundwater",
        grid={"cells": [12, 12, 4], "size": [120.0, 120.0, 10.0]},
        material={"value": 1e-4},
        source={"value": sources},
        boundary={"z_max": {"type": "neumann", "flux": recharge}},
        hold=[{"cylinder": {"center": [60.0, 60.0, 5.0], "radius": 8.0, "axis": "z", "length": 10.0},
               "value": 0.0, "name": "well"}],
    )
    u, problem = solve_spec(spec)
    bal = compute_balance(problem, u, "m^3/s")
    free_volume = problem.grid.volume(problem.hold_index < 0)
    expected = recharge * 120.0 * 120.0 + sources * free_volume
    well = bal.holds[0]
    assert well.inflow == pytest.approx(expected, rel=1e-10)
    assert bal.faces["z_max"] == pytest.approx(-recharge * 120.0 * 120.0, rel=1e-12)


def test_held_cells_source_is_not_counted() -> None:
    """A source over held cells is no part of the equations and not of the balance."""
    spec = make_spec(
        physics="heat", source={"value": 10.0},
        boundary={"x_min": {"type": "dirichlet", "value": 0.0}},
        hold=[{"box": {"min": [0.6, 0.0, 0.0], "max": [1.0, 1.0, 1.0]}, "value": 0.0}],
    )
    u, problem = solve_spec(spec)
    bal = compute_balance(problem, u)
    free = problem.hold_index < 0
    assert bal.source == pytest.approx(10.0 * np.count_nonzero(free) * np.prod(problem.grid.extent) / problem.grid.size, rel=1e-14)
    assert np.count_nonzero(~free) > 0
    assert bal.relative_imbalance <= 1e-12


def test_later_hold_owns_shared_cells() -> None:
    spec = make_spec(hold=[
        {"box": {"min": [0.0, 0.0, 0.0], "max": [0.6, 1.0, 1.0]}, "value": 1.0},
        {"box": {"min": [0.4, 0.0, 0.0], "max": [1.0, 1.0, 0.5]}, "value": 0.0},
    ])
    problem = build_problem(spec)
    x, _, z = problem.grid.mesh()
    overlap = np.broadcast_to((x >= 0.4) & (x <= 0.6) & (z <= 0.5), problem.grid.shape)
    assert np.all(problem.hold_index[overlap] == 1)
    assert np.all(problem.held_value[overlap] == 0.0)


def test_pure_neumann_pinned_cell_counts_as_free() -> None:
    """Insulated box with a balanced source and face fluxes: the pinned cell's equation is implied."""
    spec = make_spec(
        grid={"cells": [6, 5, 4], "size": [1.0, 1.0, 1.0]},
        source={"value": 3.0},
        boundary={"x_min": {"type": "neumann", "flux": -1.0}, "x_max": {"type": "neumann", "flux": -2.0}},
    )
    u, problem = solve_spec(spec)
    assert problem.gauge_mean_zero and problem.held[0, 0, 0] and problem.hold_index[0, 0, 0] == -1
    bal = compute_balance(problem, u)
    assert bal.holds == []
    assert bal.source == pytest.approx(3.0, rel=1e-12)
    assert bal.faces["x_min"] == pytest.approx(1.0, rel=1e-12)
    assert bal.faces["x_max"] == pytest.approx(2.0, rel=1e-12)
    assert bal.relative_imbalance <= 1e-12


def test_run_prints_the_balance(tmp_path: Path, capsys) -> None:
    table = {"name": "printed", "physics": "heat", **GEOMETRY, "solver": {"method": "direct"}}
    assert main(["run", "--no-progress", str(write_table(tmp_path, table))]) == 0
    text = capsys.readouterr().out
    for label in ("balance", "source (free cells)", "out through x_min", "into block (2)", "relative imbalance"):
        assert label in text


def test_a_masked_integral_slab_by_slab_is_the_whole_sum(monkeypatch) -> None:
    """Grid.integrate over a mask takes a few x-planes at a time (no grid-sized temporary):
    with slabs of one, three and all planes it equals sum(values * volume) over the mask,
    on a graded grid (common practice: the midpoint rule per cell); without a mask, over
    every cell, a constant included."""
    from sevenfold import grid as grid_module
    from sevenfold.grid import grid_from_spec

    spec = make_spec(grid={"cells": ["edges", 6, 5], "size": ["edges", 0.6, 0.5],
                           "edges": {"x": [0.0, 0.01, 0.03, 0.07, 0.15, 0.3, 0.6, 1.0]}})
    grid = grid_from_spec(spec.grid)
    rng = np.random.default_rng(4)
    values, mask = rng.standard_normal(grid.shape), rng.random(grid.shape) < 0.4
    expected = float((values * grid.cell_volumes())[mask].sum())
    for cells in (30, 90, 10**6):  # one plane (30 cells), three, all
        monkeypatch.setattr(grid_module, "SLAB_CELLS", cells)
        assert grid.integrate(values, mask) == pytest.approx(expected, rel=1e-13)
        assert grid.volume(mask) == pytest.approx(float(grid.cell_volumes()[mask].sum()), rel=1e-13)
    whole = float((values * grid.cell_volumes()).sum())  # and without a mask
    assert grid.integrate(values) == pytest.approx(whole, rel=1e-13)
    assert grid.integrate(np.full((), 2.0)) == pytest.approx(2.0 * 1.0 * 0.6 * 0.5, rel=1e-14)
