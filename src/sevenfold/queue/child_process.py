"""The worker's end of a slot's child process: its environment, the process, the line channel.

The child itself is :mod:`sevenfold.queue.child`: it says ``{"ready": pid}``, then reads one
JSON request per line on stdin and answers one JSON line per request on stdout; its stderr
goes to the slot's log file.
"""

from __future__ import annotations

import json
import os
import select
import signal
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

from .. import BLAS_THREAD_VARIABLES
from ..memory import KEEP_FREED_MEMORY
from .home import Home


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

