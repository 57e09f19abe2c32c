"""``sevenfold worker --cluster ADDRESS``: queued jobs run as tasks on a Dask cluster.

A thin shell: Dask's distributed scheduler places and runs the tasks; this module claims jobs
from the queue as a local worker does, submits each as one task running
:func:`sevenfold.runner.run_job` (through :func:`.child.run_recorded`) on a Dask worker, and
records what comes back. The claiming process keeps the heartbeat; the Dask workers never
open the queue database.

* The task carries the job's table, so a Dask worker needs no access to the queue home; the
  output (and any input file a job names, snapshotted into the home) must be on storage every
  Dask worker reaches under the same path.
* Progress: the task writes the residual log and the run record beside the output, where
  ``watch``, ``log`` and ``show`` read them.
* Cancel: a ``distributed.Event`` per run (``sevenfold-cancel-<run>``) that the task polls
  every :data:`.cluster_task.POLL_SECONDS`; a task that has not stopped after the grace period has its
  future cancelled. The task also stops when its future is released (its claimer is gone).
* A lost Dask worker: the scheduler runs the task again elsewhere (up to
  ``distributed.scheduler.allowed-failures`` times, then ``KilledWorker``). Each start appends
  a line to the run record; the claimer counts them as the job's attempts and fails the job
  once they exceed its ``max_attempts``.
* Resources: ``memory`` (the job's estimate, bytes) and ``threads`` are requested only when
  the cluster's workers declare those resources (``dask worker --resources``).

What runs on the Dask worker (:func:`.cluster_task.run_task`) is :mod:`.cluster_task`; this
module is the claiming side. ``distributed`` is imported only in these two, and only when
``--cluster`` is used.
"""

from __future__ import annotations

import os
import signal
import socket
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

from ..errors import QueueError
from ..memory import human
from .cluster_task import cancel_event_name, run_task
from .db import Queue
from .records import Claim
from .files import read_runs, remove_partials
from .home import Home, Timing
from .worker import say_in_handler, stop_notice

INSTALL_HINT = "the cluster worker needs Dask: pip install 'sevenfold[cluster]'"
CONNECT_TIMEOUT = 5.0  # s to reach the scheduler before giving up
INFO_SECONDS = 2.0  # s between looks at the cluster's workers (capacity, memory)


def _distributed():
    try:
        import distributed
    except ImportError:
        raise QueueError(INSTALL_HINT) from None
    return distributed


def connect(address: str) -> Any:
    """A ``distributed.Client`` on ``address``; an unreachable scheduler raises QueueError."""
    distributed = _distributed()
    if not address.strip():
        raise QueueError("--cluster needs the scheduler's address, e.g. tcp://host:8786")
    try:
        return distributed.Client(address, timeout=f"{CONNECT_TIMEOUT:g}s", set_as_default=False)
    except (OSError, TimeoutError, ValueError) as exc:
        detail = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise QueueError(f"cannot reach the Dask scheduler at {address} within {CONNECT_TIMEOUT:g} s "
                         f"({detail}); nothing was claimed, the queued jobs stay queued") from None


@dataclass(frozen=True)
class ClusterOptions:
    """``address`` of the scheduler; ``slots``: jobs in flight (default: what the cluster's
    workers run at once); ``threads`` per job; ``drain``; ``memory_bytes``: refuse jobs whose estimate
    exceeds it (default: the largest Dask worker's memory); ``time_limit`` as for local workers."""

    address: str
    slots: int | None = None
    threads: int = 1
    drain: bool = False
    memory_bytes: int | None = None
    time_limit: float | None = None
    poll: float = 0.1


@dataclass
class Running:
    claim: Claim
    future: Any
    event: Any
    max_attempts: int
    attempt: int
    limit: float | None
    reason: str | None = None  # why the claimer asked it to stop: cancel | time | shutdown | lost | attempts
    asked_at: float = 0.0
    extra: dict[str, Any] = field(default_factory=dict)


