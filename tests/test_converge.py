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


# ---------------------------------------------------------------- the right scale, geometry, failures
def test_relative_gci_of_an_offset_quantity_uses_a_scale_without_the_offset() -> None:
    # f(h) = f0 + c h^2 with and without an offset of 300: the GCI is the same band, and measured
    # against a range (or a datum) the relative GCI is the same too; against |f1| the offset
    # would shrink it 300-fold (common practice: relative errors of offset quantities are taken
    # against a scale of the variation, not the absolute level).
    fs = [1.0 + 0.8 * h**2 for h in (0.05, 0.1, 0.2)]
    plain = gci_three_grids(*fs, 2.0, 2.0, scale=2.0, relative_to="range 2")
    offset = gci_three_grids(*(f + 300.0 for f in fs), 2.0, 2.0, scale=2.0, relative_to="range 2")
    assert offset.gci == pytest.approx(plain.gci, rel=1e-9)
    assert offset.gci_relative == pytest.approx(plain.gci / 2.0, rel=1e-9)
    assert offset.relative_to == "range 2"
    absolute = gci_three_grids(*(f + 300.0 for f in fs), 2.0, 2.0)
    assert absolute.gci_relative == pytest.approx(plain.gci / (fs[0] + 300.0), rel=1e-9)
    assert absolute.relative_to == "|f1|"


def _mms_with_offset(offset: float) -> str:
    return MMS.replace("value = 0.0", f"value = {offset}").replace(
        'name = "mms"', 'name = "mms"\nphysics = "heat"')


def test_converge_measures_temperatures_against_their_range(tmp_path: Path, capsys) -> None:
    # u = T0 + sin(pi x) sin(pi y) sin(pi z): the probe at the centre is T0 + 1 whatever T0 is.
    studies = {}
    for t0 in (0.0, 300.0):
        job = tmp_path / f"mms{int(t0)}.toml"
        job.write_text(_mms_with_offset(t0))
        studies[t0] = run_study(job, folder=tmp_path / f"s{int(t0)}")
    a, b = studies[0.0].results["probe_middle"], studies[300.0].results["probe_middle"]
    fine = studies[300.0].levels[-1]
    assert b.gci == pytest.approx(a.gci, rel=1e-6)
    assert b.gci_relative == pytest.approx(a.gci_relative, rel=1e-6)  # the offset does not hide the error
    assert b.scale == pytest.approx(fine.solution_range) and 0.9 < fine.solution_range < 1.0
    assert b.relative_to == f"range {fine.solution_range:.4g} K"
    flow = studies[300.0].results["outflow_x_min"]
    assert flow.relative_to == "|f1|" and flow.gci_relative == pytest.approx(flow.gci / abs(flow.f1))
    job = tmp_path / "mms300.toml"
    datum = run_study(job, folder=tmp_path / "datum", datum=300.0).results["probe_middle"]
    assert datum.gci_relative == pytest.approx(datum.gci / abs(datum.f1 - 300.0), rel=1e-12)
    assert datum.relative_to == "|f1 - datum 300 K|"
    assert main(["converge", str(job), "--folder", str(tmp_path / "cli")]) == 0
    text = " ".join(capsys.readouterr().out.split())
    assert "% of" in text and "relative to the range of the solution on the finest level, 0.9" in text


def test_a_study_whose_geometry_changes_between_levels_is_flagged(tmp_path: Path, capsys) -> None:
    # A layer 0.12 thick: one cell of 1/6 on level 0, one of 1/12 on level 1, three of 1/24 on
    # level 2: the levels solve three different layers.
    job = tmp_path / "layer.toml"
    job.write_text(MMS.replace("[material]\nvalue = 1.0\n", "[material]\nvalue = 1.0\n[[material.region]]\n"
                               "box = { min = [0.0, 0.0, 0.0], max = [1.0, 1.0, 0.12] }\nvalue = 5.0\n"))
    study = run_study(job, folder=tmp_path / "s")
    vols = [lv.selected["material.region.0"]["volume"] for lv in study.levels]
    assert vols == pytest.approx([1 / 6, 1 / 12, 3 / 24])
    (change,) = study.geometry_changes
    assert change.startswith("material.region.0: the selected volume changes between levels (0.1667, 0.08333, 0.125 m^3; shape 0.12 m^3)")
    assert main(["converge", str(job), "--folder", str(tmp_path / "cli")]) == 0
    out = " ".join(capsys.readouterr().out.split())
    assert "selected volume per level" in out and "warning: material.region.0: the selected volume changes" in out


def test_a_failing_level_is_named(tmp_path: Path, capsys) -> None:
    # A hold 0.02 thick around z = 0.25 holds the centres at 0.25 on 6 cells, none on 12.
    job = tmp_path / "thin.toml"
    job.write_text(MMS + '[[hold]]\nbox = { min = [0.0, 0.0, 0.24], max = [1.0, 1.0, 0.26] }\nvalue = 0.0\n')
    assert main(["converge", str(job), "--folder", str(tmp_path / "s")]) == 2
    err = " ".join(capsys.readouterr().err.split())
    assert "level 1 (12 x 12 x 12 cells): hold.0: selects no cell centre" in err and "Traceback" not in err


def test_the_figure_gives_no_order_to_an_oscillatory_quantity() -> None:
    """A made-up study of three levels: ``smooth`` follows f0 + c h^2, ``wobbly`` swings about
    its limit. The legend gives the first its order and says the second has none; the second
    is drawn as its change from the finest level, with no extrapolated value in it."""
    from sevenfold.report_study import draw_study
    from sevenfold.study import Level, Study

    hs = [0.04, 0.02, 0.01]
    smooth = [1.0 + 0.5 * h**2 for h in hs]
    wobbly = [2.0 + 0.01 * (-1) ** i * h for i, h in enumerate(hs)]
    levels = [Level((n, n, n), h, (2.0, 2.0, 2.0), {"smooth": s, "wobbly": w}, "")
              for n, h, s, w in zip((4, 8, 16), hs, smooth, wobbly)]
    results = {key: gci_three_grids(v[2], v[1], v[0], 2.0, 2.0) for key, v in
               (("smooth", smooth), ("wobbly", wobbly))}
    assert results["wobbly"].convergence == "oscillatory" and math.isfinite(results["wobbly"].order)
    fig = draw_study(Study("made-up", "K", "W", levels, results))
    try:
        lines = {ln.get_label(): ln for ln in fig.axes[0].get_lines()}
        legend = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    finally:
        import matplotlib.pyplot as plt

        plt.close(fig)
    assert f"smooth (p = {results['smooth'].order:.2f})" in legend
    (label,) = [t for t in legend if t.startswith("wobbly")]
    assert "oscillatory, no order" in label and "p =" not in label
    ys = lines[label].get_ydata()
    expected = [abs(w - wobbly[-1]) / abs(wobbly[-1]) for w in wobbly[:-1]]
    assert list(ys) == pytest.approx(expected, rel=1e-12)
