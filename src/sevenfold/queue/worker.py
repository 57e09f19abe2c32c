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

This module holds the worker as a whole (its slots, memory admission, heartbeat, shutdown);
a slot's thread is :mod:`.slot`, its handle on the child process :mod:`.child_process`.
"""

from __future__ import annotations

import os
import signal
import socket
import threading
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Sequence

from ..errors import QueueError
from ..memory import available_bytes, human
from .child_process import slot_environment
from .db import Queue
from .files import remove_partials
from .home import Home, Timing
from .records import Claim, ClaimResult
from .slot import Slot
from .wake import Bell

__all__ = ["Worker", "WorkerOptions", "cores", "say_in_handler", "slot_environment", "stop_notice"]


def cores() -> int:
    """Cores this process may run on."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:
        return os.cpu_count() or 1


def stop_notice(signum: int, running: Sequence[Claim]) -> str:
    """What a worker says when a signal (Ctrl-C's SIGINT, SIGTERM) asks it to stop: the
    signal and what becomes of the jobs it runs."""
    said = f"asked to stop ({signal.Signals(signum).name})"
    if not running:
        return f"{said}; no job was running"
    jobs = ", ".join(f"{c.id} {c.name}" for c in running)
    return f"{said}; the running jobs ({jobs}) stop at their next iteration and go back to the queue"


def say_in_handler(say: Callable[[str], None], text: str) -> None:
    """``say(text)`` from a signal handler: a signal that lands while this thread is itself
    printing makes the write reentrant, which Python refuses (RuntimeError); then the notice
    is lost, never the stop."""
    try:
        say(text)
    except RuntimeError:
        pass


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
    def request_stop(self, signum: int, frame: object = None) -> None:
        """A signal's handler: say so, stop claiming; running solves are asked to stop and
        their jobs requeued."""
        running = [c for c in (s.current for s in self.slots) if c is not None]  # (each read once)
        say_in_handler(self.say, stop_notice(signum, running))
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
