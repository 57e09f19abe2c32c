"""Helpers of the queue tests: job files, CLI processes, workers, waiting without timing asserts.

Waits are generous (the machine is shared and has 2 cores); they bound how long a broken
test hangs, they never assert speed.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path
from typing import Any, Callable

from sevenfold.queue.db import Queue
from sevenfold.queue.home import Home, Timing, locate

WAIT = 240.0  # s, the most any single wait in these tests may take

SMALL = """
name = "{name}"
physics = "heat"
[grid]
cells = [{n}, {n}, {n}]
size = [0.1, 0.1, 0.1]
[material]
value = {k}
[source]
value = 1.0e3
[boundary]
x_min = {{ type = "dirichlet", value = 300.0 }}
[solver]
method = "{method}"
[output]
path = "{output}"
"""

# Steady convergence over some 36 AMG-CG iterations of ~0.02 s each on this machine at a calm
# hour (0.8 s of solve; at 32^3 the 30 iterations took 0.19 s, too quick for `watch` at 0.2 s
# to see two): long enough to act on a solve while it runs, short enough to finish. rtol
# 1e-10: the true residual of this system stalls near 5e-12 at 56^3, where 1e-11 was refused.
SLOW = """
name = "{name}"
physics = "generic"
[grid]
cells = [48, 48, 48]
size = [1.0, 1.0, 1.0]
[material]
expression = "exp(6 * sin(37 * x) * sin(41 * y) * sin(43 * z))"
[source]
value = 1.0
[boundary]
x_min = {{ type = "dirichlet", value = 0.0 }}
[solver]
method = "amg"
rtol = 1e-10
max_iterations = 2000
stagnation_window = 2000
[output]
path = "results/{{name}}.zarr"
"""

# Thousands of cheap iterations: a solve that goes on until it is stopped.
ENDLESS = """
name = "{name}"
physics = "generic"
[grid]
cells = [20, 20, 20]
size = [1.0, 1.0, 1.0]
[material]
expression = "where(sin(60 * x) * sin(61 * y) * sin(62 * z) > 0, 1e6, 1e-6)"
[source]
value = 1.0
[boundary]
x_min = {{ type = "dirichlet", value = 0.0 }}
[solver]
method = "amg"
rtol = 1e-300
max_iterations = 100000
stagnation_window = 100000
[output]
path = "results/{{name}}.zarr"
"""


def small_job(folder: Path, name: str, n: int = 6, k: float = 20.0, method: str = "direct",
              output: str = "results/{name}.zarr") -> Path:
    path = folder / f"{name}.toml"
    path.write_text(SMALL.format(name=name, n=n, k=k, method=method, output=output))
    return path


def slow_job(folder: Path, name: str) -> Path:
    path = folder / f"{name}.toml"
    path.write_text(SLOW.format(name=name))
    return path


def endless_job(folder: Path, name: str) -> Path:
    path = folder / f"{name}.toml"
    path.write_text(ENDLESS.format(name=name))
    return path


def make_home(root: Path, warm_cache: Path | None = None) -> Home:
    """A fresh queue home. ``warm_cache`` (the fixture's compiled kernels) is where its workers
    will find them: the session's ``NUMBA_CACHE_DIR``, not a copy (workers share the install's
    cache)."""
    if warm_cache is not None:
        assert os.environ.get("NUMBA_CACHE_DIR") == str(warm_cache)
    return locate(root)


def env(**timing: float) -> dict[str, str]:
    e = dict(os.environ)
    e.pop("SEVENFOLD_HOME", None)
    names = {"heartbeat": "SEVENFOLD_HEARTBEAT_SECONDS", "stale": "SEVENFOLD_STALE_SECONDS",
             "grace": "SEVENFOLD_CANCEL_GRACE"}
    for key, value in timing.items():
        e[names[key]] = str(value)
    return e


def cli(home: Home, *args: str, environ: dict[str, str] | None = None,
        timeout: float = WAIT) -> subprocess.CompletedProcess:
    """``sevenfold ARGS --home HOME`` in its own process, as a user runs it."""
    return subprocess.run(
        [sys.executable, "-m", "sevenfold.cli", *args, "--home", str(home.root)],
        capture_output=True, text=True, timeout=timeout, env=environ or env(),
    )


def submit(home: Home, *files: Path, priority: int = 0, extra: tuple[str, ...] = (),
           environ: dict[str, str] | None = None) -> list[dict[str, Any]]:
    proc = cli(home, "submit", *map(str, files), "--priority", str(priority), "--json", *extra,
               environ=environ)
    assert proc.returncode == 0, proc.stderr
    return json.loads(proc.stdout)


class WorkerProcess:
    """``sevenfold worker`` in the background, its output in a file."""

    def __init__(self, home: Home, *args: str, environ: dict[str, str] | None = None,
                 log: Path | None = None) -> None:
        self.log = log or home.root / f"worker-{time.monotonic_ns()}.out"
        self._fh = open(self.log, "w")
        self.proc = subprocess.Popen(
            [sys.executable, "-m", "sevenfold.cli", "worker", "--home", str(home.root), *args],
            stdout=self._fh, stderr=subprocess.STDOUT, env=environ or env(),
        )

    def output(self) -> str:
        return self.log.read_text()

    def wait(self, timeout: float = WAIT) -> int:
        try:
            return self.proc.wait(timeout)
        finally:
            self._fh.close()

    def stop(self) -> None:
        """SIGTERM (a graceful stop), then wait; SIGKILL only if it hangs."""
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGTERM)
            try:
                self.proc.wait(60)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait()
        self._fh.close()


def wait_for(condition: Callable[[], Any], what: str, timeout: float = WAIT, every: float = 0.05) -> Any:
    """Poll ``condition`` until it is truthy; fail the test (saying what) after ``timeout`` s."""
    deadline = time.monotonic() + timeout
    while True:
        value = condition()
        if value:
            return value
        if time.monotonic() > deadline:
            raise AssertionError(f"timed out after {timeout:.0f} s waiting for {what}")
        time.sleep(every)


def job(home: Home, job_id: int):
    with Queue(home, Timing.from_env()) as q:
        return q.get(job_id)


def iterations_logged(output: str | Path) -> int:
    """Iteration records in the residual log beside ``output`` so far."""
    from sevenfold.residual_log import log_path, read_log

    try:
        return sum(1 for rec in read_log(log_path(Path(output))) if "iteration" in rec)
    except FileNotFoundError:
        return 0


def partials(output: str | Path) -> list[Path]:
    out = Path(output)
    return sorted(out.parent.glob(f".{out.name}.partial-*")) if out.parent.exists() else []
