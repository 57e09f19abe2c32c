"""sevenfold report (figures and an offline HTML page) and export to VTK image data."""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest
import zarr
from test_converge import png_size
from test_derived_probes import JOB

from sevenfold.cli import main
from sevenfold.export import open_result
from sevenfold.report import DPI, SIZES
from sevenfold.report_slices import slice_figsize


@pytest.fixture(scope="module")
def result(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("report")
    job = folder / "probed.toml"
    job.write_text(JOB)
    assert main(["run", "--no-progress", str(job)]) == 0
    return folder / "results" / "probed.zarr"


def test_report_files_and_links(result: Path, capsys) -> None:
    assert main(["report", str(result)]) == 0
    folder = result.with_name("probed.report")
    assert str(folder / "index.html") in " ".join(capsys.readouterr().out.split())
    opened = open_result(result, warn=False)
    sizes = dict(SIZES, **{"slices.png": slice_figsize([float(np.ptp(opened.edges(a))) for a in range(3)])})
    for name in ("residuals.png", "slices.png", "probes.png"):
        w, h = png_size(folder / name)
        assert (w, h) == (round(sizes[name][0] * DPI), round(sizes[name][1] * DPI)), name
        assert (folder / name).stat().st_size > 10_000  # a drawn figure, not an empty canvas
    page = (folder / "index.html").read_text()
    refs = re.findall(r"""(?:src|href)\s*=\s*['"]([^'"]+)['"]""", page)
    assert sorted(refs) == ["probes.png", "residuals.png", "slices.png"]
    for ref in refs:
        assert "://" not in ref and (folder / ref).is_file()  # offline, relative, present
    for text in ("Balance", "out through x_min", "relative imbalance", "Solver", "tc1", "temperature (K)",
                 "Headline numbers", "temperature max"):
        assert text in page
    headline = zarr.open_group(str(result), mode="r").attrs["headline"]
    assert f"{headline['max']['value']:.6g} K at (" in page  # the stored numbers, as stored


def read_vti(path: Path) -> tuple[dict, dict[str, np.ndarray]]:
    """A small reader of VTK XML ImageData with raw appended data and UInt64 block headers
    (the layout described in VTK's file-format documentation, 'XML File Formats'; from memory)."""
    raw = path.read_bytes()
    start = raw.index(b"<AppendedData")
    underscore = raw.index(b"_", raw.index(b">", start)) + 1
    head = raw[:start].decode() + "</VTKFile>"
    root = ET.fromstring(head)
    assert root.get("type") == "ImageData" and root.get("header_type") == "UInt64"
    image = root.find("ImageData")
    info = {k: image.get(k) for k in ("WholeExtent", "Origin", "Spacing")}
    arrays = {}
    dims = [int(v) for v in info["WholeExtent"].split()]
    shape = (dims[1] - dims[0], dims[3] - dims[2], dims[5] - dims[4])
    byte_order = "<" if root.get("byte_order") == "LittleEndian" else ">"
    for da in image.iter("DataArray"):
        assert da.get("type") == "Float64" and da.get("format") == "appended"
        offset = underscore + int(da.get("offset"))
        nbytes = int(np.frombuffer(raw[offset:offset + 8], dtype=byte_order + "u8")[0])
        flat = np.frombuffer(raw[offset + 8:offset + 8 + nbytes], dtype=byte_order + "f8")
        arrays[da.get("Name")] = flat.reshape(shape, order="F")  # VTK: x varies fastest
    return info, arrays


def test_vti_reads_back_with_values_spacing_and_origin(result: Path, tmp_path: Path) -> None:
    target = tmp_path / "out" / "probed.vti"
    assert main(["export", str(result), "--vti", str(target)]) == 0
    info, arrays = read_vti(target)
    assert info["WholeExtent"].split() == ["0", "6", "0", "5", "0", "4"]
    np.testing.assert_allclose([float(v) for v in info["Spacing"].split()], [0.1, 0.1, 0.1], rtol=1e-15)
    np.testing.assert_allclose([float(v) for v in info["Origin"].split()], [0.0, 0.0, -0.2], rtol=1e-15)
    group = zarr.open_group(str(result), mode="r")
    expected = {"temperature", "heat_flux_x", "heat_flux_y", "heat_flux_z", "temperature_gradient_magnitude",
                "conductivity", "heat_source"}
    assert set(arrays) == expected
    for name in expected:
        np.testing.assert_array_equal(arrays[name], group[name][...])


def test_export_refusals(result: Path, tmp_path: Path, capsys) -> None:
    assert main(["export", str(result), "--vti", str(tmp_path / "a.vtk")]) == 2
    assert "must end in .vti" in capsys.readouterr().err
    assert main(["export", str(result), "--vti", str(tmp_path / "a.vti"), "--fields", "pressure"]) == 2
    assert "no cell field 'pressure'" in capsys.readouterr().err
    assert main(["report", str(tmp_path / "absent.zarr")]) == 2
    assert "no such result" in capsys.readouterr().err
    assert main(["export", str(result), "--vti", str(tmp_path / "t.vti"), "--fields", "temperature"]) == 0
    _, arrays = read_vti(tmp_path / "t.vti")
    assert list(arrays) == ["temperature"]


def test_a_folder_that_is_no_result_is_refused(tmp_path: Path, capsys) -> None:
    (tmp_path / "plain").mkdir()
    (tmp_path / "plain" / "notes.txt").write_text("not a result")
    assert main(["report", str(tmp_path / "plain")]) == 2
    err = capsys.readouterr().err
    assert "not a" in err and "Traceback" not in err
    assert main(["export", str(tmp_path / "plain"), "--vti", str(tmp_path / "x.vti")]) == 2
