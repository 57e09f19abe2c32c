"""Results open with zarr and xarray; a failed or interrupted write never looks finished."""

from __future__ import annotations

import json
import re
import warnings
from pathlib import Path

import numpy as np
import pytest
import zarr

import sevenfold
from sevenfold import store
from sevenfold.errors import OutputError
from sevenfold.residual_log import read_log
from sevenfold.runner import run_job
from sevenfold.store import is_complete

JOB = """
name = "slab"
physics = "heat"
[grid]
cells = [12, 10, 8]
size = [0.12, 0.10, 0.08]
origin = [1.0, 0.0, -0.04]
[material]
value = 20.0
[source]
value = 1.0e4
[boundary]
x_min = {{ type = "dirichlet", value = 300.0 }}
x_max = {{ type = "robin", coefficient = 50.0, reference = 290.0 }}
[solver]
method = "{method}"
rtol = 1e-10
max_iterations = {max_iterations}
[output]
chunks = [5, 5, 5]
"""


def write_job(tmp_path: Path, method: str = "amg", max_iterations: int = 200) -> Path:
    path = tmp_path / "slab.toml"
    path.write_text(JOB.format(method=method, max_iterations=max_iterations))
    return path


def test_result_opens_with_zarr(tmp_path: Path) -> None:
    result = run_job(write_job(tmp_path))
    assert result.output == (tmp_path / "results" / "slab.zarr").resolve()
    group = zarr.open_group(str(result.output), mode="r")
    assert group.attrs["solution"] == "temperature"
    assert group.attrs["complete"] is True
    assert group.attrs["solver"]["converged"] is True
    assert group.attrs["job"]["grid"]["cells"] == [12, 10, 8]
    u = group["temperature"]
    assert u.shape == (12, 10, 8) and u.chunks == (5, 5, 5)
    assert u.metadata.dimension_names == ("x", "y", "z")
    np.testing.assert_allclose(group["x"][:], 1.0 + (np.arange(12) + 0.5) * 0.01)
    np.testing.assert_allclose(group["z"][:], -0.04 + (np.arange(8) + 0.5) * 0.01)
    history = group["residual_history"][:]
    assert history[0] == 1.0 and history[-1] <= 1e-10
    assert len(history) == group.attrs["solver"]["iterations"] + 1


def test_result_opens_with_xarray(tmp_path: Path) -> None:
    xr = pytest.importorskip("xarray")
    result = run_job(write_job(tmp_path))
    ds = xr.open_zarr(result.output)
    assert ds["temperature"].dims == ("x", "y", "z")
    assert ds["temperature"].attrs["units"] == "K"
    assert set(ds.coords) >= {"x", "y", "z"}
    assert ds["x"].attrs["units"] == "m"
    assert float(ds["temperature"].min()) > 290.0
    assert ds.attrs["solution"] == "temperature"


def test_residual_log_follows_the_solve(tmp_path: Path) -> None:
    result = run_job(write_job(tmp_path))
    records = list(read_log(result.residual_log))
    assert records[0]["event"] == "start" and records[-1]["event"] == "end"
    assert records[-1]["converged"] is True
    per_iteration = [r["relative_residual"] for r in records if "iteration" in r]
    group = zarr.open_group(str(result.output), mode="r")
    np.testing.assert_array_equal(per_iteration, group["residual_history"][:])
    assert all(json.loads(line) for line in result.residual_log.read_text().splitlines())


def test_interrupted_write_leaves_no_result(tmp_path: Path, monkeypatch) -> None:
    """A failure halfway through the arrays leaves neither a result nor a stray partial."""
    job = write_job(tmp_path)
    first = run_job(job)
    before = zarr.open_group(str(first.output), mode="r")["temperature"][:]
    calls = {"n": 0}
    original = Path.write_bytes

    def failing_write(self, data):  # the disk fills at the third chunk
        if "/c/" in self.as_posix():
            calls["n"] += 1
            if calls["n"] == 3:
                raise OSError(28, "No space left on device")
        return original(self, data)

    monkeypatch.setattr(Path, "write_bytes", failing_write)
    with pytest.raises(OutputError, match=f"cannot write the result {re.escape(str(first.output))}: No space left"):
        run_job(job)  # a bad output is a bad input: one line naming the path and the reason
    monkeypatch.undo()
    assert 3 <= calls["n"] <= 4  # the failure came while chunks were being written, and stopped them
    # the earlier finished result is untouched, and nothing else is left beside it
    assert is_complete(first.output)
    np.testing.assert_array_equal(zarr.open_group(str(first.output), mode="r")["temperature"][:], before)
    leftovers = [p.name for p in first.output.parent.iterdir() if p.name.startswith(".")]
    assert leftovers == []


def _zarr_documents(folder: Path) -> dict[str, object]:
    return {str(p.relative_to(folder)): json.loads(p.read_text()) for p in sorted(folder.rglob("zarr.json"))}


