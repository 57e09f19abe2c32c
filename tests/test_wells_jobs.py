"""Wells and floating electrodes through the whole pipeline: job files on graded grids, run,
report, converge and sweeps (queue submit)."""

from __future__ import annotations

import json
import tomllib
from pathlib import Path

import numpy as np
import pytest
from test_converge import png_size

from sevenfold.cli import main
from sevenfold.export import open_result
from sevenfold.queue.home import locate
from sevenfold.queue.sweep import expand
from sevenfold.report import DPI
from sevenfold.report_slices import slice_figsize
from sevenfold.runner import run_job
from sevenfold.spec import parse_job
from sevenfold.study import run_study

# A small aquifer on a grid graded towards the pumped well at x = 60 m: 2 m cells there.
AQUIFER = """
name = "wellfield"
physics = "groundwater"

[grid.edges]
x = { start = 0.0, segments = [ { length = 50.0, cells = 5, last = 4.0 },
                                { length = 20.0, cells = 10 },
                                { length = 50.0, cells = 5, first = 4.0 } ] }
y = { start = 0.0, segments = [ { length = 40.0, cells = 8 } ] }
z = { start = 0.0, segments = [ { length = 12.0, cells = 3 } ] }

[material]
value = 2.0e-4

[boundary]
x_min = { type = "dirichlet", value = 12.0 }
x_max = { type = "dirichlet", value = 11.0 }

[[well]]
name = "pw1"
x = 61.0
y = 21.0
top = 10.0
bottom = 2.0
radius = 0.1
rate = -0.0005

[[well]]
name = "drain"
x = 25.0
y = 10.0
top = 12.0
bottom = 6.0
radius = 0.05
head = 11.0

[solver]
method = "gmg"
rtol = 1e-10
{extra}
"""


