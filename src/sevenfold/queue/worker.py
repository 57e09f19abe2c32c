"""``sevenfold worker``: runs queued jobs in child processes until stopped.

Each slot is a thread owning one long-lived child process (:mod:`sevenfold.queue.child`)
that keeps the compiled kernels loaded and runs the slot's jobs one after another. A crash
or an out-of-memory kill of the child fails only the job it was running; the slot starts a
new child. The machine's cores are split between the slots (``NUMBA_NUM_THREADS`` per
child; BLAS gets one thread).

A heartbeat thread proves the worker's runs alive every ``timing.heartbeat`` seconds; a
worker killed outright stops heartbeating and any other worker (or ``list``) takes its
runs back once they are ``timing.stale`` seconds old. A cancel flag, a time limit or a
shutdown asks the solve to stop at its next iteration; if it has not stopped after
``timing.grace`` seconds its process is killed. Half-written results of killed runs are
removed.
"""

from __future__ import annotations

import json
import os
import select
import signal
import socket
import subprocess
import sys
import threading
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable

from .. import BLAS_THREAD_VARIABLES
from ..errors import QueueError
from ..memory import KEEP_FREED_MEMORY, available_bytes, human
from .db import Queue
from .records import Claim, ClaimResult
from .files import remove_partials, write_text_atomic
from .home import Home, Timing
from .tomlwrite import dumps
from .wake import Bell, job_bell, ring

READY_TIMEOUT = 900.0  # s: a first compile on a loaded machine can take minutes
MAX_FAILED_STARTS = 3  # a draining worker gives up after this many failed child starts