def _chunk_files(folder: Path) -> dict[str, bytes]:
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*"))
            if p.is_file() and p.name != "zarr.json"}


def test_the_writer_stores_what_zarr_python_stores(tmp_path: Path) -> None:
    """store.write_result writes the zarr v3 group itself (numcodecs' Blosc, no zarr import).
    Check against zarr-python writing the same arrays with the same codec, chunks and
    attributes, then consolidating: the same metadata documents, field for field (NaN and
    infinite attributes included), the same chunk files byte for byte (edge chunks padded,
    chunks of zeros left out), and arrays that zarr-python reads back exactly."""
    from zarr.codecs import BloscCodec

    rng = np.random.default_rng(3)
    field = rng.standard_normal((11, 7, 9))
    field[:5, :5, :5] = 0.0  # one chunk of zeros only
    variables = {
        "u": store.Variable(field, ("x", "y", "z"), {"units": "K", "long_name": "u"}),
        "x": store.Variable(np.linspace(0.0, 1.0, 11), ("x",), {"units": "m"}),
        "residual_history": store.Variable(np.array([1.0, 0.1, 1e-9]), ("iteration",), {"units": "1"}),
        "f32": store.Variable(rng.standard_normal(6).astype(np.float32), ("probe",), {}),
    }
    attrs = {"converged": True, "solver": {"iterations": 3, "rate": float("nan")},
             "limits": [float("inf"), -float("inf")], "note": "caf\u00e9", "none": None}
    ours = store.write_result(tmp_path / "ours.zarr", variables, attrs, (5, 5, 5))

    theirs = tmp_path / "theirs.zarr"
    group = zarr.open_group(store=str(theirs), mode="w", zarr_format=3)
    for name, var in variables.items():
        chunks = (5, 5, 5) if var.data.ndim == 3 else var.data.shape
        group.create_array(name, data=var.data, chunks=chunks, dimension_names=list(var.dims),
                           attributes=var.attrs,
                           compressors=[BloscCodec(cname="lz4", clevel=5, shuffle="shuffle")])
    group.update_attributes({**attrs, "sevenfold_version": sevenfold.__version__})
    group.attrs["complete"] = True
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # (consolidated metadata: an extension to v3)
        zarr.consolidate_metadata(str(theirs))

    mine, reference = _zarr_documents(ours), _zarr_documents(theirs)
    assert list(mine) == list(reference)
    for key in reference:  # (json.loads reads NaN as nan, which != nan: compare the dumps)
        assert json.dumps(mine[key], sort_keys=True) == json.dumps(reference[key], sort_keys=True), key
    assert list(mine["zarr.json"]["attributes"])[-1] == "complete"
    assert _chunk_files(ours) == _chunk_files(theirs)
    assert "u/c/0/0/0" not in _chunk_files(ours) and "u/c/2/1/1" in _chunk_files(ours)
    read = zarr.open_group(str(ours), mode="r")
    for name, var in variables.items():
        np.testing.assert_array_equal(read[name][:], var.data)
        assert read[name].dtype == var.data.dtype


def test_writing_a_result_does_not_import_zarr(tmp_path: Path) -> None:
    """The writer needs numcodecs' Blosc, not zarr (0.14-0.16 s of a fresh process)."""
    import subprocess
    import sys

    code = ("import sys, numpy as np\n"
            "from sevenfold.store import Variable, write_result\n"
            f"write_result({str(tmp_path / 'a.zarr')!r}, {{'u': Variable(np.ones((4, 4, 4)), ('x', 'y', 'z'), {{}})}}, "
            "{}, (2, 2, 2))\n"
            "print('zarr' in sys.modules)\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"
    assert is_complete(tmp_path / "a.zarr")


def test_partial_path_does_not_look_finished(tmp_path: Path) -> None:
    final = tmp_path / "a.zarr"
    tmp = store.partial_path(final)
    assert tmp.parent == final.parent and tmp.name.startswith(".") and tmp.name != final.name
    assert not is_complete(tmp)


def test_failed_solve_keeps_history_and_writes_its_result_marked(tmp_path: Path) -> None:
    """A solve that stops short keeps its work (tests/test_not_converged.py has the rest)."""
    from sevenfold.errors import SolverError

    job = write_job(tmp_path, method="amg", max_iterations=1)
    with pytest.raises(SolverError) as info:
        run_job(job)
    assert len(info.value.history) == 2
    out = tmp_path / "results" / "slab.zarr"
    assert is_complete(out) and zarr.open_group(str(out), mode="r").attrs["converged"] is False
    records = list(read_log(tmp_path / "results" / "slab.residuals.jsonl"))
    assert records[-1]["event"] == "end" and records[-1]["converged"] is False
    assert "did not converge in 1 iterations" in records[-1]["error"]
