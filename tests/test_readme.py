"""The README's examples do what it says: its complete job file passes `check` as written
(a new user pastes it first), and its xarray snippet names a result the demo writes."""

from __future__ import annotations

import re
from pathlib import Path

from sevenfold.cli import main

README = Path(__file__).resolve().parents[1] / "README.md"


def _blocks(language: str) -> list[str]:
    return re.findall(rf"```{language}\n(.*?)```", README.read_text(), re.S)


def test_the_complete_job_file_passes_check(tmp_path: Path, capsys) -> None:
    jobs = [b for b in _blocks("toml") if b.startswith("name = ")]
    assert jobs, "the README has no complete job file"
    for i, text in enumerate(jobs):
        job = tmp_path / f"readme-{i}.toml"
        job.write_text(text)
        assert main(["check", str(job)]) == 0, capsys.readouterr()


def test_the_result_snippet_opens_a_demo_result() -> None:
    import tomllib

    from sevenfold.demo import examples_dir

    names = {tomllib.loads(f.read_text())["name"] for f in examples_dir().glob("*.toml")}
    opened = re.findall(r'open_zarr\("sevenfold-demo/results/([^"]+)\.zarr"\)', README.read_text())
    assert opened and set(opened) <= names