class ClusterWorker:
    """Claims queued jobs and runs each as a task on the Dask cluster at ``options.address``."""

    def __init__(self, home: Home, options: ClusterOptions, timing: Timing | None = None,
                 say: Callable[[str], None] | None = None) -> None:
        _distributed()  # a missing Dask is said before anything else happens
        if options.slots is not None and options.slots < 1:
            raise QueueError(f"--slots must be at least 1, got {options.slots}")
        if options.threads < 1:
            raise QueueError(f"--threads must be at least 1, got {options.threads}")
        self.home, self.options = home, options
        self.timing = timing or Timing.from_env()
        self._say = say or (lambda text: print(text, flush=True))
        self.id = f"{socket.gethostname()}:{os.getpid()}:dask"
        self.stopping = threading.Event()
        self.running: dict[str, Running] = {}  # by run id
        self.lost: set[str] = set()
        self._lock = threading.Lock()
        self._info_at = -1e9
        self._capacity = 1
        self._memory: int | None = None
        self._resources: set[str] = set()

    def say(self, text: str) -> None:
        self._say(f"{time.strftime('%H:%M:%S')}  {text}")

    def request_stop(self, signum: int, frame: object = None) -> None:
        """A signal's handler: say so, stop claiming; running tasks are asked to stop and
        their jobs requeued."""
        say_in_handler(self.say, stop_notice(signum, [r.claim for r in list(self.running.values())]))
        self.stopping.set()

    # ---------------------------------------------------------------- cluster facts
    def _refresh(self, client: Any) -> None:
        now = time.monotonic()
        if now - self._info_at < INFO_SECONDS:
            return
        self._info_at = now
        try:
            workers = client.scheduler_info(n_workers=-1)["workers"].values()
        except TypeError:  # older distributed: no n_workers
            workers = client.scheduler_info()["workers"].values()
        except Exception as exc:
            self.say(f"could not ask the scheduler about its workers: {exc}")
            return
        workers = list(workers)
        self._resources = {name for w in workers for name in (w.get("resources") or {})}
        if "threads" in self._resources:  # each task holds --threads of a worker's declared threads
            at_once = sum(int((w.get("resources") or {}).get("threads", 0)) // self.options.threads
                          for w in workers)
        else:  # each task holds one Dask thread
            at_once = sum(int(w.get("nthreads", 1)) for w in workers)
        self._capacity = self.options.slots or max(1, at_once)
        if self.options.memory_bytes:
            self._memory = self.options.memory_bytes
        elif workers:
            declared = [w["resources"]["memory"] for w in workers if "memory" in (w.get("resources") or {})]
            limits = [w.get("memory_limit") or 0 for w in workers]
            biggest = int(max(declared) if declared else max(limits))
            self._memory = max(self._memory or 0, biggest) or None  # workers may come and go
        # no workers yet: no refusals, the tasks wait for workers

    # ---------------------------------------------------------------- submitting
    def _submit(self, client: Any, queue: Queue) -> bool:
        distributed = _distributed()
        result = queue.claim(self.id, self._memory)
        for r in result.recovered:
            remove_partials(Path(r.output))
            self.say(f"took back {r.id} {r.name} from a silent worker: {r.outcome}")
        for job_id, name, reason in result.refused:
            self.say(f"failed {job_id} {name}: {reason}")
        claim = result.claim
        if claim is None:
            return False
        max_attempts = queue.get(claim.id).max_attempts
        request = {"job": claim.id, "run": claim.run_id, "attempt": claim.attempt, "output": claim.output,
                   "job_table": claim.job_table, "job_file": str(self.home.job_file(claim.id)),
                   "threads": self.options.threads, "worker": self.id}
        resources = {}
        if "memory" in self._resources:
            resources["memory"] = claim.memory_bytes
        if "threads" in self._resources:
            resources["threads"] = self.options.threads
        event = distributed.Event(cancel_event_name(claim.run_id), client=client)
        try:
            future = client.submit(run_task, request, key=f"sevenfold-{claim.id}-{claim.run_id[:12]}",
                                   pure=False, resources=resources or None)
        except Exception as exc:
            queue.requeue(claim.id, claim.run_id, f"could not submit to the Dask scheduler: {exc}")
            self.say(f"requeued {claim.id} {claim.name}: could not submit to the Dask scheduler: {exc}")
            self.stopping.set()
            return False
        limit = claim.time_limit if claim.time_limit is not None else self.options.time_limit
        with self._lock:
            self.running[claim.run_id] = Running(claim, future, event, max_attempts, claim.attempt, limit)
        asked = ", ".join(f"{k} {human(v) if k == 'memory' else v}" for k, v in resources.items())
        self.say(f"submitted {claim.id} {claim.name} (attempt {claim.attempt}"
                 + (f", resources {asked}" if asked else "") + ")")
        return True

    # ---------------------------------------------------------------- following
    def _attempts(self, queue: Queue, r: Running) -> None:
        """Count the task's starts in the run record; a restart is a new attempt."""
        starts = [x for x in read_runs(Path(r.claim.output))
                  if x.get("event") == "start" and x.get("run") == r.claim.run_id]
        attempt = r.claim.attempt + len(starts) - 1
        if starts and attempt > r.attempt:
            r.attempt = attempt
            where = starts[-1].get("dask_worker", "another Dask worker")
            queue.note_attempt(r.claim.id, r.claim.run_id, attempt,
                               f"attempt {attempt} on {where}: the Dask worker running it was lost")
            self.say(f"{r.claim.id} {r.claim.name}: attempt {attempt} on {where} (a Dask worker was lost)")
            if attempt > r.max_attempts and r.reason is None:
                self._ask_stop(r, "attempts")

    def _ask_stop(self, r: Running, reason: str) -> None:
        r.reason, r.asked_at = reason, time.monotonic()
        try:
            r.event.set()
        except Exception as exc:
            self.say(f"could not set the cancel event of {r.claim.id}: {exc}")

    def _watch(self, queue: Queue, r: Running) -> None:
        if r.reason is None:
            if self.home.cancel_flag(r.claim.id).exists():
                self._ask_stop(r, "cancel")
            elif r.limit is not None and time.time() - r.claim.started > r.limit:
                self._ask_stop(r, "time")
            elif self.stopping.is_set():
                self._ask_stop(r, "shutdown")
            elif r.claim.run_id in self.lost:
                self._ask_stop(r, "lost")
        elif time.monotonic() - r.asked_at > self.timing.grace and not r.future.done():
            r.future.cancel()
            r.extra["killed"] = True

    def _end(self, queue: Queue, r: Running) -> None:
        c = r.claim
        status = r.future.status
        reply: dict[str, Any] | None = None
        error: str | None = None
        if status == "finished":
            try:
                reply = r.future.result(timeout=30)
            except Exception as exc:
                error = f"the Dask task's result could not be fetched: {exc}"
        elif status == "error":
            try:
                exc = r.future.exception(timeout=30)
            except Exception as exc2:
                exc = exc2
            if type(exc).__name__ == "KilledWorker":
                error = (f"the Dask workers running it died {r.attempt} time(s); the scheduler gave up "
                         "(distributed.scheduler.allowed-failures)")
            else:
                error = f"the Dask task failed: {type(exc).__name__}: {exc}"
        if reply is not None and int(reply.get("attempt", r.attempt)) > r.attempt:
            r.attempt = int(reply["attempt"])
            queue.note_attempt(c.id, c.run_id, r.attempt, f"attempt {r.attempt}: the Dask worker running it was lost")
        if reply is not None and reply.get("status") == "cancelled":
            how = ("stopped before it started" if "before it started" in str(reply.get("error"))
                   else "stopped at its next iteration")
        else:
            how = f"its Dask future was cancelled after the {self.timing.grace:g} s grace period"
        if reply is not None and reply.get("status") == "done":
            if queue.finish(c.id, c.run_id, reply["summary"]):
                s = reply["summary"]
                self.say(f"done {c.id} {c.name}: {s.get('iterations')} iterations, relative residual "
                         f"{s.get('final_relative_residual', float('nan')):.1e}")
            else:
                self.say(f"{c.id} {c.name}: finished, but the job was taken back from this worker meanwhile")
        elif reply is not None and reply.get("status") == "failed":
            queue.fail(c.id, c.run_id, reply.get("error", "failed for an unknown reason"), reply.get("kind"))
            self.say(f"failed {c.id} {c.name}: {reply.get('error')}")
        elif error is not None and r.reason is None:
            queue.fail(c.id, c.run_id, error)
            self.say(f"failed {c.id} {c.name}: {error}")
        elif r.reason == "cancel":
            queue.cancelled(c.id, c.run_id, f"cancelled while running; {how}")
            self.say(f"cancelled {c.id} {c.name} ({how})")
        elif r.reason == "time":
            queue.fail(c.id, c.run_id, f"exceeded its time limit of {r.limit:g} s; {how}")
            self.say(f"failed {c.id} {c.name}: exceeded its time limit")
        elif r.reason == "attempts":
            queue.fail(c.id, c.run_id, f"Dask workers died while running it; attempt {r.attempt} is more "
                                       f"than the {r.max_attempts} allowed; {how}")
            self.say(f"failed {c.id} {c.name}: too many attempts")
        elif r.reason == "lost":
            self.say(f"{c.id} {c.name}: taken back from this worker (heartbeat went stale); {how}")
        elif r.reason == "shutdown":
            queue.requeue(c.id, c.run_id, f"worker {self.id} shut down; {how}")
            self.say(f"requeued {c.id} {c.name} (worker shutting down)")
        else:  # the scheduler dropped the task (restarted, or it lost the task's data)
            queue.requeue(c.id, c.run_id, "the Dask scheduler dropped the task")
            self.say(f"requeued {c.id} {c.name}: the Dask scheduler dropped the task")
        if reply is None or reply.get("status") != "done":
            remove_partials(Path(c.output))
        try:
            r.event.clear()  # frees the event on the scheduler
        except Exception:
            pass
        with self._lock:
            self.running.pop(c.run_id, None)

    # ---------------------------------------------------------------- heartbeat
    def _heartbeat(self, stop: threading.Event) -> None:
        queue = Queue(self.home, self.timing)
        try:
            while not stop.wait(self.timing.heartbeat):
                with self._lock:
                    runs = list(self.running)
                try:
                    self.lost |= queue.heartbeat(self.id, runs)
                except QueueError as exc:
                    self.say(f"heartbeat failed: {exc}")
        finally:
            queue.close()

    # ---------------------------------------------------------------- running
    def run(self, handle_signals: bool = False) -> int:
        """Connect, then claim and follow jobs until stopped or drained; the exit status."""
        client = connect(self.options.address)  # before any claim: unreachable leaves jobs queued
        queue = Queue(self.home, self.timing)
        stop_beat = threading.Event()
        beat = threading.Thread(target=self._heartbeat, args=(stop_beat,), name="heartbeat", daemon=True)
        previous = {}
        try:
            self._refresh(client)
            queue.register_worker(self.id, socket.gethostname(), os.getpid(), self._capacity)
            if handle_signals:
                for sig in (signal.SIGINT, signal.SIGTERM):
                    previous[sig] = signal.signal(sig, self.request_stop)
            self.say(f"worker {self.id}: Dask scheduler {self.options.address}, up to {self._capacity} "
                     f"job(s) at once, {self.options.threads} thread(s) each, queue {self.home.root}"
                     + (", stopping when drained" if self.options.drain else ""))
            beat.start()
            last_attempts = 0.0
            while True:
                for r in list(self.running.values()):
                    self._watch(queue, r)
                    if r.future.done():
                        self._end(queue, r)
                if time.monotonic() - last_attempts > self.timing.heartbeat:
                    last_attempts = time.monotonic()
                    for r in list(self.running.values()):
                        self._attempts(queue, r)
                if self.stopping.is_set():
                    if not self.running:
                        break
                    time.sleep(self.options.poll)
                    continue
                self._refresh(client)
                if len(self.running) < self._capacity and self._submit(client, queue):
                    continue
                if self.options.drain and not self.running:
                    counts = queue.counts()
                    if counts["queued"] == 0 and counts["running"] == 0:
                        self.say("nothing queued or running; stopping")
                        break
                time.sleep(self.options.poll)
        finally:
            self.stopping.set()
            for r in list(self.running.values()):  # an error above: give the jobs back
                try:
                    r.future.cancel()
                    r.event.set()
                except Exception:
                    pass
                queue.requeue(r.claim.id, r.claim.run_id, f"worker {self.id} stopped on an error")
            stop_beat.set()
            if beat.is_alive():
                beat.join()
            for sig, handler in previous.items():
                signal.signal(sig, handler)
            queue.worker_stopped(self.id)
            queue.close()
            try:
                client.close(timeout=10)
            except Exception:
                pass
        return 0