@pytest.fixture(scope="module")
def wellfield(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("wells")
    job = folder / "wellfield.toml"
    job.write_text(AQUIFER.replace("{extra}", ""))
    assert main(["run", "--no-progress", str(job)]) == 0
    return folder


def test_run_records_each_well_in_the_balance(wellfield: Path) -> None:
    result = open_result(wellfield / "results" / "wellfield.zarr")
    bal = result.attrs["balance"]
    wells = {w["name"]: w for w in bal["wells"]}
    assert wells["pw1"]["given"] == "rate" and wells["pw1"]["rate"] == pytest.approx(-0.0005, rel=1e-12)
    assert wells["pw1"]["cells"] == 3  # z in [2, 10] over 4 m cells: 2, 4 and 2 m of cells 0, 1, 2
    assert wells["drain"]["given"] == "head" and wells["drain"]["head"] == 11.0
    assert wells["drain"]["rate"] < 0  # the aquifer stands above 11 m there: the drain takes water
    assert bal["relative_imbalance"] < 1e-8


def test_report_draws_the_wells(wellfield: Path, capsys) -> None:
    assert main(["report", str(wellfield / "results" / "wellfield.zarr")]) == 0
    folder = wellfield / "results" / "wellfield.report"
    page = (folder / "index.html").read_text()
    assert "wells: triangles on the z plane" in page
    assert "from well pw1 (given rate; bore head" in page and "from well drain (given head; bore head 11 m)" in page
    opened = open_result(wellfield / "results" / "wellfield.zarr", warn=False)
    w, h = slice_figsize([float(np.ptp(opened.edges(a))) for a in range(3)])
    assert png_size(folder / "slices.png") == (round(w * DPI), round(h * DPI))


def test_converge_reports_the_bore_head_and_the_head_wells_rate(wellfield: Path) -> None:
    """Three levels of the graded grid (every cell split in 2, then 4): Peaceman's radius stays
    above the bore radius (0.198 x 0.5 m > 0.1 m on the finest)."""
    study = run_study(wellfield / "wellfield.toml", levels=3, ratio=2.0, folder=wellfield / "study")
    assert set(study.results) >= {"well_head_pw1", "well_rate_drain", "hydraulic_head_max"}
    assert [lv.cells for lv in study.levels] == [(20, 8, 3), (40, 16, 6), (80, 32, 12)]
    g = study.results["well_head_pw1"]
    assert g.convergence == "monotone" and g.gci_relative < 0.01
    assert json.loads((wellfield / "study" / "study.json").read_text())["results"]["well_rate_drain"]


def test_a_sweep_over_a_well_rate(wellfield: Path, tmp_path: Path, capsys) -> None:
    """[sweep] "well.0.rate": each variant runs its own rate (queue/sweep.py expands raw tables)."""
    text = AQUIFER.replace("{extra}", '[sweep]\n"well.0.rate" = [-0.0002, -0.0008]\n')
    variants, info = expand(tomllib.loads(text), "sweep.toml")
    assert info.size == 2
    job = tmp_path / "sweep.toml"
    job.write_text(text)
    heads = []
    for v in variants:
        spec = parse_job(v.table, str(job))
        res = run_job(job, tmp_path / f"{spec.name}.zarr", spec=spec)
        well = res.balance.wells[0]
        assert well.rate == pytest.approx(v.values["well.0.rate"], rel=1e-12)
        heads.append(well.head)
    assert heads[1] < heads[0]  # pumping harder lowers the bore
    home = locate(tmp_path / "home")
    assert main(["submit", str(job), "--home", str(home.root), "--json"]) == 0
    assert len(json.loads(capsys.readouterr().out)) == 2


ISLAND = """
name = "island"
physics = "electrostatics"

[grid.edges]
x = [0.0, 0.01, 0.02]
y = [0.0, 0.01]
z = {{ start = 0.0, segments = [ {{ length = 0.003, cells = 3 }}, {{ length = 0.006, cells = 3, growth = 1.5 }} ] }}

[material]
value = 3.0

[boundary]
z_min = {{ type = "dirichlet", value = 0.0 }}

[[hold]]
name = "drive"
box = {{ min = [0.0, 0.0, 0.0075], max = [0.02, 0.01, 0.009] }}
value = 6.0

[[hold]]
name = "island"
box = {{ min = [0.0, 0.0, 0.002], max = [0.02, 0.01, 0.003] }}
charge = {charge}

[solver]
method = "{method}"
"""


@pytest.mark.parametrize("method", ["gmg", "direct"])
def test_floating_electrode_on_a_graded_grid_in_run_and_converge(tmp_path: Path, method: str, capsys) -> None:
    """A floating plate (cell layer 2, centre z = 2.5 mm) between the grounded face z = 0 and a
    held plate (the last layer, its centre z_d): with no charge it sits at 6 V x 2.5 mm / z_d
    (uniform permittivity: the potential is linear in z; exact in 1D)."""
    job = tmp_path / "island.toml"
    job.write_text(ISLAND.format(charge=0.0, method=method))
    assert main(["run", "--no-progress", str(job)]) == 0
    out = " ".join(capsys.readouterr().out.split())
    result = open_result(tmp_path / "results" / "island.zarr")
    ez = result.edges(2)
    z_d = 0.5 * (ez[-2] + ez[-1])
    expected = 6.0 * 0.0025 / z_d
    assert result.attrs["floating"]["island"] == pytest.approx(expected, rel=1e-8)
    assert "charge on island (floating, solved" in out
    study = run_study(job, levels=3, ratio=2.0, folder=tmp_path / "study")
    assert "potential_island" in study.results and "charge_island" not in study.results


def test_check_shows_where_each_well_landed(wellfield: Path, capsys) -> None:
    assert main(["check", str(wellfield / "wellfield.toml")]) == 0
    text = " ".join(capsys.readouterr().out.split())
    # pw1 at x = 61 lies in the 2 m cell [60, 62] (column 10 of x), y = 21 in [20, 25] (4):
    # r_e = 0.14 sqrt(2^2 + 5^2) for a rectangular cell (Peaceman 1983, from memory) = 0.754 m
    assert "well pw1 3 cell(s) of column (10, 4), screened 8 m; Peaceman radius 0.754 m" in text


def test_a_sweep_over_a_floating_charge(tmp_path: Path) -> None:
    """[sweep] "hold.1.charge": the island's potential rises by Q / C_island per coulomb, C_island
    the series sum of its two gaps' capacitances (eps0 er A / gap; exact in 1D)."""
    from scipy.constants import epsilon_0

    text = ISLAND.format(charge=0.0, method="direct") + '[sweep]\n"hold.1.charge" = [0.0, 1.0e-12]\n'
    job = tmp_path / "island.toml"
    job.write_text(text)
    variants, _ = expand(tomllib.loads(text), str(job))
    potentials = []
    for v in variants:
        spec = parse_job(v.table, str(job))
        res = run_job(job, tmp_path / f"{spec.name}.zarr", spec=spec)
        potentials.append(res.balance.holds[1].value)
        assert res.balance.holds[1].charge == pytest.approx(v.values["hold.1.charge"], abs=1e-20)
    result = open_result(tmp_path / f"{parse_job(variants[0].table).name}.zarr")
    ez = result.edges(2)
    z_d = 0.5 * (ez[-2] + ez[-1])
    area = 0.02 * 0.01
    c_island = epsilon_0 * 3.0 * area * (1.0 / 0.0025 + 1.0 / (z_d - 0.0025))
    assert potentials[1] - potentials[0] == pytest.approx(1.0e-12 / c_island, rel=1e-9)
