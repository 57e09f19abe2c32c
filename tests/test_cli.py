"""The command line as a user meets it: exit codes, summaries, the demo."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import zarr

from sevenfold.cli import main
from sevenfold.demo import DEMO_MARK, copy_examples, examples_dir
from sevenfold.spec import load_job

from conftest import write_layer_job
from test_store import write_job


def test_check_shows_the_plan(tmp_path: Path, capsys) -> None:
    assert main(["check", str(write_job(tmp_path))]) == 0
    text = capsys.readouterr().out
    assert "12 x 10 x 8 = 960" in text and "memory" in text and "valid" in text


def test_check_says_when_gmg_runs_its_levels_in_float64(tmp_path: Path, capsys) -> None:
    """A 1e8:1 layer: `check` names the float64 preconditioner and the contrast that asks for
    it (solvers/precision.py); 1000:1 says nothing of it."""
    for k, said in ((1e-8, True), (1e-3, False)):
        job = write_layer_job(tmp_path / f"layer{k:g}.toml", k, 16, x=(0.4, 0.6))
        assert main(["check", str(job)]) == 0
        text = " ".join(capsys.readouterr().out.split())
        assert ("float64 preconditioner (coefficient contrast 1.0e+08" in text) is said, text


def test_run_exit_codes(tmp_path: Path, capsys) -> None:
    job = write_job(tmp_path, method="amg")
    assert main(["run", "--no-progress", str(job), "--output", str(tmp_path / "out.zarr")]) == 0
    assert "converged" in capsys.readouterr().out
    assert zarr.open_group(str(tmp_path / "out.zarr"), mode="r").attrs["complete"] is True
    failing = write_job(tmp_path, method="amg", max_iterations=1)
    assert main(["run", "--no-progress", str(failing)]) == 1
    assert "did not converge" in capsys.readouterr().err


def test_examples_are_valid_and_shipped() -> None:
    jobs = sorted(examples_dir().glob("*.toml"))
    assert len(jobs) >= 3
    physics = {load_job(j).physics for j in jobs}
    assert {"heat", "electrostatics", "groundwater"} <= physics


def test_check_off_a_terminal_does_not_wrap(tmp_path: Path) -> None:
    """Piped, a line is as long as it is: the output path, longer than 80 columns, stays whole
    in the check table (rich would wrap at 80 without a terminal)."""
    folder = tmp_path / ("a-folder-with-a-long-name-" + "x" * 80)
    folder.mkdir()
    job = write_job(folder)
    env = {k: v for k, v in os.environ.items() if k != "COLUMNS"}
    proc = subprocess.run([sys.executable, "-m", "sevenfold.cli", "check", str(job)],
                          capture_output=True, text=True, timeout=120, env=env)
    assert proc.returncode == 0, proc.stderr
    (row,) = [line for line in proc.stdout.splitlines() if line.split()[:1] == ["output"]]
    assert str(folder / "results" / "slab.zarr") in row


def test_demo_keeps_an_edited_example(tmp_path: Path) -> None:
    shipped = {p.name: p.read_bytes() for p in examples_dir().glob("*.toml")}
    jobs, kept = copy_examples(tmp_path)
    assert sorted(p.name for p in jobs) == sorted(shipped) and kept == []
    edited = jobs[0]
    edited.write_bytes(shipped[edited.name] + b"# my note\n")
    jobs, kept = copy_examples(tmp_path)
    assert kept == [edited] and edited in jobs
    assert edited.read_bytes() == shipped[edited.name] + b"# my note\n"
    assert all(p.read_bytes() == shipped[p.name] for p in jobs if p != edited)


def test_demo_runs_every_example(tmp_path: Path, capsys, warm_cache: Path) -> None:
    # a queue home of an earlier demo, which the demo replaces; its worker finds the kernels
    # compiled in the install's cache (the warm_cache fixture's); an example edited since the
    # earlier demo is kept and run as it is
    home = tmp_path / "demo" / "queue"
    (home / "jobs").mkdir(parents=True)
    (home / DEMO_MARK).touch()
    edited = tmp_path / "demo" / "heat-spreader.toml"
    mine = (examples_dir() / edited.name).read_text() + "# my note\n"
    edited.write_text(mine)
    assert main(["demo", str(tmp_path / "demo")]) == 0
    text = capsys.readouterr().out
    assert edited.read_text() == mine
    lines = text.splitlines()
    assert any(line.startswith(f"kept your edited {edited}:") and "remove it" in line for line in lines), text
    assert any(line.startswith("submitted") and line.endswith("one after another:") for line in lines), text
    for job in sorted(examples_dir().glob("*.toml")):
        name = load_job(job).name
        result = tmp_path / "demo" / "results" / f"{name}.zarr"
        assert zarr.open_group(str(result), mode="r").attrs["solver"]["converged"] is True
        assert name in text
