"""Roache's GCI against worked numbers and power laws; the converge command on a manufactured case."""

from __future__ import annotations

import json
import math
import struct
from pathlib import Path

import pytest

from sevenfold.cli import main
from sevenfold.gci import gci_three_grids, observed_order
from sevenfold.study import plan_levels, run_study
from sevenfold.spec import load_job


def test_worked_example_of_the_procedure() -> None:
    """Celik et al., J. Fluids Eng. 130 (2008) 078001, table 1, first column (from memory):
    phi = 6.063, 5.972, 5.863 on r21 = 1.5, r32 = 1.333 give p = 1.53, phi_ext = 6.1685,
    e_ext = 1.7 % and GCI_fine = 2.2 %."""
    r = gci_three_grids(6.063, 5.972, 5.863, 1.5, 1.333)
    assert r.order == pytest.approx(1.53, abs=0.01)
    assert r.extrapolated == pytest.approx(6.1685, abs=1e-3)
    assert abs(r.extrapolated - r.f1) / r.extrapolated == pytest.approx(0.017, abs=5e-4)
    assert r.gci_relative == pytest.approx(0.022, abs=5e-4)
    assert r.convergence == "monotone"


@pytest.mark.parametrize("p, r21, r32", [(2.0, 2.0, 2.0), (1.7, 1.5, 1.3), (2.3, 1.25, 1.6)])
def test_power_law_is_recovered(p: float, r21: float, r32: float) -> None:
    """f(h) = f0 + c h^p exactly: Richardson extrapolation returns f0 and the order p."""
    f0, c, h1 = 3.0, 0.8, 0.05
    h2, h3 = h1 * r21, h1 * r21 * r32
    f1, f2, f3 = (f0 + c * h**p for h in (h1, h2, h3))
    r = gci_three_grids(f1, f2, f3, r21, r32)
    assert r.order == pytest.approx(p, rel=1e-9)
    assert r.extrapolated == pytest.approx(f0, rel=1e-10)
    assert r.gci == pytest.approx(1.25 * abs(f2 - f1) / (r21**p - 1), rel=1e-9)
    assert abs(r.f1 - f0) <= r.gci  # the band brackets the exact value


def test_oscillatory_divergent_and_exact_cases() -> None:
    assert gci_three_grids(1.0, 1.1, 0.9, 2, 2).convergence == "oscillatory"
    d = gci_three_grids(1.0, 1.1, 1.15, 2, 2)
    assert d.convergence == "divergent" and math.isnan(d.order)
    e = gci_three_grids(2.0, 2.0, 2.0, 2, 2)
    assert e.convergence == "exact" and e.gci == 0.0
    assert observed_order(0.01, 0.04, 2.0, 2.0) == pytest.approx(2.0)


MMS = """
name = "mms"
[grid]
cells = [6, 6, 6]
size = [1.0, 1.0, 1.0]
[material]
value = 1.0
[source]
expression = "3*pi**2*sin(pi*x)*sin(pi*y)*sin(pi*z)"
[boundary]
x_min = { type = "dirichlet", value = 0.0 }
x_max = { type = "dirichlet", value = 0.0 }
y_min = { type = "dirichlet", value = 0.0 }
y_max = { type = "dirichlet", value = 0.0 }
z_min = { type = "dirichlet", value = 0.0 }
z_max = { type = "dirichlet", value = 0.0 }
[solver]
method = "direct"
[[probe]]
name = "middle"
point = [0.5, 0.5, 0.5]
"""


def png_size(path: Path) -> tuple[int, int]:
    """Width and height from a PNG's IHDR chunk (PNG specification, section 11.2.2)."""
    data = path.read_bytes()[:24]
    assert data[:8] == b"\x89PNG\r\n\x1a\n" and data[12:16] == b"IHDR"
    return struct.unpack(">II", data[16:24])


def test_converge_on_a_manufactured_solution(tmp_path: Path, capsys) -> None:
    """u = sin(pi x) sin(pi y) sin(pi z) with f = 3 pi^2 u: the outflow through each face is
    4/pi exactly and u(1/2, 1/2, 1/2) = 1. The scheme is second order, so p is near 2 and the
    GCI band around the finest value contains the exact value."""
    job = tmp_path / "mms.toml"
    job.write_text(MMS)
    assert main(["converge", str(job), "--levels", "3", "--ratio", "2"]) == 0
    text = capsys.readouterr().out
    assert "Grid Convergence Index" in text and "outflow_x_min" in text and "6 x 6 x 6" in text and "24 x 24 x 24" in text
    folder = tmp_path / "results" / "mms.converge"
    study = json.loads((folder / "study.json").read_text())
    assert [lv["cells"] for lv in study["levels"]] == [[6, 6, 6], [12, 12, 12], [24, 24, 24]]
    for key, exact in (("outflow_x_min", 4 / math.pi), ("outflow_z_max", 4 / math.pi), ("probe_middle", 1.0)):
        r = study["results"][key]
        assert r["order"] == pytest.approx(2.0, abs=0.2), (key, r)
        assert abs(r["f1"] - exact) <= r["gci"], (key, r)
        assert abs(r["extrapolated"] - exact) < abs(r["f1"] - exact)  # extrapolation helps
    assert png_size(folder / "convergence.png") == (640, 480)


def test_converge_with_a_non_integer_ratio(tmp_path: Path) -> None:
    job = tmp_path / "mms.toml"
    job.write_text(MMS.replace("[6, 6, 6]", "[8, 8, 8]"))
    study = run_study(job, levels=3, ratio=1.5, folder=tmp_path / "study")
    assert [lv.cells for lv in study.levels] == [(8, 8, 8), (12, 12, 12), (18, 18, 18)]
    r = study.results["outflow_y_min"]
    assert r.r21 == pytest.approx(1.5) and r.order == pytest.approx(2.0, abs=0.2)
    assert abs(r.f1 - 4 / math.pi) <= r.gci


def test_uneven_refinement_is_refused(tmp_path: Path, capsys) -> None:
    job = tmp_path / "mms.toml"
    job.write_text(MMS.replace("[6, 6, 6]", "[5, 6, 6]"))
    with pytest.raises(Exception):
        plan_levels(load_job(job), 3, 1.5)
    assert main(["converge", str(job), "--ratio", "1.5"]) == 2
    err = " ".join(capsys.readouterr().err.split())
    assert "refine every axis alike" in err and "Traceback" not in err
    assert main(["converge", str(job), "--levels", "2"]) == 2
    assert "at least 3 levels" in capsys.readouterr().err


def test_fields_from_files_cannot_be_refined(tmp_path: Path, capsys) -> None:
    import numpy as np

    np.save(tmp_path / "k.npy", np.ones((6, 6, 6)))
    job = tmp_path / "mms.toml"
    job.write_text(MMS.replace("[material]\nvalue = 1.0", '[material]\nfile = "k.npy"'))
    assert main(["converge", str(job)]) == 2
    err = " ".join(capsys.readouterr().err.split())
    assert "material.file" in err and "cannot come from a file" in err
