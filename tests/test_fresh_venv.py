"""FRESH-VENV CLI TEST (marker ``fresh_venv``; deselect with ``-m "not fresh_venv"``).

Installs this package (a built wheel, not the source tree) into a new virtual environment and
runs its ``sevenfold`` console script as a user does: an output that cannot be written, and a
reader that closes the pipe early (``sevenfold list --json | head -1``).

One environment per test session, made in seconds: ``pip install --no-deps`` of this
project only; its dependencies are the running environment's, reached through a ``.pth``
file (a path listed there is not a site directory, so the running environment's editable
install of sevenfold is not picked up: the test checks that the installed copy answers).
Building the wheel fetches hatchling (PyPI) unless pip's cache has it.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import sysconfig
from pathlib import Path

import pytest

pytestmark = pytest.mark.fresh_venv

ROOT = Path(__file__).resolve().parents[1]
JOB = """
name = "fresh"
physics = "heat"
[grid]
cells = [4, 4, 4]
size = [1.0, 1.0, 1.0]
[material]
value = 1.0
[source]
value = 1.0
[boundary]
x_min = { type = "dirichlet", value = 0.0 }
[solver]
method = "direct"
[output]
path = "results/{name}.zarr"
"""


@pytest.fixture(scope="session")
def venv(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("fresh-venv") / "venv"
    subprocess.run([sys.executable, "-m", "venv", str(root)], check=True, timeout=300)
    py = root / "bin" / "python"
    site = subprocess.run([str(py), "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
                          check=True, capture_output=True, text=True).stdout.strip()
    deps = dict.fromkeys(sysconfig.get_paths()[k] for k in ("purelib", "platlib"))
    (Path(site) / "_running_env_deps.pth").write_text("\n".join(deps) + "\n")
    proc = subprocess.run([str(py), "-m", "pip", "install", "-q", "--no-deps", "--disable-pip-version-check",
                           str(ROOT)], capture_output=True, text=True, timeout=600)
    if proc.returncode != 0:
        pytest.fail(f"pip install of the project into a fresh venv failed:\n{proc.stderr[-2000:]}")
    return root


def _env() -> dict[str, str]:
    env = {k: v for k, v in os.environ.items() if k not in ("SEVENFOLD_HOME", "PYTHONPATH")}
    env["COLUMNS"] = "100"
    return env


def test_the_installed_copy_answers(venv: Path) -> None:
    where = subprocess.run([str(venv / "bin" / "python"), "-c", "import sevenfold; print(sevenfold.__file__)"],
                           capture_output=True, text=True, check=True, env=_env(), cwd=venv).stdout.strip()
    assert Path(where).is_relative_to(venv) and not Path(where).is_relative_to(ROOT / "src")


def test_fresh_install_unwritable_output_is_one_line(venv: Path, tmp_path: Path) -> None:
    job = tmp_path / "fresh.toml"
    job.write_text(JOB)
    proc = subprocess.run([str(venv / "bin" / "sevenfold"), "run", str(job), "-o", "/proc/sevenfold-x/out.zarr"],
                          capture_output=True, text=True, timeout=600, env=_env(), cwd=tmp_path)
    assert proc.returncode == 2
    assert "Traceback" not in proc.stderr
    assert proc.stderr.strip().splitlines() == [
        "error: cannot write the result /proc/sevenfold-x/out.zarr: No such file or directory (at /proc/sevenfold-x)"]


def test_fresh_install_list_json_into_a_closed_pipe_ends_quietly(venv: Path, tmp_path: Path) -> None:
    from sevenfold.queue.db import Queue
    from sevenfold.queue.records import NewJob
    from sevenfold.queue.home import locate

    home = locate(tmp_path / "home")
    with Queue(home) as q:  # enough jobs that the JSON overfills the pipe's buffer
        q.add([(NewJob(f"job-{i}", f"/tmp/o-{i}.zarr", "/tmp/x.toml", "", {}, [], 8, "direct", 1), None, 0)
               for i in range(3000)])
    for args in (["list", "--json"], ["list", "--csv"]):
        # the shell's `sevenfold list --json | head -1`
        proc = subprocess.run(f"'{venv}/bin/sevenfold' {' '.join(args)} --home '{home.root}' | head -1; "
                              "echo \"exit=${PIPESTATUS[0]}\" >&2",
                              shell=True, executable="/bin/bash", capture_output=True, text=True,
                              timeout=300, env=_env())
        assert proc.stdout.strip() in ("[", ",".join(_csv_header())), proc.stdout
        assert proc.stderr.strip() == "exit=0", proc.stderr  # no traceback, exit 0


def _csv_header() -> list[str]:
    from sevenfold.queue.commands import PUBLIC_FIELDS

    return list(PUBLIC_FIELDS)


def test_fresh_install_json_is_whole_when_read_to_the_end(venv: Path, tmp_path: Path) -> None:
    """The quiet ending changes nothing for a reader that takes everything."""
    home = tmp_path / "home"
    job = tmp_path / "fresh.toml"
    job.write_text(JOB)
    proc = subprocess.run([str(venv / "bin" / "sevenfold"), "submit", str(job), "--json", "--home", str(home)],
                          capture_output=True, text=True, timeout=600, env=_env())
    assert proc.returncode == 0, proc.stderr
    assert [j["name"] for j in json.loads(proc.stdout)] == ["fresh"]
    assert "new queue in" in proc.stderr
