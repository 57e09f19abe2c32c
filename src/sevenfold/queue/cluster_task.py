"""The Dask task of ``worker --cluster``: one queued job run on a Dask worker.

:func:`run_task` runs :func:`sevenfold.runner.run_job` (through :func:`.child.run_recorded`)
and answers as a slot's child does. It never opens the queue database: the request carries
the job's table, and the run record and residual log go beside the output. The run's
``distributed.Event`` (:func:`cancel_event_name`) and the release of its future stop the
solve (:class:`TaskMonitor`). The claiming side is :mod:`.cluster`.
"""

from __future__ import annotations

import os
import socket
import time
from pathlib import Path
from typing import Any

from .files import read_runs, remove_partials

POLL_SECONDS = 0.25  # s between a task's looks at its cancel event


def cancel_event_name(run_id: str) -> str:
    """The ``distributed.Event`` that asks a run's task to stop."""
    return f"sevenfold-cancel-{run_id}"


class TaskMonitor:
    """Stops the solve when the run's cancel event is set or its task was released."""

    def __init__(self, event: Any, worker: Any, key: Any) -> None:
        self.event, self.worker, self.key = event, worker, key
        self._last = 0.0
        self._stop = False

    def iteration(self, iteration: int, relative_residual: float, elapsed: float) -> None:
        pass  # the runner writes the residual log beside the output

    def _released(self) -> bool:
        try:
            ts = self.worker.state.tasks.get(self.key)
        except AttributeError:  # a distributed without this state: rely on the event alone
            return False
        return ts is None or ts.state in ("cancelled", "released", "forgotten")

    def stop_requested(self) -> bool:
        now = time.monotonic()
        if self._stop or now - self._last < POLL_SECONDS:
            return self._stop
        self._last = now
        try:
            self._stop = bool(self.event.is_set())
        except Exception:  # the scheduler is briefly unreachable: keep solving
            pass
        self._stop = self._stop or self._released()
        return self._stop


def run_task(request: dict[str, Any]) -> dict[str, Any]:
    """The Dask task: run one queued job on this Dask worker; a reply as the slot child gives.

    ``request``: job, run, attempt (the claim's), output, job_table, job_file (a name for
    messages), threads, worker (the claimer).
    """
    import distributed

    from ..spec import parse_job
    from .child import run_recorded

    worker = distributed.get_worker()
    key = worker.get_current_task()
    event = distributed.Event(cancel_event_name(request["run"]))
    if event.is_set():
        return {"status": "cancelled", "error": "cancelled before it started", "attempt": request["attempt"]}
    output = Path(request["output"])
    starts = sum(1 for r in read_runs(output) if r.get("event") == "start" and r.get("run") == request["run"])
    attempt = int(request["attempt"]) + starts  # the scheduler runs the task again when a worker dies
    remove_partials(output)  # what a killed earlier attempt on this host left
    threads = max(1, int(request.get("threads") or 1))
    try:
        import numba

        numba.set_num_threads(min(threads, numba.config.NUMBA_NUM_THREADS))
    except (ImportError, ValueError):
        pass
    record = {"job": request["job"], "run": request["run"], "attempt": attempt,
              "worker": request.get("worker"), "dask_worker": worker.address,
              "host": socket.gethostname(), "pid": os.getpid()}
    try:
        spec = parse_job(request["job_table"], request["job_file"])
    except Exception as exc:  # JobError: the snapshot was validated at submit, so rare
        return {"status": "failed", "kind": "input", "error": str(exc), "attempt": attempt}
    reply = run_recorded(Path(request["job_file"]), output, TaskMonitor(event, worker, key), record, spec)
    return {**reply, "attempt": attempt}

