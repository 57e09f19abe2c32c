"""Floating electrodes, self-capacitance of one electrode, and capacitance per unit length,
against the closed forms of parallel plates and concentric spheres."""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import numpy as np
import pytest
from conftest import make_spec
from scipy.constants import epsilon_0

from sevenfold.balance import compute_balance
from sevenfold.capacitance import capacitance_matrix
from sevenfold.cli import main
from sevenfold.errors import JobError
from sevenfold.gci import gci_three_grids
from sevenfold.problem import build_problem
from sevenfold.solvers import solve_problem
from sevenfold.spec import SolverSpec

# A stack of plates along z: cell layers held (electrodes) or floating, dielectric between.
NZ, HZ = 12, 1.0e-4  # cells and spacing along z (m)
W, D = 0.02, 0.01  # plate sides along x and y (m)
AREA = W * D


def layer(k: int) -> dict:
    """The box selecting cell layer k along z."""
    return {"min": [0.0, 0.0, (k + 0.25) * HZ], "max": [W, D, (k + 0.75) * HZ]}


def stack(holds: list[dict], er: float | list = 3.0, **extra):
    """Plates across a 4 x 2 x NZ grid; ``er`` is one relative permittivity, or one per layer."""
    material = {"value": er if not isinstance(er, list) else er[0]}
    if isinstance(er, list):
        material["region"] = [{"box": layer(k), "value": e} for k, e in enumerate(er)]
    return make_spec(physics="electrostatics", grid={"cells": [4, 2, NZ], "size": [W, D, NZ * HZ]},
                     material=material, hold=holds, **extra)


def gap_capacitance(k0: int, k1: int, er: list[float]) -> float:
    """Plates at cell layers k0 < k1 (their centres are the electrode surfaces): the layers in
    between are capacitors in series, each half layer at the ends counted with its own
    permittivity: 1/C = sum (thickness / (eps0 er A)). Series capacitors / layered dielectric:
    Griffiths, Introduction to Electrodynamics, chapter 4, from memory. Exact on the grid in 1D."""
    inverse = 0.5 * HZ / er[k0] + 0.5 * HZ / er[k1] + sum(HZ / er[k] for k in range(k0 + 1, k1))
    return epsilon_0 * AREA / inverse


ER = [2.0, 2.0, 3.0, 3.0, 5.0, 5.0, 5.0, 4.0, 4.0, 7.0, 7.0, 7.0]


@pytest.mark.parametrize("method", ["direct", "gmg", "amg"])
@pytest.mark.parametrize("charge", [0.0, 3.0e-12])
def test_floating_plate_takes_the_series_capacitor_potential(method: str, charge: float) -> None:
    """Bottom plate (layer 0) at 0 V, top plate (layer 11) at 10 V, a floating plate at layer
    5 carrying Q: charge balance C1 (V_f - 0) + C2 (V_f - 10) = Q gives V_f = (Q + 10 C2) /
    (C1 + C2), C1 and C2 the series capacitances of the two gaps (exact in 1D)."""
    spec = stack([{"box": layer(0), "value": 0.0, "name": "bottom"},
                  {"box": layer(11), "value": 10.0, "name": "top"},
                  {"box": layer(5), "charge": charge, "name": "middle"}],
                 er=ER, solver={"method": method, "rtol": 1e-11})
    problem = build_problem(spec)
    assert problem.floating == ((2, charge),)
    u, result = solve_problem(problem, spec.solver, method)
    c1, c2 = gap_capacitance(0, 5, ER), gap_capacitance(5, 11, ER)
    expected = (charge + 10.0 * c2) / (c1 + c2)
    bal = compute_balance(problem, u, "C", names=["bottom", "top", "middle"], values=[0.0, 10.0, None],
                          charges=True)
    middle = bal.holds[2]
    tol = 1e-10 if method == "direct" else 1e-7  # rounding; iterative: rtol 1e-11 of the field
    assert middle.floating and middle.value == pytest.approx(expected, rel=tol)
    assert middle.charge == pytest.approx(charge, abs=tol * 10.0 * (c1 + c2))
    assert np.all(u[:, :, 5] == pytest.approx(expected, rel=tol))
    assert "floating electrodes by superposition" in result.notes
    assert bal.relative_imbalance < 1e-8


