"""Result names work in xarray: every solution and derived field is an attribute of the Dataset,
and results written under the groundwater solution's old name (``head``) are still read."""

from __future__ import annotations

import shutil
import warnings
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
import zarr

from sevenfold.cli import main
from sevenfold.export import open_result
from sevenfold.physics import DERIVED, PHYSICS, RENAMED
from sevenfold.runner import run_job
from sevenfold.spec import parse_job


def output_names(physics: str) -> list[str]:
    """The solution and every array the derived-field catalogue can add to a result."""
    names = [PHYSICS[physics].solution]
    for name, info in DERIVED[physics].items():
        names += [f"{name}_{c}" for c in "xyz"] if info.vector else [name]
    return names


@pytest.mark.parametrize("physics", sorted(PHYSICS))
def test_no_result_name_is_a_dataset_member(physics: str) -> None:
    """A variable whose name is a Dataset method or property is hidden from ``ds.name``."""
    members = set(dir(xr.Dataset))
    assert [n for n in output_names(physics) if n in members] == []


def _job(tmp_path: Path, physics: str) -> tuple[Path, object]:
    table = {
        "name": f"names-{physics}", "physics": physics,
        "grid": {"cells": [5, 4, 3], "size": [1.0, 1.0, 1.0]},
        "material": {"value": 2.0}, "source": {"value": 1.0},
        "boundary": {"x_min": {"type": "dirichlet", "value": 1.0}},
        "solver": {"method": "direct"},
        "output": {"path": "results/{name}.zarr", "fields": list(DERIVED[physics])},
        "probe": [{"name": "p", "point": [0.5, 0.5, 0.5]}],
    }
    return tmp_path / f"{physics}.toml", parse_job(table, "test")


@pytest.mark.parametrize("physics", sorted(PHYSICS))
def test_every_field_is_an_attribute_of_the_opened_dataset(tmp_path: Path, physics: str) -> None:
    job, spec = _job(tmp_path, physics)
    result = run_job(job, spec=spec)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # zarr v3 consolidated metadata notice
        ds = xr.open_zarr(result.output)
    names = output_names(physics)
    assert set(names) <= set(ds.data_vars)
    for name in names:
        value = getattr(ds, name)
        assert isinstance(value, xr.DataArray), f"ds.{name} is {type(value).__name__}, not the array"
        assert value.dims == ("x", "y", "z") and np.isfinite(value.values).all()
    assert isinstance(ds.probe_p, xr.DataArray)


def _make_old(result: Path) -> None:
    """Turn a fresh groundwater result into one as written before the rename: array ``head``."""
    (result / "hydraulic_head").rename(result / "head")
    group = zarr.open_group(str(result), mode="r+")
    group.attrs["solution"] = "head"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        zarr.consolidate_metadata(str(result))


def test_old_results_with_head_are_read_under_the_new_name(tmp_path: Path, capsys) -> None:
    assert RENAMED == {"head": "hydraulic_head"}
    job, spec = _job(tmp_path, "groundwater")
    new = run_job(job, spec=spec).output
    old = tmp_path / "old.zarr"
    shutil.copytree(new, old)
    _make_old(old)
    assert "head" in zarr.open_group(str(old), mode="r") and "hydraulic_head" not in zarr.open_group(str(old), mode="r")
    r = open_result(old)
    assert r.solution == "hydraulic_head"
    assert r.cell_fields()[0] == "hydraulic_head" and "head" not in r.cell_fields()
    np.testing.assert_array_equal(r.array("hydraulic_head"), open_result(new).array("hydraulic_head"))
    assert r.units("hydraulic_head") == "m"
    assert main(["report", str(old), "--quiet"]) == 0
    assert "hydraulic_head (m)" in (tmp_path / "old.report" / "index.html").read_text()
    for fields in ("head", "hydraulic_head"):
        assert main(["export", str(old), "--vti", str(tmp_path / f"{fields}.vti"), "--fields", fields]) == 0
        assert b'Name="hydraulic_head"' in (tmp_path / f"{fields}.vti").read_bytes()
    capsys.readouterr()
