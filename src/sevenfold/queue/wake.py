"""A nudge from a process that has just queued a job to the worker that should take it.

An idle worker looks at the queue every ``WorkerOptions.poll`` seconds (0.1 s: about 50 ms
before a job queued at a random moment starts). ``sevenfold run``, handing its job to an
idle worker (:mod:`.handoff`), rings that worker's bell right after queueing, so the worker
looks at once. The bell is a Unix datagram socket in Linux's abstract namespace, named after
the queue home and the worker's process id: no file to clean up, gone when the process ends,
and a ring nobody hears is lost without error. Where there is no such namespace (not Linux)
or the name is taken, the worker just polls as before. A ring carries no data and only makes
the worker look at the queue early, so a stray one is harmless.

The other way round, ``run`` following its handed job listens on a bell named after the job
(:func:`job_bell`), and the worker rings it when the job's run has ended, so ``run`` reports
at once instead of at its next look at the queue (every 0.5 s after a job's first seconds).
"""

from __future__ import annotations

import hashlib
import select
import socket
from pathlib import Path


def _address(home_root: Path, name: int | str) -> str:
    digest = hashlib.sha256(str(Path(home_root).resolve()).encode()).hexdigest()[:16]
    return f"\0sevenfold-wake-{digest}-{name}"


def job_bell(job_id: str) -> str:
    """The name of the bell rung when job ``job_id``'s run ends (a worker's is its pid)."""
    return f"job-{job_id}"


class Bell:
    """The listening end (a worker's, named by its pid; a follower's, :func:`job_bell`):
    :meth:`wait` returns early when rung."""

    def __init__(self, home_root: Path, name: int | str) -> None:
        self._sock: socket.socket | None = None
        try:
            sock = socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM)
        except (AttributeError, OSError):  # no Unix sockets here
            return
        try:
            sock.bind(_address(home_root, name))
            sock.setblocking(False)
        except OSError:  # no abstract namespace, or the name is taken: poll only
            sock.close()
            return
        self._sock = sock

    @property
    def listening(self) -> bool:
        return self._sock is not None

    def wait(self, timeout: float) -> bool:
        """Block up to ``timeout`` s; True when rung meanwhile (every pending ring is taken)."""
        if self._sock is None:
            return False
        try:
            ready, _, _ = select.select([self._sock], [], [], timeout)
        except (OSError, ValueError):  # closed meanwhile
            return False
        if not ready:
            return False
        try:
            while True:
                self._sock.recv(64)
        except (BlockingIOError, OSError):
            pass
        return True

    def close(self) -> None:
        if self._sock is not None:
            self._sock.close()
            self._sock = None


def ring(home_root: Path, name: int | str) -> bool:
    """Ring the bell ``name`` (a worker's pid, or :func:`job_bell`) of the queue at
    ``home_root``; True when it was heard (someone is listening), False otherwise (they will
    find out at their next look)."""
    try:
        with socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM) as sock:
            sock.sendto(b"!", _address(home_root, name))
        return True
    except (AttributeError, OSError):
        return False