def cores() -> int:
    """Cores this process may run on."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:
        return os.cpu_count() or 1


@dataclass(frozen=True)
class WorkerOptions:
    """``slots`` jobs at once; ``drain``: stop once nothing is queued or running;
    ``memory_bytes``: what the jobs together may use (default: available at start);
    ``time_limit``: seconds a job may run when it was submitted without a limit."""

    slots: int = 1
    drain: bool = False
    memory_bytes: int | None = None
    time_limit: float | None = None
    poll: float = 0.1  # s between looks at an empty queue (one cheap read)


class ChildDied(Exception):
    def __init__(self, returncode: int | None) -> None:
        self.returncode = returncode
        super().__init__(describe_exit(returncode))


def describe_exit(code: int | None) -> str:
    if code is None:
        return "closed its channel"
    if code < 0:
        try:
            name = signal.Signals(-code).name
        except ValueError:
            name = f"signal {-code}"
        hint = " (the kernel's out-of-memory killer sends this)" if -code == signal.SIGKILL else ""
        return f"was killed by {name}{hint}"
    return f"exited with status {code}"


def slot_environment(threads: int) -> dict[str, str]:
    """The environment of a slot's child process: this one's, with its share of the cores,
    and malloc keeping freed memory for the next job (:data:`~sevenfold.memory.KEEP_FREED_MEMORY`,
    unless this environment already sets those variables; the child gives it back when idle)."""
    env = {**KEEP_FREED_MEMORY, **os.environ}
    env.update({
        "NUMBA_NUM_THREADS": str(threads),
        # numexpr (the job's expressions) on the same share: it would otherwise follow
        # OMP_NUM_THREADS below and evaluate a 256^3 source on one thread
        "NUMEXPR_NUM_THREADS": str(threads),
        # One BLAS thread: the sparse solvers gain nothing from threaded BLAS and lose much
        # to oversubscription on a busy machine (AMG setup at 24^3: 0.1 s, 0.5-4 s with 2).
        "OMP_NUM_THREADS": "1",
        **{name: "1" for name in BLAS_THREAD_VARIABLES},
        "PYTHONUNBUFFERED": "1",
    })
    return env


class Child:
    """One child process and the line channel to it."""

    def __init__(self, home: Home, threads: int, log: Path) -> None:
        env = slot_environment(threads)
        log.parent.mkdir(parents=True, exist_ok=True)
        self._log = open(log, "ab")
        self.proc = subprocess.Popen(
            [sys.executable, "-m", "sevenfold.queue.child", "--home", str(home.root),
             "--parent", str(os.getpid())],
            stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=self._log, env=env,
            start_new_session=True,  # a Ctrl-C in the worker's terminal is the worker's to handle
        )
        self.pid = self.proc.pid
        self._buffer = b""

    def receive(self, timeout: float) -> dict[str, Any] | None:
        """The next message, or None after ``timeout`` s; ChildDied when the child is gone."""
        deadline = time.monotonic() + timeout
        fd = self.proc.stdout.fileno()  # type: ignore[union-attr]
        while b"\n" not in self._buffer:
            left = deadline - time.monotonic()
            if left <= 0:
                return None
            ready, _, _ = select.select([fd], [], [], left)
            if not ready:
                return None
            chunk = os.read(fd, 1 << 16)
            if not chunk:
                raise ChildDied(self.proc.wait())
            self._buffer += chunk
        line, self._buffer = self._buffer.split(b"\n", 1)
        return json.loads(line)

    def send(self, message: dict[str, Any]) -> None:
        try:
            self.proc.stdin.write((json.dumps(message) + "\n").encode())  # type: ignore[union-attr]
            self.proc.stdin.flush()  # type: ignore[union-attr]
        except (BrokenPipeError, OSError):
            raise ChildDied(self.proc.wait()) from None

    def interrupt(self) -> None:
        """Ask the running solve to stop at its next iteration."""
        try:
            os.kill(self.pid, signal.SIGUSR1)
        except ProcessLookupError:
            pass

    def kill(self) -> int:
        """Kill the child and reap it (so its pid no longer counts as alive)."""
        try:
            self.proc.kill()
        except ProcessLookupError:
            pass
        code = self.proc.wait()
        self._log.close()
        return code

    def close(self, timeout: float = 10.0) -> None:
        try:
            self.proc.stdin.close()  # type: ignore[union-attr]
        except OSError:
            pass
        try:
            self.proc.wait(timeout)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait()
        self._log.close()


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


class Worker:
    """Runs queued jobs in ``options.slots`` slots until stopped (or drained)."""

    def __init__(self, home: Home, options: WorkerOptions | None = None, timing: Timing | None = None,
                 say: Callable[[str], None] | None = None) -> None:
        self.home = home
        self.options = options or WorkerOptions()
        if self.options.slots < 1:
            raise QueueError(f"--slots must be at least 1, got {self.options.slots}")
        self.timing = timing or Timing.from_env()
        self._say = say or (lambda text: print(text, flush=True))
        self.id = f"{socket.gethostname()}:{os.getpid()}"
        self.safe_id = self.id.replace(":", "-").replace("/", "-")
        self.stopping = threading.Event()
        self.bell = Bell(home.root, os.getpid())  # `run` rings it when it hands this worker a job
        self.lost: set[str] = set()
        self.memory_total = self.options.memory_bytes if self.options.memory_bytes else available_bytes()
        self._memory: dict[int, int] = {}
        self._lock = threading.Lock()
        n = self.options.slots
        self.slots = [Slot(self, i + 1, max(1, cores() // n)) for i in range(n)]

    def say(self, text: str) -> None:
        self._say(f"{time.strftime('%H:%M:%S')}  {text}")

    def nap(self) -> None:
        """Wait ``options.poll`` s before the next look at the queue, less when stopping or when
        a process that has just queued a job for this worker rings its bell (:mod:`.wake`)."""
        if self.bell.listening:
            self.bell.wait(self.options.poll)
        else:
            self.stopping.wait(self.options.poll)

    # ---------------------------------------------------------------- memory admission
    def claim(self, queue: Queue, slot: Slot) -> ClaimResult:
        with self._lock:  # one claim at a time per worker keeps the memory accounting exact
            used = sum(m for i, m in self._memory.items() if i != slot.index)
            result = queue.claim(self.id, self.memory_total, self.memory_total - used)
            if result.claim is not None:
                self._memory[slot.index] = result.claim.memory_bytes
                slot.current = result.claim
        for r in result.recovered:
            remove_partials(Path(r.output))
            self.say(f"took back {r.id} {r.name} from a silent worker: {r.outcome}")
        for job_id, name, reason in result.refused:
            self.say(f"failed {job_id} {name}: {reason}")
        return result

    def release(self, slot: Slot) -> None:
        with self._lock:
            self._memory.pop(slot.index, None)

    # ---------------------------------------------------------------- heartbeat
    def _heartbeat(self) -> None:
        queue = Queue(self.home, self.timing)
        try:
            while not self._beat_stop.wait(self.timing.heartbeat):
                runs = [s.current.run_id for s in self.slots if s.current is not None]
                try:
                    self.lost |= queue.heartbeat(self.id, runs)
                except QueueError as exc:
                    self.say(f"heartbeat failed: {exc}")
        finally:
            queue.close()

    # ---------------------------------------------------------------- running
    def request_stop(self, *_: object) -> None:
        """Stop claiming; running solves are asked to stop and their jobs requeued."""
        self.stopping.set()

    def _drained(self, queue: Queue) -> bool:
        if any(s.busy for s in self.slots):
            return False
        counts = queue.counts()
        return counts["queued"] == 0 and counts["running"] == 0

    def run(self, handle_signals: bool = False) -> int:
        """Run until stopped (SIGINT/SIGTERM when ``handle_signals``) or drained; exit status."""
        queue = Queue(self.home, self.timing)
        queue.register_worker(self.id, socket.gethostname(), os.getpid(), self.options.slots)
        self._beat_stop = threading.Event()
        beat = threading.Thread(target=self._heartbeat, name="heartbeat", daemon=True)
        previous = {}
        if handle_signals:
            for sig in (signal.SIGINT, signal.SIGTERM):
                previous[sig] = signal.signal(sig, self.request_stop)
        self.say(f"worker {self.id}: {self.options.slots} slot(s) on {cores()} core(s), memory "
                 f"{human(self.memory_total)}, queue {self.home.root}"
                 + (", stopping when drained" if self.options.drain else ""))
        beat.start()
        for s in self.slots:
            s.start()
        try:
            while not self.stopping.is_set():
                if self.options.drain and self._drained(queue):
                    self.say("nothing queued or running; stopping")
                    break
                self.stopping.wait(self.options.poll)
        finally:
            self.stopping.set()
            for s in self.slots:
                while s.is_alive():
                    s.join(0.5)
            self._beat_stop.set()
            beat.join()
            for sig, handler in previous.items():
                signal.signal(sig, handler)
            queue.worker_stopped(self.id)
            queue.close()
            self.bell.close()
        failures = [s.failure for s in self.slots if s.failure]
        return 1 if failures else 0
