"""A queue worker for the benchmarks' runs handed to it: what a user has when a worker runs.

``sevenfold run`` hands its job to an idle one-slot worker on the machine (the default, see
the README's Workers section); the worker's slot process has its modules imported and its
kernels loaded, so the job skips the process start. column.py and speed.py time that path
beside the job run in its own process.
"""

from __future__ import annotations

from pathlib import Path

import run as engine


class Worker:
    """``sevenfold worker`` (one slot, every core) on its own queue home, for the handed-off
    run: its slot child imports and loads the kernels once, then runs the jobs it is given."""

    def __init__(self, folder: Path, env: dict[str, str] | None = None) -> None:
        import os
        import subprocess

        self.home = folder / "queue-home"
        self.log = open(folder / "worker.out", "w")  # noqa: SIM115 - closed in stop()
        self.proc = subprocess.Popen(engine.sevenfold_command() + ["worker", "--home", str(self.home), "--slots", "1"],
                                     stdout=self.log, stderr=subprocess.STDOUT, cwd=folder,
                                     env=None if env is None else dict(os.environ, **env))

    def flow(self, job: Path, result: Path, command: list[str] | None = None) -> tuple[float, float]:
        """What a user types with a worker running: ``sevenfold run -q JOB``, which hands the
        job to the idle worker and follows it to its end (``command`` in place of
        ``sevenfold``, for an A/B). Returns the wall seconds of that process, and the job's
        own seconds from its result."""
        import subprocess
        import time

        import zarr

        t0 = time.perf_counter()
        proc = subprocess.run((command or engine.sevenfold_command()) + ["run", "--home", str(self.home), "-q", str(job)],
                              capture_output=True, text=True, check=False)
        wall = time.perf_counter() - t0
        attrs = dict(zarr.open_group(str(result), mode="r").attrs)
        if proc.returncode != 0 or not attrs.get("converged") or "queue" not in attrs:
            raise RuntimeError(f"the handed-off run of {job} did not finish converged on the worker:\n"
                               f"{proc.stdout}{proc.stderr}")
        return wall, float(attrs["seconds"]["job"])

    def wait_ready(self, timeout: float = 900.0) -> None:
        """Until the worker's slot has loaded (or compiled) its kernels."""
        import time

        deadline = time.monotonic() + timeout
        log = Path(self.log.name)
        while "ready" not in log.read_text():
            if self.proc.poll() is not None or time.monotonic() > deadline:
                raise RuntimeError(f"the worker did not get ready:\n{log.read_text()}")
            time.sleep(0.2)

    def stop(self) -> None:
        self.proc.terminate()
        self.proc.wait(timeout=120)
        self.log.close()