def test_two_floating_plates_share_the_voltage_by_series_capacitance() -> None:
    """Two isolated plates (charge 0) between held plates at 0 and 12 V: the same charge flows
    through the three gaps in series, so each plate sits at 12 V times the inverse
    capacitance below it over the total (exact in 1D; Griffiths chapter 4, from memory)."""
    spec = stack([{"box": layer(0), "value": 0.0}, {"box": layer(11), "value": 12.0},
                  {"box": layer(3), "charge": 0.0, "name": "f1"}, {"box": layer(8), "charge": 0.0, "name": "f2"}],
                 er=ER)
    problem = build_problem(spec)
    u, _ = solve_problem(problem, spec.solver, "direct")
    inv = [1.0 / gap_capacitance(a, b, ER) for a, b in ((0, 3), (3, 8), (8, 11))]
    total = sum(inv)
    assert u[0, 0, 3] == pytest.approx(12.0 * inv[0] / total, rel=1e-10)
    assert u[0, 0, 8] == pytest.approx(12.0 * (inv[0] + inv[1]) / total, rel=1e-10)


def test_a_floating_electrode_needs_a_reference() -> None:
    spec = stack([{"box": layer(5), "charge": 1e-12, "name": "lonely"}])
    with pytest.raises(JobError, match="needs a conductor at a known potential") as err:
        build_problem(spec)
    assert err.value.where == "hold.0.charge"


def test_self_capacitance_of_one_plate_to_a_grounded_face() -> None:
    """One electrode (layer 0 held) under a grounded top face: C = Q / V of the gap from the
    layer's centre to the face, the half layers and layers in series (exact in 1D)."""
    spec = stack([{"box": layer(0), "value": 5.0, "name": "plate"}], er=ER,
                 boundary={"z_max": {"type": "dirichlet", "value": 0.0}})
    res = capacitance_matrix(build_problem(spec), ["plate"], SolverSpec(method="direct"))
    inverse = 0.5 * HZ / ER[0] + sum(HZ / e for e in ER[1:])
    assert res.matrix.shape == (1, 1) and res.grounded_faces == ["z_max"]
    assert res.matrix[0, 0] == pytest.approx(epsilon_0 * AREA / inverse, rel=1e-10)
    assert res.ground[0] == pytest.approx(-res.matrix[0, 0], rel=1e-10)  # the face carries -Q
    assert res.thin_axis is None


def test_one_electrode_without_a_grounded_face_is_refused() -> None:
    spec = stack([{"box": layer(0), "value": 1.0, "name": "plate"}])
    with pytest.raises(JobError, match="self-capacitance is to the grounded faces"):
        capacitance_matrix(build_problem(spec), ["plate"], SolverSpec(method="direct"))


def thin_plates():
    """Parallel plates in a 2D section: one cell along y (thickness T, insulated across),
    electrodes the first and last x layers, relative permittivity 4."""
    return make_spec(physics="electrostatics", grid={"cells": [10, 1, 6], "size": [0.01, 0.003, 0.006]},
                     material={"value": 4.0},
                     hold=[{"box": {"min": [0, 0, 0], "max": [0.0005, 0.003, 0.006]}, "value": 0.0, "name": "a"},
                           {"box": {"min": [0.0095, 0, 0], "max": [0.01, 0.003, 0.006]}, "value": 1.0, "name": "b"}])


def test_capacitance_per_unit_length_of_a_thin_problem() -> None:
    """C' = eps0 er H / d per metre along the thin axis y: plates of height H = 6 mm a gap
    d = 9 mm apart (centre to centre of the end layers); exact in 1D."""
    res = capacitance_matrix(build_problem(thin_plates()), ["a", "b"], SolverSpec(method="direct"))
    assert res.thin_axis == "y" and res.thickness == pytest.approx(0.003)
    assert res.per_length[1, 1] == pytest.approx(epsilon_0 * 4.0 * 0.006 / 0.009, rel=1e-10)
    assert res.per_length[1, 1] == pytest.approx(res.matrix[1, 1] / 0.003, rel=1e-14)


THIN_TOML = """
name = "section"
physics = "electrostatics"
[grid]
cells = [10, 1, 6]
size = [0.01, 0.003, 0.006]
[material]
value = 4.0
[[hold]]
name = "a"
box = { min = [0.0, 0.0, 0.0], max = [0.0005, 0.003, 0.006] }
value = 0.0
[[hold]]
name = "b"
box = { min = [0.0095, 0.0, 0.0], max = [0.01, 0.003, 0.006] }
value = 1.0
[solver]
method = "direct"
"""

SINGLE_TOML = """
name = "single"
physics = "electrostatics"
[grid]
cells = [4, 2, 10]
size = [0.02, 0.01, 0.001]
[material]
value = 2.5
[boundary]
z_max = { type = "dirichlet", value = 0.0 }
[[hold]]
name = "pad"
box = { min = [0.0, 0.0, 0.0], max = [0.02, 0.01, 0.0001] }
value = 1.0
[solver]
method = "direct"
"""


