"""Results open with zarr and xarray; a failed or interrupted write never looks finished."""

from __future__ import annotations

import asyncio
import json
import re
import time
from pathlib import Path

import numpy as np
import pytest
import zarr

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
    original = zarr.storage.LocalStore.set

    async def failing_set(self, key, value, *args, **kwargs):  # the disk fills at the third chunk
        if "/c/" in key:
            calls["n"] += 1
            if calls["n"] == 3:
                raise OSError(28, "No space left on device")
            await asyncio.sleep(0.05)  # the other chunks' writes end after the failure is raised
        return await original(self, key, value, *args, **kwargs)

    monkeypatch.setattr(zarr.storage.LocalStore, "set", failing_set)
    with pytest.raises(OutputError, match=f"cannot write the result {re.escape(str(first.output))}: No space left"):
        run_job(job)  # a bad output is a bad input: one line naming the path and the reason
    monkeypatch.undo()
    assert calls["n"] >= 3  # the failure came while chunks were being written
    time.sleep(0.5)  # long after the other chunks' delayed writes: none may have come back
    # the earlier finished result is untouched, and nothing else is left beside it
    assert is_complete(first.output)
    np.testing.assert_array_equal(zarr.open_group(str(first.output), mode="r")["temperature"][:], before)
    leftovers = [p.name for p in first.output.parent.iterdir() if p.name.startswith(".")]
    assert leftovers == []


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
