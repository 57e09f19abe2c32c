"""Electrode charges and the capacitance matrix against closed forms and Gauss's law."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from conftest import make_spec, solve_spec
from scipy.constants import epsilon_0

from sevenfold.balance import compute_balance
from sevenfold.capacitance import capacitance_matrix
from sevenfold.cli import main
from sevenfold.derived import face_flux
from sevenfold.problem import build_problem
from sevenfold.spec import SolverSpec

# Parallel plates: the bottom and top cell layers are the electrodes; between their centres,
# layer 1 (relative permittivity 2.2, thickness d1) under layer 2 (7.5, thickness d2).
NZ, HZ = 10, 1.0e-4  # cells and spacing along z (m)
AREA = 0.02 * 0.01  # plate area (m^2)
ER1, ER2 = 2.2, 7.5


def plates(**extra):
    interface = 4 * HZ  # a cell face: cells 0..3 are layer 1, 4..9 layer 2
    return make_spec(
        physics="electrostatics",
        grid={"cells": [4, 2, NZ], "size": [0.02, 0.01, NZ * HZ]},
        material={"value": ER1, "region": [{"box": {"min": [0.0, 0.0, interface], "max": [0.02, 0.01, NZ * HZ]},
                                            "value": ER2}]},
        hold=[{"box": {"min": [0.0, 0.0, 0.0], "max": [0.02, 0.01, HZ]}, "value": 0.0, "name": "bottom"},
              {"box": {"min": [0.0, 0.0, (NZ - 1) * HZ], "max": [0.02, 0.01, NZ * HZ]}, "value": 1.0,
               "name": "top"}],
        **extra,
    )


def series_capacitance() -> float:
    """C = eps0 A / (d1/er1 + d2/er2): two dielectric slabs between plates are capacitors in series.

    Griffiths, Introduction to Electrodynamics, chapter 4 (the problem of a parallel-plate
    capacitor filled with two dielectric slabs), from memory. The electrodes' surfaces are the
    held cells' centres, so d1 = 3.5 h and d2 = 5.5 h.
    """
    d1, d2 = 3.5 * HZ, 5.5 * HZ
    return epsilon_0 * AREA / (d1 / ER1 + d2 / ER2)


def test_two_layer_plates_match_the_series_formula() -> None:
    problem = build_problem(plates())
    res = capacitance_matrix(problem, ["bottom", "top"], SolverSpec(method="direct"))
    C = series_capacitance()
    assert res.matrix[0, 0] == pytest.approx(C, rel=1e-10)
    assert res.matrix[1, 1] == pytest.approx(C, rel=1e-10)
    assert res.matrix[0, 1] == pytest.approx(-C, rel=1e-10)
    assert res.grounded_faces == []
    np.testing.assert_allclose(res.matrix.sum(axis=1), 0.0, atol=1e-12 * C)  # charge conservation


def test_plate_charge_is_c_times_v() -> None:
    """The ordinary run: the top plate at 1 V carries Q = C V, the bottom -Q."""
    u, problem = solve_spec(plates())
    bal = compute_balance(problem, u, "C", names=["bottom", "top"], charges=True)
    C = series_capacitance()
    assert bal.holds[1].charge == pytest.approx(C * 1.0, rel=1e-10)
    assert bal.holds[0].charge == pytest.approx(-C * 1.0, rel=1e-10)


def rods(**extra):
    """Three rods in a dielectric over a grounded base: the electrodes example, coarser."""
    rod = {"radius": 0.0015, "axis": "y", "length": 0.012}
    return make_spec(
        physics="electrostatics",
        grid={"cells": [24, 16, 12], "size": [0.030, 0.020, 0.015]},
        material={"value": 3.6, "region": [{"box": {"min": [0.012, 0.006, 0.004], "max": [0.018, 0.014, 0.011]},
                                            "value": 9.8}]},
        boundary={"z_min": {"type": "dirichlet", "value": 0.0}},
        hold=[{"cylinder": {"center": [0.007, 0.010, 0.0085], **rod}, "value": 1000.0, "name": "hv"},
              {"cylinder": {"center": [0.023, 0.010, 0.0085], **rod}, "value": 200.0, "name": "lv"},
              {"cylinder": {"center": [0.015, 0.010, 0.0130], **rod}, "value": 0.0, "name": "guard"}],
        **extra,
    )


def test_capacitance_matrix_is_symmetric_with_amg() -> None:
    """Reciprocity: C is symmetric; diagonal positive, off-diagonal negative; charges add to zero."""
    problem = build_problem(rods())
    res = capacitance_matrix(problem, ["hv", "lv", "guard"], SolverSpec(method="amg", rtol=1e-10))
    C = res.matrix
    assert res.method == "amg" and res.grounded_faces == ["z_min"]
    assert res.asymmetry <= 1e-7
    assert np.all(np.diag(C) > 0)
    assert np.all(C[~np.eye(3, dtype=bool)] < 0)
    np.testing.assert_allclose(C.sum(axis=1) + res.ground, 0.0, atol=1e-8 * np.abs(C).max())
    direct = capacitance_matrix(problem, ["hv", "lv", "guard"], SolverSpec(method="direct"))
    np.testing.assert_allclose(C, direct.matrix, rtol=1e-7)


def test_electrode_charge_by_gauss_law() -> None:
    """The charge of a held electrode equals the displacement flux through any closed surface
    around it in the charge-free dielectric (Gauss's law for D, Griffiths chapter 4, from memory).

    The surface here is a box of cell faces around the hv rod; the flux through it is summed
    from derived.face_flux, not from the balance code.
    """
    u, problem = solve_spec(rods())
    bal = compute_balance(problem, u, "C", names=["hv", "lv", "guard"], charges=True)
    grid = problem.grid
    # the box spans cells i in [i0, i1), j in [j0, j1), k in [k0, k1) around the hv rod only
    i0, i1, j0, j1, k0, k1 = 2, 10, 1, 15, 6, 10
    index = problem.hold_index[i0:i1, j0:j1, k0:k1]
    assert set(np.unique(index)) == {-1, 0}  # encloses hv and no other electrode
    assert np.all(problem.hold_index[i0, j0:j1, k0:k1] == -1) and np.all(problem.hold_index[i1 - 1, j0:j1, k0:k1] == -1)
    Fx, Fy, Fz = (face_flux(problem, u, a) for a in range(3))
    ax, ay, az = (float(grid.face_areas(a)[0, 0]) for a in range(3))  # a uniform grid
    outward = (
        (Fx[i1, j0:j1, k0:k1].sum() - Fx[i0, j0:j1, k0:k1].sum()) * ax
        + (Fy[i0:i1, j1, k0:k1].sum() - Fy[i0:i1, j0, k0:k1].sum()) * ay
        + (Fz[i0:i1, j0:j1, k1].sum() - Fz[i0:i1, j0:j1, k0].sum()) * az
    )
    assert bal.holds[0].charge > 0
    assert outward == pytest.approx(bal.holds[0].charge, rel=1e-9)


def _write(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "job.toml"
    path.write_text(text)
    return path


PLATES_TOML = """
name = "plates"
physics = "{physics}"
[grid]
cells = [4, 2, 10]
size = [0.02, 0.01, 0.001]
[material]
value = 2.2
[[material.region]]
box = {{ min = [0.0, 0.0, 0.0004], max = [0.02, 0.01, 0.001] }}
value = 7.5
[[hold]]
name = "bottom"
box = {{ min = [0.0, 0.0, 0.0], max = [0.02, 0.01, 0.0001] }}
value = 0.0
{top}
[solver]
method = "direct"
"""

TOP = """[[hold]]
name = "top"
box = { min = [0.0, 0.0, 0.0009], max = [0.02, 0.01, 0.001] }
value = 1.0
"""


def test_capacitance_command(tmp_path: Path, capsys) -> None:
    assert main(["capacitance", str(_write(tmp_path, PLATES_TOML.format(physics="electrostatics", top=TOP)))]) == 0
    text = capsys.readouterr().out
    expected = series_capacitance() * 1e12
    assert f"{expected:.6g}" in text and "no grounded face" in text and "bottom" in text


@pytest.mark.parametrize("physics, top, message", [
    ("heat", TOP, "capacitance needs physics = 'electrostatics'"),
    # one electrode is fine (its self-capacitance), but only to a grounded face, and this has none
    ("electrostatics", "", "self-capacitance is to the grounded faces, and this job has none"),
])
def test_capacitance_refusals(tmp_path: Path, capsys, physics: str, top: str, message: str) -> None:
    assert main(["capacitance", str(_write(tmp_path, PLATES_TOML.format(physics=physics, top=top)))]) == 2
    err = " ".join(capsys.readouterr().err.split())
    assert message in err and "Traceback" not in err


def test_a_matrix_free_method_in_the_job_still_gives_the_matrix() -> None:
    """gmg solves from the Problem; the unit solves reuse a matrix, so they fall back to auto's choice."""
    problem = build_problem(plates())
    res = capacitance_matrix(problem, ["bottom", "top"], SolverSpec(method="gmg"))
    assert res.method == "direct"
    assert res.matrix[1, 1] == pytest.approx(series_capacitance(), rel=1e-10)


def test_vacuum_permittivity_is_scipys_codata_value() -> None:
    """physics.py keeps epsilon_0 as a literal; scipy.constants carries the CODATA value."""
    from sevenfold.physics import EPSILON_0

    assert EPSILON_0 == epsilon_0
