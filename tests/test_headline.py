"""Headline numbers against closed forms; shape volumes; the geometry-change warning."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
import zarr
from conftest import make_spec, solve_spec

from sevenfold.balance import compute_balance
from sevenfold.cautions import job_warnings
from sevenfold.cli import main
from sevenfold.grid import Grid
from sevenfold.headline import compute_headline, near_electrode_edge, stored_energy
from sevenfold.physics import EPSILON_0
from sevenfold.runner import run_job
from sevenfold.spec import Box, Cylinder, Sphere
from sevenfold.volumes import selection, true_volume


def _headline(spec):
    u, problem = solve_spec(spec)
    names = [h.name for h in spec.hold]
    balance = compute_balance(problem, u, "W", names=names, values=[h.value for h in spec.hold],
                              charges=spec.physics == "electrostatics")
    return compute_headline(spec, problem, u, balance), u, problem


def _slab(physics: str, n: int = 20, L: float = 0.1, **kw):
    """A 1D slab along x: n cells over L metres, 0.02 m x 0.03 m cross-section."""
    return make_spec(physics=physics, grid={"cells": [n, 1, 1], "size": [L, 0.02, 0.03]}, **kw)


# ---------------------------------------------------------------- extremes
def test_linear_slab_extremes_sit_in_the_end_cells() -> None:
    # A wall between two fixed temperatures conducts a linear profile (Incropera and DeWitt,
    # the plane wall, from memory); the finite volumes reproduce it exactly, so the largest
    # cell value is the first cell's centre value T1 - (T1 - T2) (h/2) / L.
    n, L, T1, T2 = 20, 0.1, 400.0, 300.0
    spec = _slab("heat", n, L, material={"value": 15.0},
                 boundary={"x_min": {"type": "dirichlet", "value": T1}, "x_max": {"type": "dirichlet", "value": T2}})
    h, _, _ = _headline(spec)
    dx = L / n
    assert h["max"]["at"] == pytest.approx([dx / 2, 0.01, 0.015])
    assert h["max"]["value"] == pytest.approx(T1 - (T1 - T2) * (dx / 2) / L, rel=1e-12)
    assert h["min"]["at"] == pytest.approx([L - dx / 2, 0.01, 0.015])
    assert h["min"]["value"] == pytest.approx(T2 + (T1 - T2) * (dx / 2) / L, rel=1e-12)


def test_heated_slab_peaks_in_the_middle() -> None:
    # Plane wall with uniform generation q between faces at T0: T_max = T0 + q L^2 / (8 k) at the
    # mid-plane (Incropera and DeWitt, plane wall with generation, from memory).
    n, L, q, k, T0 = 41, 0.1, 2e5, 10.0, 300.0
    spec = _slab("heat", n, L, material={"value": k}, source={"value": q},
                 boundary={"x_min": {"type": "dirichlet", "value": T0}, "x_max": {"type": "dirichlet", "value": T0}})
    h, _, _ = _headline(spec)
    assert h["max"]["at"][0] == pytest.approx(L / 2)
    rise = q * L**2 / (8 * k)
    assert h["max"]["value"] - T0 == pytest.approx(rise, rel=1e-3)


# ---------------------------------------------------------------- regions
def test_region_mean_of_a_linear_field_is_its_centre_value() -> None:
    n, L = 20, 0.1
    spec = _slab("heat", n, L, material={"value": 1.0, "region": [
        {"box": {"min": [0.02, 0.0, 0.0], "max": [0.05, 0.02, 0.03]}, "value": 1.0}]},
        boundary={"x_min": {"type": "dirichlet", "value": 100.0}, "x_max": {"type": "dirichlet", "value": 0.0}})
    h, _, _ = _headline(spec)
    r = h["regions"][0]
    assert r["label"] == "material.region.0"
    assert r["cells"] == 6
    assert r["volume"] == pytest.approx(0.03 * 0.02 * 0.03, rel=1e-12)
    assert r["shape_volume"] == pytest.approx(0.03 * 0.02 * 0.03, rel=1e-12)
    assert r["mean"] == pytest.approx(100.0 * (1 - 0.035 / L), rel=1e-12)  # T at x = 0.035
    assert r["max"] == pytest.approx(100.0 * (1 - 0.0225 / L), rel=1e-12)  # first selected centre


def test_region_numbers_of_a_sphere_count_its_cells_only() -> None:
    """A sphere selects part of the block of cells around it: its mean and max over the cells
    whose centres lie inside it equal numpy's over the full mask of those cells, and differ
    from the block's. On the linear field of a plane wall: a sphere in the middle (radius
    0.0176 m, so the block's first x-plane holds no selected cell) for the max, and one cut in
    half by x_min for the mean (the half ball's centroid lies nearer the face than the
    block's)."""
    n, L, r = 20, 0.1, 0.0176
    centres = ([0.05, 0.05, 0.05], [0.0, 0.05, 0.05])
    spec = make_spec(physics="heat", grid={"cells": [n, n, n], "size": [L, L, L]},
                     material={"value": 1.0, "region": [
                         {"sphere": {"center": c, "radius": r}, "value": 1.0} for c in centres]},
                     boundary={"x_min": {"type": "dirichlet", "value": 100.0},
                               "x_max": {"type": "dirichlet", "value": 0.0}})
    h, u, problem = _headline(spec)
    x, y, z = problem.grid.mesh()
    for row, (cx, cy, cz) in zip(h["regions"], centres):
        inside = (x - cx) ** 2 + (y - cy) ** 2 + (z - cz) ** 2 <= r**2
        block = (np.abs(x - cx) <= r) & (np.abs(y - cy) <= r) & (np.abs(z - cz) <= r)
        assert row["cells"] == int(inside.sum()) > 0
        assert row["mean"] == pytest.approx(u[inside].mean(), rel=1e-12)
        assert row["max"] == pytest.approx(u[inside].max(), rel=1e-12)
        if cx > 0:
            assert u[block].max() > u[inside].max() + 1.0
        else:
            assert u[block].mean() < u[inside].mean() - 1.0


# ---------------------------------------------------------------- thermal resistance
def test_thermal_resistance_of_a_plane_wall() -> None:
    # A heated first cell (insulated behind) conducts its heat through the wall to a Robin face:
    # R = L'/(k A) + 1/(h_c A), the conduction and convection resistances in series (Incropera
    # and DeWitt, the plane wall, from memory), with L' = L - dx/2 from the source cell's centre
    # (where its temperature sits) to the face.
    n, L, k, hc, Q = 20, 0.1, 15.0, 250.0, 3.0
    A = 0.02 * 0.03
    dx = L / n
    spec = _slab("heat", n, L, material={"value": k},
                 source={"value": 0.0, "region": [{"box": {"min": [0.0, 0.0, 0.0], "max": [dx, 0.02, 0.03]},
                                                   "total": Q}]},
                 boundary={"x_max": {"type": "robin", "coefficient": hc, "reference": 293.15}})
    h, _, _ = _headline(spec)
    (r,) = h["thermal_resistances"]
    assert r["sink"] == "robin face x_max"
    assert r["heat_flow"] == pytest.approx(Q, rel=1e-9)
    assert r["resistance"] == pytest.approx((L - dx / 2) / (k * A) + 1 / (hc * A), rel=1e-9)


def test_thermal_resistance_to_a_hold_and_the_hottest_source() -> None:
    # Two heated cells; the hotter one's mean is used. A hold at the far end takes all the heat:
    # R = distance between cell centres / (k A) (plane wall, from memory).
    n, L, k = 20, 0.1, 15.0
    A = 0.02 * 0.03
    dx = L / n
    spec = _slab("heat", n, L, material={"value": k},
                 source={"value": 0.0, "region": [
                     {"box": {"min": [0.05, 0.0, 0.0], "max": [0.05 + dx, 0.02, 0.03]}, "total": 0.5},
                     {"box": {"min": [0.0, 0.0, 0.0], "max": [dx, 0.02, 0.03]}, "total": 2.0}]},
                 hold=[{"box": {"min": [L - dx, 0.0, 0.0], "max": [L, 0.02, 0.03]}, "value": 300.0, "name": "sink"}])
    h, u, _ = _headline(spec)
    (r,) = h["thermal_resistances"]
    assert r["source"] == "source.region.1"
    assert r["sink"] == "hold 'sink'"
    assert r["heat_flow"] == pytest.approx(2.5, rel=1e-9)
    assert r["source_mean"] == pytest.approx(u[0, 0, 0])
    # superposition: the far source adds 0.5 W over the shared path from its own cell
    expected = (2.0 * (L - dx) + 0.5 * (L - dx - 0.05)) / (k * A) / 2.5
    assert r["resistance"] == pytest.approx(expected, rel=1e-9)


# ---------------------------------------------------------------- electrostatics
def test_parallel_plate_stored_energy_is_half_c_v_squared() -> None:
    # W = 1/2 C V^2 with C = eps0 eps_r A / d (any electrostatics text, from memory); two
    # dielectric layers act as capacitors in series: d / eps_r -> d1/eps1 + d2/eps2.
    V, A, d = 250.0, 0.02 * 0.03, 0.1
    spec = make_spec(physics="electrostatics", grid={"cells": [1, 1, 20], "size": [0.02, 0.03, d]},
                     material={"value": 3.0, "region": [
                         {"box": {"min": [0, 0, 0], "max": [0.02, 0.03, 0.04]}, "value": 7.0}]},
                     boundary={"z_min": {"type": "dirichlet", "value": 0.0},
                               "z_max": {"type": "dirichlet", "value": V}})
    h, u, problem = _headline(spec)
    C = EPSILON_0 * A / (0.04 / 7.0 + 0.06 / 3.0)
    assert h["stored_energy"] == pytest.approx(0.5 * C * V**2, rel=1e-10)
    # the peak field is in the weaker dielectric: E = D / (eps0 eps_r), D = C V / A
    assert h["peak_field"]["value"] == pytest.approx(C * V / A / (EPSILON_0 * 3.0), rel=1e-9)
    assert h["peak_field"]["at"][2] > 0.04
    assert not h["peak_field"]["grid_dependent"]
    assert stored_energy(problem, u) == h["stored_energy"]


def test_plates_as_holds_store_half_c_v_squared_and_are_not_edges() -> None:
    # Plates held over whole x-y planes: the gap is the distance between the held cells'
    # centres, d = L - dz, and W = 1/2 eps0 eps_r A V^2 / d (from memory).
    V, L, n = 10.0, 0.05, 25
    dz = L / n
    spec = make_spec(physics="electrostatics", grid={"cells": [2, 2, n], "size": [0.02, 0.02, L]},
                     material={"value": 2.0},
                     hold=[{"box": {"min": [0, 0, 0], "max": [0.02, 0.02, dz]}, "value": 0.0, "name": "low"},
                           {"box": {"min": [0, 0, L - dz], "max": [0.02, 0.02, L]}, "value": V, "name": "high"}])
    h, _, _ = _headline(spec)
    C = EPSILON_0 * 2.0 * 0.02**2 / (L - dz)
    assert h["stored_energy"] == pytest.approx(0.5 * C * V**2, rel=1e-10)
    assert not h["peak_field"]["grid_dependent"]


def test_peak_field_next_to_a_small_electrode_is_marked_grid_dependent() -> None:
    spec = make_spec(physics="electrostatics", grid={"cells": [12, 12, 12], "size": [1.0, 1.0, 1.0]},
                     material={"value": 1.0},
                     boundary={"x_min": {"type": "dirichlet", "value": 0.0}},
                     hold=[{"box": {"min": [0.4, 0.4, 0.4], "max": [0.6, 0.6, 0.6]}, "value": 1.0}])
    h, _, problem = _headline(spec)
    assert h["peak_field"]["grid_dependent"]
    assert "edge" in h["peak_field"]["note"]
    # the rule itself: a cell facing the middle of a whole-plane electrode is not at an edge
    plate = np.zeros((5, 5, 5), bool)
    plate[:, :, 0] = True
    assert not near_electrode_edge(plate, (2, 2, 1))
    cube = np.zeros((5, 5, 5), bool)
    cube[1:3, 1:3, 1:3] = True
    assert near_electrode_edge(cube, (3, 3, 3))


# ---------------------------------------------------------------- groundwater
def test_groundwater_flows_follow_darcy() -> None:
    # Q = K A (h1 - h2) / L (Darcy's law, from memory), also per day.
    K, L, h1, h2 = 1e-4, 0.1, 12.0, 10.0
    A = 0.02 * 0.03
    spec = _slab("groundwater", 10, L, material={"value": K},
                 boundary={"x_min": {"type": "dirichlet", "value": h1}, "x_max": {"type": "dirichlet", "value": h2}})
    h, _, _ = _headline(spec)
    flows = {f["where"]: f for f in h["flows"]}
    Q = K * A * (h1 - h2) / L
    assert flows["out through x_max"]["m3_per_s"] == pytest.approx(Q, rel=1e-9)
    assert flows["out through x_max"]["m3_per_day"] == pytest.approx(Q * 86400, rel=1e-9)
    assert flows["out through x_min"]["m3_per_s"] == pytest.approx(-Q, rel=1e-9)


# ---------------------------------------------------------------- shape volumes
GRID = Grid.uniform((10, 10, 10), (0.1, 0.1, 0.1))


@pytest.mark.parametrize("shape, expected", [
    (Sphere(center=(0.5, 0.5, 0.5), radius=0.3), 4 / 3 * math.pi * 0.3**3),
    (Sphere(center=(0.5, 0.5, 0.0), radius=0.3), 2 / 3 * math.pi * 0.3**3),  # half outside
    (Sphere(center=(0.0, 0.0, 0.0), radius=0.3), 1 / 6 * math.pi * 0.3**3),  # an eighth inside
    (Cylinder(center=(0.5, 0.5, 0.5), radius=0.2, axis="z", length=0.4), math.pi * 0.04 * 0.4),
    (Cylinder(center=(0.0, 0.5, 1.0), radius=0.2, axis="z", length=0.4), math.pi * 0.04 * 0.2 / 2),
    (Box(min=(-1.0, 0.2, 0.3), max=(0.5, 0.4, 2.0)), 0.5 * 0.2 * 0.7),
])
def test_true_volume_clipped_to_the_box(shape, expected) -> None:
    assert true_volume(shape, GRID) == pytest.approx(expected, rel=2e-4)


def test_selection_matches_the_full_mask() -> None:
    from sevenfold.shapes import mask

    grid = Grid((np.cumsum(np.r_[0, np.linspace(0.05, 0.15, 10)]), np.linspace(0, 1, 8), np.linspace(-1, 1, 13)))
    for shape in (Sphere(center=(0.4, 0.3, 0.0), radius=0.35),
                  Cylinder(center=(0.5, 0.5, 0.0), radius=0.3, axis="x", length=0.6),
                  Box(min=(0.1, 0.2, -0.5), max=(0.45, 0.9, 0.3)),
                  Box(min=(2.0, 0.2, -0.5), max=(3.0, 0.9, 0.3))):  # outside the grid: no cells
        sel = selection(shape, grid)
        full = mask(shape, grid)
        assert np.array_equal(sel.full_mask(grid.shape), full)
        assert sel.cells == int(full.sum())
        assert sel.volume == pytest.approx(grid.volume(full), rel=1e-12)
        if sel.cells:  # the integral and the maximum against the cell-by-cell sums
            u = np.random.default_rng(3).standard_normal(grid.shape)
            assert sel.integral(u, grid) == pytest.approx(float((u * grid.cell_volumes())[full].sum()), rel=1e-12)
            assert sel.maximum(u) == u[full].max()



def test_a_box_takes_the_cells_whose_centre_it_holds_boundary_included() -> None:
    """The block of index slices equals the centre test cell by cell (shapes.py's rule),
    on a graded grid, with faces exactly on centres, outside the grid, and between two."""
    from sevenfold.shapes import mask

    grid = Grid((np.cumsum(np.r_[0, np.linspace(0.05, 0.15, 10)]), np.linspace(0, 1, 8), np.linspace(-1, 1, 13)))
    x, y, z = grid.mesh()
    cx, cy = grid.centres(0), grid.centres(1)
    for box in (Box(min=(cx[2], cy[1], -0.5), max=(cx[6], cy[4], 0.3)),  # faces on centres
                Box(min=(-5.0, -1.0, -9.0), max=(5.0, 2.0, 9.0)),  # the whole grid and more
                Box(min=(cx[3] + 1e-9, 0.2, 0.0), max=(cx[4] - 1e-9, 0.9, 1.0)),  # between two centres
                Box(min=(0.1, 0.2, -0.5), max=(0.45, 0.9, 0.3))):
        expected = ((box.min[0] <= x) & (x <= box.max[0]) & (box.min[1] <= y) & (y <= box.max[1])
                    & (box.min[2] <= z) & (z <= box.max[2]))
        got = mask(box, grid)
        assert got.shape == grid.shape and got.dtype == bool
        assert np.array_equal(got, np.broadcast_to(expected, grid.shape))


# ---------------------------------------------------------------- geometry warnings
LAYER = """
name = "layer"
physics = "heat"
[grid]
cells = [5, 5, 10]
size = [0.001, 0.001, 0.002]
[material]
value = 150.0
[[material.region]]
box = { min = [0.0, 0.0, 0.0], max = [0.001, 0.001, 0.00012] }   # a 0.12 mm die-attach layer
value = 3.0
[boundary]
z_min = { type = "dirichlet", value = 300.0 }
z_max = { type = "neumann", flux = 1e5 }
[output]
path = "out.zarr"
"""


def test_a_thin_layer_on_thick_cells_is_reported(tmp_path: Path, capsys) -> None:
    job = tmp_path / "layer.toml"
    job.write_text(LAYER)
    assert main(["check", str(job)]) == 0
    text = " ".join(capsys.readouterr().out.split())
    # one 0.2 mm cell stands for the 0.12 mm layer: 2e-10 m^3 against 1.2e-10 m^3 (+67 %)
    assert "warning: material.region.0 selects 25 cell(s) of 2e-10 m^3" in text
    assert "shape has 1.2e-10 m^3" in text and "+67 %" in text
    result = run_job(job)
    assert len(result.warnings) == 1 and "material.region.0" in result.warnings[0]
    attrs = zarr.open_group(str(result.output), mode="r").attrs
    assert attrs["warnings"] == list(result.warnings)
    region = attrs["headline"]["regions"][0]
    assert (region["cells"], region["volume"], region["shape_volume"]) == (25, pytest.approx(2e-10), pytest.approx(1.2e-10))


def test_aligned_regions_give_no_warning() -> None:
    spec = make_spec(physics="heat", grid={"cells": [5, 5, 10], "size": [0.001, 0.001, 0.002]},
                     material={"value": 150.0, "region": [
                         {"box": {"min": [0, 0, 0], "max": [0.001, 0.001, 0.0002]}, "value": 3.0}]},
                     boundary={"z_min": {"type": "dirichlet", "value": 300.0}})
    _, problem = solve_spec(spec)
    assert job_warnings(spec, problem) == []
