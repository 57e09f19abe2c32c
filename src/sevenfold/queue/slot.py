"""A worker's slot: a thread that claims jobs and runs them, one at a time, in its child.

It starts the child (and a new one after a crash), hands it each claimed job, watches the
cancel flag, the time limit and the worker's shutdown while the job runs, and records how
the run ended.
"""

from __future__ import annotations

import threading
import time
from pathlib import Path
from typing import TYPE_CHECKING, Any

from ..errors import QueueError
from .child_process import Child, ChildDied, describe_exit
from .db import Queue
from .files import remove_partials, write_text_atomic
from .records import Claim
from .tomlwrite import dumps
from .wake import job_bell, ring

if TYPE_CHECKING:
    from .worker import Worker

READY_TIMEOUT = 900.0  # s: a first compile on a loaded machine can take minutes
MAX_FAILED_STARTS = 3  # a draining worker gives up after this many failed child starts


class Slot(threading.Thread):
    """Claims jobs and runs them, one at a time, in its child process."""

    def __init__(self, worker: "Worker", index: int, threads: int) -> None:
        super().__init__(name=f"slot-{index}", daemon=True)
        self.worker, self.index, self.threads = worker, index, threads
        self.child: Child | None = None
        self.current: Claim | None = None
        self.busy = True  # until the first look at the queue
        self.failure: str | None = None

    # ---------------------------------------------------------------- child
    def _start_child(self) -> Child:
        w = self.worker
        log = w.home.logs / f"{w.safe_id}-slot{self.index}.log"
        child = Child(w.home, self.threads, log)
        deadline = time.monotonic() + READY_TIMEOUT
        while True:
            if w.stopping.is_set():
                child.kill()
                raise ChildDied(None)
            msg = child.receive(min(0.5, max(0.0, deadline - time.monotonic())))
            if msg is not None:
                if "compiling" in msg:  # a first start: said before the compile begins
                    w.say(f"slot {self.index}: {msg['compiling']}")
                    continue
                if "ready" in msg:
                    w.say(f"slot {self.index}: ready, {self.threads} thread(s), kernels warm in "
                          f"{msg.get('warm_seconds', 0):.1f} s")
                    return child
                child.kill()
                raise QueueError(f"the child could not start: {msg.get('fatal', msg)} "
                                 f"(see {log})")
            if time.monotonic() > deadline:
                child.kill()
                raise QueueError(f"the child did not get ready in {READY_TIMEOUT:.0f} s")

    # ---------------------------------------------------------------- loop
    def run(self) -> None:
        w = self.worker
        queue = Queue(w.home, w.timing)
        backoff, failed_starts = 1.0, 0
        try:
            while not w.stopping.is_set():
                if self.child is None:
                    try:
                        self.child = self._start_child()
                        backoff, failed_starts = 1.0, 0
                    except (ChildDied, QueueError) as exc:
                        if w.stopping.is_set():
                            break
                        failed_starts += 1
                        if w.options.drain and failed_starts >= MAX_FAILED_STARTS:
                            raise QueueError(f"slot {self.index}: the child failed to start "
                                             f"{failed_starts} times: {exc}") from None
                        w.say(f"slot {self.index}: {exc}; trying again in {backoff:.0f} s")
                        w.stopping.wait(backoff)
                        backoff = min(backoff * 2, 60.0)
                        continue
                self.busy = True
                result = w.claim(queue, self)
                if result.claim is None:
                    self.busy = False
                    w.nap()
                    continue
                try:
                    self._run(queue, result.claim)
                finally:
                    self.current = None
                    w.release(self)
                    self.busy = False
        except BaseException as exc:  # a bug here must not leave the worker hanging silently
            self.failure = str(exc) if isinstance(exc, QueueError) else f"{type(exc).__name__}: {exc}"
            w.say(f"slot {self.index} stopped on an error: {self.failure}")
            w.stopping.set()
        finally:
            self.busy = False
            if self.child is not None:
                self.child.close()
                self.child = None
            queue.close()

    def _run(self, queue: Queue, claim: Claim) -> None:
        w = self.worker
        home = w.home
        output = Path(claim.output)
        w.say(f"started {claim.id} {claim.name} (slot {self.index}, attempt {claim.attempt})")
        try:
            write_text_atomic(home.job_file(claim.id), dumps(claim.job_table))
            remove_partials(output)
        except OSError as exc:
            queue.fail(claim.id, claim.run_id, f"OS error preparing the run: {exc}")
            w.say(f"failed {claim.id} {claim.name}: OS error preparing the run: {exc}")
            return
        child = self.child
        assert child is not None
        queue.set_pid(claim.id, claim.run_id, child.pid)
        limit = claim.time_limit if claim.time_limit is not None else w.options.time_limit
        reason: str | None = None  # why the slot asked the run to stop: cancel | time | shutdown | lost
        asked_at = 0.0
        try:
            child.send({"job": claim.id, "run": claim.run_id, "attempt": claim.attempt,
                        "output": claim.output, "worker": w.id, "memory_bytes": claim.memory_bytes})
            while True:
                msg = child.receive(0.25)
                if msg is not None:
                    self._finish(queue, claim, msg, reason, limit)
                    return
                now = time.monotonic()
                if reason is None:
                    if home.cancel_flag(claim.id).exists():
                        reason, asked_at = "cancel", now  # the child polls the flag itself
                    elif limit is not None and time.time() - claim.started > limit:
                        reason, asked_at = "time", now
                        child.interrupt()
                    elif w.stopping.is_set():
                        reason, asked_at = "shutdown", now
                        child.interrupt()
                    elif claim.run_id in w.lost:
                        reason, asked_at = "lost", now
                        child.interrupt()
                elif now - asked_at > w.timing.grace:
                    child.kill()  # the next receive reports it died
        except ChildDied as died:
            self.child = None
            child.kill()
            remove_partials(output)
            self._died(queue, claim, reason, describe_exit(died.returncode), limit)
        finally:
            ring(home.root, job_bell(claim.id))  # a `run` following the job reports at once

    def _finish(self, queue: Queue, claim: Claim, msg: dict[str, Any], reason: str | None,
                limit: float | None) -> None:
        w = self.worker
        status = msg.get("status")
        if status == "done":
            if queue.finish(claim.id, claim.run_id, msg["summary"]):
                s = msg["summary"]
                w.say(f"done {claim.id} {claim.name}: {s.get('iterations')} iterations, relative residual "
                      f"{s.get('final_relative_residual', float('nan')):.1e}, "
                      f"{s.get('seconds', {}).get('job', float('nan')):.1f} s")
            else:
                w.say(f"{claim.id} {claim.name}: finished, but the job was taken back from this worker meanwhile")
        elif status == "cancelled":
            if reason is None and w.home.cancel_flag(claim.id).exists():
                reason = "cancel"
            self._stopped(queue, claim, reason, "stopped at its next iteration", limit)
        else:
            error = msg.get("error", "failed for an unknown reason")
            queue.fail(claim.id, claim.run_id, error, msg.get("kind"))
            w.say(f"failed {claim.id} {claim.name}: {error}")

    def _stopped(self, queue: Queue, claim: Claim, reason: str | None, how: str, limit: float | None) -> None:
        w = self.worker
        if reason == "cancel":
            queue.cancelled(claim.id, claim.run_id, f"cancelled while running; {how}")
            w.say(f"cancelled {claim.id} {claim.name} ({how})")
        elif reason == "time":
            error = f"exceeded its time limit of {limit:g} s; {how}"
            queue.fail(claim.id, claim.run_id, error)
            w.say(f"failed {claim.id} {claim.name}: {error}")
        elif reason == "shutdown":
            queue.requeue(claim.id, claim.run_id, f"worker {w.id} shut down; {how}")
            w.say(f"requeued {claim.id} {claim.name} (worker shutting down)")
        elif reason == "lost":
            w.say(f"{claim.id} {claim.name}: taken back from this worker (heartbeat went stale); {how}")
        else:
            queue.fail(claim.id, claim.run_id, f"the solve stopped without being asked to; {how}")

    def _died(self, queue: Queue, claim: Claim, reason: str | None, how: str, limit: float | None) -> None:
        if reason is not None:
            grace = self.worker.timing.grace
            self._stopped(queue, claim, reason, f"killed after the {grace:g} s grace period", limit)
            return
        error = f"the process running the job {how}"
        queue.fail(claim.id, claim.run_id, error)
        self.worker.say(f"failed {claim.id} {claim.name}: {error}; starting a new child for slot {self.index}")