def test_capacitance_command_per_length_and_single(tmp_path: Path, capsys) -> None:
    job = tmp_path / "thin.toml"
    job.write_text(THIN_TOML)
    assert main(["capacitance", str(job)]) == 0
    text = " ".join(capsys.readouterr().out.split())
    per_m = epsilon_0 * 4.0 * 0.006 / 0.009 * 1e12
    assert "capacitance per metre along y" in text and "(pF/m)" in text and f"{per_m:.6g}" in text
    job = tmp_path / "single.toml"
    job.write_text(SINGLE_TOML)
    assert main(["capacitance", str(job)]) == 0
    text = " ".join(capsys.readouterr().out.split())
    c = epsilon_0 * 2.5 * AREA / (0.001 - 0.00005)  # from the pad's centre plane to the face
    assert "self-capacitance of pad to the grounded faces z_max" in text and f"{c * 1e12:.6g} pF" in text


FLOATING_TOML = """
name = "floating"
physics = "electrostatics"
[grid]
cells = [4, 2, 10]
size = [0.02, 0.01, 0.001]
[material]
value = 2.0
[[hold]]
name = "ground"
box = { min = [0.0, 0.0, 0.0], max = [0.02, 0.01, 0.0001] }
value = 0.0
[[hold]]
name = "drive"
box = { min = [0.0, 0.0, 0.0009], max = [0.02, 0.01, 0.001] }
value = 9.0
[[hold]]
name = "island"
box = { min = [0.0, 0.0, 0.0003], max = [0.02, 0.01, 0.0004] }
charge = 0.0
[solver]
method = "gmg"
rtol = 1e-10
"""


def test_run_reports_the_floating_potential(tmp_path: Path, capsys) -> None:
    """End to end: the island (cell layer 3 of 0..9) floats at 9 V x 3/9 by uniform series gaps."""
    from sevenfold.export import open_result

    job = tmp_path / "floating.toml"
    job.write_text(FLOATING_TOML)
    assert main(["run", "--no-progress", str(job)]) == 0
    text = " ".join(capsys.readouterr().out.split())
    assert "charge on island (floating, solved 3 V)" in text
    result = open_result(tmp_path / "results" / "floating.zarr")
    assert result.attrs["floating"]["island"] == pytest.approx(3.0, rel=1e-8)
    hold = result.attrs["balance"]["holds"][2]
    assert hold["floating"] and hold["value"] == pytest.approx(3.0, rel=1e-8)


# ---------------------------------------------------------------- concentric spheres
A_IN, B_OUT = 0.5, 1.0  # sphere and shell radii (m)


def sphere_capacitance(n: int) -> float:
    """C[0, 0] of a sphere (held cells with centres within A_IN) inside a grounded shell (held
    cells with centres at B_OUT or beyond), on a uniform n^3 grid over one octant: the sphere's
    centre is the box's corner, the three faces through it insulated (symmetry planes), so the
    whole sphere's capacitance is 8 times the octant's."""
    spec = make_spec(physics="electrostatics", grid={"cells": [n, n, n], "size": [1.0, 1.0, 1.0]},
                     material={"value": 1.0},
                     hold=[{"sphere": {"center": [0, 0, 0], "radius": A_IN}, "value": 1.0, "name": "sphere"}],
                     solver={"method": "amg", "rtol": 1e-10})
    p = build_problem(spec)
    x, y, z = p.grid.mesh()
    shell = np.broadcast_to(x**2 + y**2 + z**2 >= B_OUT**2, p.grid.shape)
    p = dataclasses.replace(p, held=p.held | shell, held_value=np.where(shell, 0.0, p.held_value),
                            hold_index=np.where(shell, 1, p.hold_index).astype(np.int32))
    return 8.0 * capacitance_matrix(p, ["sphere", "shell"], spec.solver).matrix[0, 0]


def test_concentric_spheres_converge_to_the_closed_form() -> None:
    """C = 4 pi eps0 a b / (b - a) for concentric spheres (any electrostatics text, e.g.
    Griffiths, Introduction to Electrodynamics, chapter 2, from memory), on uniform grids of
    16^3, 32^3 and 64^3 cells over the octant. Both spheres are staircases of held cells, a
    first-order representation of curved surfaces: the observed order (from the three grids,
    no exact value used) is near 1 (measured 0.93), the error against the closed form falls
    with each grid (7.9 %, 4.2 %, 2.3 %), and the Richardson-extrapolated value lies within
    0.5 % of the closed form (measured 0.18 %)."""
    exact = 4.0 * math.pi * epsilon_0 * A_IN * B_OUT / (B_OUT - A_IN)
    c = [sphere_capacitance(n) for n in (16, 32, 64)]
    errors = [abs(v / exact - 1.0) for v in c]
    assert errors[0] > errors[1] > errors[2]
    g = gci_three_grids(c[2], c[1], c[0], 2.0, 2.0)
    assert g.convergence == "monotone"
    assert 0.75 <= g.order <= 1.25
    assert g.extrapolated == pytest.approx(exact, rel=5e-3)
