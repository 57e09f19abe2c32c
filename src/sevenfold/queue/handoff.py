"""``sevenfold run`` handed to a running worker: the same job, run by a process whose
kernels are already loaded.

A worker on this machine with a free slot, in the queue home ``run`` would use, and an
empty queue (so the job starts at once): then ``run`` validates the job file as ``submit``
does (the spec and the plan; the worker builds the problem), queues it with one attempt,
follows its residual log and reports as if it had run it. Otherwise nothing is touched (no
queue home is made) and ``run`` solves in its own process. Queue logic only: what is shown
is the caller's (:mod:`sevenfold.cli_run`).
"""

from __future__ import annotations

import socket
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

from ..errors import QueueError
from .db import Queue
from .records import FINISHED, Job
from .files import pid_alive, remove_partials
from .home import Home, has_queue, home_root
from .wake import Bell, job_bell, ring
from .watch import Progress, read_progress
from .worker import cores

POLL = 0.05  # s between looks at the job and its residual log, for a job's first seconds
SLOW_POLL = 0.5  # s between looks after QUICK (the whole log is read each time, as watch does);
# the worker rings the job's bell when its run ends, which ends the wait at once
QUICK = 2.0  # s
LOST_AFTER = 2.0  # s a queued hand-off may wait with no worker left to take it
RECOVER_EVERY = 5.0  # s between looks for runs of workers that died


@dataclass(frozen=True)
class Handed:
    """A job ``run`` queued for ``worker``."""

    queue: Queue
    job: Job
    worker: str


def _free_workers(queue: Queue) -> list[str]:
    """Live slot workers on this machine whose slot has every core (one slot) and is free.

    A slot of a worker with several has a share of the cores, and the job would solve on
    fewer threads than ``run`` uses here. Cluster workers (``worker --cluster``) are left
    out: their jobs run elsewhere.
    """
    every_core = cores()
    host = socket.gethostname()
    running: dict[str | None, int] = {}
    for j in queue.jobs(state="running"):
        running[j.worker] = running.get(j.worker, 0) + 1
    return [str(w["id"]) for w in queue.workers(alive_only=True)
            if w["host"] == host and not w["id"].endswith(":dask") and pid_alive(int(w["pid"]))
            and max(1, every_core // int(w["slots"])) >= every_core and running.get(w["id"], 0) < int(w["slots"])]


def idle_worker(queue: Queue) -> str | None:
    """A free worker (:func:`_free_workers`) when no job waits, so a job queued now starts at
    once; else None."""
    if queue.counts()["queued"]:
        return None
    free = _free_workers(queue)
    return free[0] if free else None


def open_queue(home: str | Path | None = None) -> Queue | None:
    """The queue in ``home`` (else ``$SEVENFOLD_HOME``, else the user data folder) when one
    exists there; None (and nothing made) when there is none or it cannot be opened."""
    if not has_queue(home):
        return None
    try:
        return Queue(Home(home_root(home)))
    except QueueError:
        return None


def hand_off(job_file: str | Path, output: str | Path | None, home: str | Path | None = None) -> Handed | None:
    """Queue ``job_file`` for an idle worker; None when there is no such worker (or the
    file is a sweep, which ``run`` does not take). A bad job raises its JobError here."""
    from .submit import enqueue, prepare

    queue = open_queue(home)
    if queue is None:
        return None
    worker = idle_worker(queue)
    if worker is None:
        queue.close()
        return None
    prepared = prepare(job_file, queue.home, output, build=False)
    if prepared.batch is not None or len(prepared.jobs) != 1:
        queue.close()
        return None
    job = enqueue(queue, [prepared], max_attempts=1)[0]
    for w in queue.workers(alive_only=True):  # it looks at once instead of at its next poll
        if w["id"] == worker:
            ring(queue.home.root, int(w["pid"]))
    return Handed(queue, job, worker)


def follow(handed: Handed, on_progress: Callable[[Job, Progress], None],
           poll: float = POLL) -> Job | None:
    """Wait for the handed job to end, calling ``on_progress`` whenever its residual log
    grew; returns the finished job, or None when it waited :data:`LOST_AFTER` s with no
    free worker to take it (the worker stopped, or another job took its slot first): it is
    then cancelled, and the caller runs it itself."""
    queue, job_id = handed.queue, handed.job.id
    bell = Bell(queue.home.root, job_bell(job_id))
    try:
        return _follow(queue, job_id, on_progress, poll, bell)
    finally:
        bell.close()


def _follow(queue: Queue, job_id: str, on_progress: Callable[[Job, Progress], None], poll: float,
            bell: Bell) -> Job | None:
    def sleep(seconds: float) -> None:  # until the next look, or the run's end
        bell.wait(seconds) if bell.listening else time.sleep(seconds)

    start = time.monotonic()
    seen = -1
    waiting_since: float | None = None
    last_recovery = time.monotonic()
    while True:
        if time.monotonic() - last_recovery > RECOVER_EVERY:  # a dead worker's run comes back
            for r in queue.recover_stale():
                remove_partials(Path(r.output))
            last_recovery = time.monotonic()
        job = queue.get(job_id)
        if job.state in FINISHED:
            p = read_progress(job.output, since=job.started)
            if len(p.rows) != seen:
                on_progress(job, p)
            return job
        if job.state == "queued":
            now = time.monotonic()
            waiting_since = waiting_since or now
            if now - waiting_since > LOST_AFTER and not _free_workers(queue):
                done = dict((j.id, what) for j, what in queue.cancel([job_id]))
                if done.get(job_id) == "cancelled":
                    return None
            sleep(poll)
            continue
        waiting_since = None
        p = read_progress(job.output, since=job.started)
        if len(p.rows) != seen:
            seen = len(p.rows)
            on_progress(job, p)
        sleep(poll if time.monotonic() - start < QUICK else max(poll, SLOW_POLL))
