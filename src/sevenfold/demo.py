"""``sevenfold demo``: copy the example jobs into a folder and run each one."""

from __future__ import annotations

import shutil
from importlib import resources
from pathlib import Path

from rich import box
from rich.console import Console
from rich.markup import escape
from rich.table import Table

from .errors import SevenfoldError


def examples_dir() -> Path:
    """The example job files: shipped inside the package, or jobs/ of a source checkout."""
    packaged = Path(str(resources.files("sevenfold") / "examples"))
    if packaged.is_dir() and any(packaged.glob("*.toml")):
        return packaged
    checkout = Path(__file__).resolve().parents[2] / "jobs"
    if checkout.is_dir():
        return checkout
    raise SevenfoldError("the example jobs are missing from this installation; reinstall sevenfold")


def copy_examples(target: Path) -> list[Path]:
    target.mkdir(parents=True, exist_ok=True)
    copied = []
    for src in sorted(examples_dir().glob("*.toml")):
        dst = target / src.name
        shutil.copyfile(src, dst)
        copied.append(dst)
    return copied


def run_demo(target: Path, console: Console) -> int:
    from .runner import run_job

    jobs = copy_examples(target)
    console.print(f"copied {len(jobs)} example jobs to {escape(str(target.resolve()))}")
    table = Table(title="sevenfold demo", box=box.SIMPLE_HEAD, pad_edge=False)
    for col in ("job", "physics", "cells", "method", "iters", "residual", "time s"):
        table.add_column(col, no_wrap=True)
    failures = 0
    for job in jobs:
        console.print(f"running {escape(job.name)} ...")
        try:
            r = run_job(job)
        except SevenfoldError as exc:
            failures += 1
            console.print(f"[red]{escape(job.name)} failed:[/red] {escape(str(exc))}")
            continue
        s = r.solve
        table.add_row(
            r.plan.spec.name, r.plan.spec.physics, f"{r.plan.cells:,}", s.method, str(s.iterations),
            f"{s.final_relative_residual:.1e}", f"{r.seconds['job']:.1f}",
        )
    console.print(table)
    results = target.resolve() / "results"
    console.print(f"results (zarr groups) and residual logs are in {escape(str(results))}")
    console.print("open one with xarray:  xarray.open_zarr(" + repr(str(results / "heat-spreader.zarr")) + ")")
    return 1 if failures else 0
