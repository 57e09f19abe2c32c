"""Where a queue lives, how its folder is laid out, and its timing settings.

The home is ``--home DIR``, else ``$SEVENFOLD_HOME``, else the user data directory
(``platformdirs.user_data_path("sevenfold")``). Inside it::

    queue.db            the SQLite database (WAL mode), the only source of truth
    inputs/<sha256>/    content-addressed copies of the files job files name
    jobs/<id>/job.toml  the snapshot a job runs from; jobs/<id>/cancel is the cancel flag
    logs/               one log per worker slot (what the child processes print)
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

from ..errors import QueueError

HOME_ENV = "SEVENFOLD_HOME"


@dataclass(frozen=True)
class Home:
    """A queue home folder and the paths inside it."""

    root: Path

    @property
    def db(self) -> Path:
        return self.root / "queue.db"

    @property
    def inputs(self) -> Path:
        return self.root / "inputs"

    @property
    def logs(self) -> Path:
        return self.root / "logs"

    def job_dir(self, job_id: int) -> Path:
        return self.root / "jobs" / str(job_id)

    def job_file(self, job_id: int) -> Path:
        """The snapshot TOML the job runs from."""
        return self.job_dir(job_id) / "job.toml"

    def cancel_flag(self, job_id: int) -> Path:
        """Present while a cancel of the job is pending; the solve polls it every iteration."""
        return self.job_dir(job_id) / "cancel"


def home_root(home: str | Path | None = None) -> Path:
    """The queue home's absolute path (``home``, else ``$SEVENFOLD_HOME``, else the user data
    directory), without creating or checking it: what a read-only viewer needs."""
    if home is not None and str(home).strip():
        root = Path(home).expanduser()
    elif os.environ.get(HOME_ENV, "").strip():
        root = Path(os.environ[HOME_ENV]).expanduser()
    else:
        from platformdirs import user_data_path

        root = user_data_path("sevenfold")
    return root.resolve()


def has_queue(home: str | Path | None = None) -> bool:
    """Whether the queue home (:func:`home_root`) holds a queue; nothing is created."""
    return (home_root(home) / "queue.db").is_file()


def locate(home: str | Path | None = None, create: bool = True) -> Home:
    """The queue home: ``home``, else ``$SEVENFOLD_HOME``, else the user data directory.

    The folder is created when missing; an unusable one raises :class:`QueueError`. With
    ``create=False`` a home that holds no queue (no ``queue.db``) raises QueueError instead
    and nothing is created.
    """
    root = home_root(home)
    if not create and not has_queue(root):
        raise QueueError(f"there is no queue in {str(root)!r}; `sevenfold submit` starts one there, "
                         f"or point --home (or ${HOME_ENV}) at the queue you mean")
    try:
        root.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise QueueError(f"cannot use {str(root)!r} as the queue home: {exc.strerror or exc}") from None
    if not os.access(root, os.W_OK):
        raise QueueError(f"cannot use {str(root)!r} as the queue home: not writable")
    return Home(root)


def _seconds(name: str, default: float) -> float:
    raw = os.environ.get(name, "").strip()
    if not raw:
        return default
    try:
        value = float(raw)
    except ValueError:
        raise QueueError(f"{name}={raw!r} is not a number of seconds") from None
    if not value > 0:
        raise QueueError(f"{name} must be a positive number of seconds, got {raw!r}")
    return value


@dataclass(frozen=True)
class Timing:
    """Seconds that govern liveness; each can be set from the environment.

    * ``heartbeat`` (``SEVENFOLD_HEARTBEAT_SECONDS``, 2): how often a worker proves it lives
    * ``stale`` (``SEVENFOLD_STALE_SECONDS``, 30): a running job whose heartbeat is older is
      taken back from its worker (requeued, or failed after ``max_attempts``)
    * ``grace`` (``SEVENFOLD_CANCEL_GRACE``, 10): how long a solve may take to stop after a
      cancel, a time limit or a worker shutdown before its process is killed
    """

    heartbeat: float = 2.0
    stale: float = 30.0
    grace: float = 10.0

    @classmethod
    def from_env(cls) -> "Timing":
        t = cls(
            _seconds("SEVENFOLD_HEARTBEAT_SECONDS", cls.heartbeat),
            _seconds("SEVENFOLD_STALE_SECONDS", cls.stale),
            _seconds("SEVENFOLD_CANCEL_GRACE", cls.grace),
        )
        if t.stale < 2 * t.heartbeat:
            raise QueueError(
                f"SEVENFOLD_STALE_SECONDS ({t.stale:g}) must be at least twice "
                f"SEVENFOLD_HEARTBEAT_SECONDS ({t.heartbeat:g}), or live workers look dead"
            )
        return t
