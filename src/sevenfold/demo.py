"""``sevenfold demo``: copy the example jobs into a folder, queue them and drain the queue."""

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


def copy_examples(target: Path) -> tuple[list[Path], list[Path]]:
    """The example jobs in ``target``: (every job file, those kept as they were). An example
    already there that differs from the shipped one is the user's edit: it is kept, never
    overwritten, and the demo runs it."""
    target.mkdir(parents=True, exist_ok=True)
    jobs, kept = [], []
    for src in sorted(examples_dir().glob("*.toml")):
        dst = target / src.name
        if dst.exists() and dst.read_bytes() != src.read_bytes():
            kept.append(dst)
        else:
            shutil.copyfile(src, dst)
        jobs.append(dst)
    return jobs, kept


DEMO_MARK = ".sevenfold-demo-queue"  # marks a queue home the demo made and may replace


def fresh_queue_home(path: Path):
    """An empty queue home at ``path``; an earlier demo's queue there is replaced."""
    from .queue.home import locate

    if path.exists():
        if not (path / DEMO_MARK).exists():
            raise SevenfoldError(f"{str(path)!r} exists and is not a demo queue; choose another folder")
        for entry in path.iterdir():
            shutil.rmtree(entry) if entry.is_dir() else entry.unlink()
    path.mkdir(parents=True, exist_ok=True)
    (path / DEMO_MARK).touch()
    return locate(path)


def run_demo(target: Path, console: Console) -> int:
    """Copy the examples to ``target`` (keeping any the user edited there), queue them in
    ``target/queue``, drain it with a worker."""
    from .queue.db import Queue
    from .queue.submit import submit
    from .queue.worker import Worker, WorkerOptions

    jobs, kept = copy_examples(target)
    console.print(f"copied {len(jobs) - len(kept)} example jobs to {escape(str(target.resolve()))}")
    for path in kept:
        console.print(f"kept your edited {escape(str(path))}: the demo runs it as it is; for the "
                      "original, remove it or give the demo another folder (sevenfold demo DIR)")
    home = fresh_queue_home(target.resolve() / "queue")
    with Queue(home) as queue:
        queued = submit(queue, jobs)
        console.print(f"submitted {len(queued)} jobs to the queue in {escape(str(home.root))}; "
                      "a worker runs them one after another:")
        Worker(home, WorkerOptions(slots=1, drain=True),
               say=lambda text: console.print(text, markup=False, highlight=False, soft_wrap=True)).run()
        finished = [queue.get(j.id) for j in queued]
    table = Table(title="sevenfold demo", box=box.SIMPLE_HEAD, pad_edge=False)
    for col in ("job", "physics", "cells", "method", "iters", "residual", "time s"):
        table.add_column(col, no_wrap=True)
    failures = 0
    for j in finished:
        s = j.summary or {}
        physics = str((j.job_table or {}).get("physics", "generic"))
        if j.state != "done":
            failures += 1
            console.print(f"[red]{escape(j.name)} {j.state}:[/red] {escape(j.error or '')}")
            table.add_row(escape(j.name), physics, f"{j.cells:,}", j.method, j.state, "", "")
            continue
        table.add_row(
            escape(j.name), physics, f"{j.cells:,}", str(s.get("method")), str(s.get("iterations")),
            f"{s.get('final_relative_residual', float('nan')):.1e}",
            f"{(s.get('seconds') or {}).get('job', float('nan')):.1f}",
        )
    console.print(table)
    results = target.resolve() / "results"
    console.print(f"results (zarr groups) and residual logs are in {escape(str(results))}")
    console.print(f"the queue: sevenfold list --home {escape(str(home.root))}")
    console.print("open one with xarray (pip install xarray):  xarray.open_zarr("
                  + repr(str(results / "heat-spreader.zarr")) + ")")
    return 1 if failures else 0
