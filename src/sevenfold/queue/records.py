"""What the queue stores and hands out: jobs, their events, the runs workers claim.

Plain frozen records made from the database's rows (:mod:`sevenfold.queue.db`); times are
Unix seconds (UTC).
"""

from __future__ import annotations

import datetime
import json
import sqlite3
from dataclasses import dataclass, field
from typing import Any

STATES = ("queued", "running", "done", "failed", "cancelled")
FINISHED = ("done", "failed", "cancelled")


@dataclass(frozen=True)
class NewJob:
    """A validated job ready to enter the queue (see :mod:`sevenfold.queue.submit`)."""

    name: str
    output: str  # absolute path of the result
    source: str  # absolute path of the job file it came from
    job_text: str  # the job file's text when submitted
    job_table: dict[str, Any]  # the table it runs: variant applied, input paths to snapshots
    inputs: list[dict[str, Any]]
    cells: int
    method: str
    memory_bytes: int
    variant: dict[str, Any] | None = None


@dataclass(frozen=True)
class NewBatch:
    source: str
    mode: str
    keys: tuple[str, ...]
    size: int


@dataclass(frozen=True)
class Job:
    """One row of the jobs table."""

    id: int
    name: str
    state: str
    priority: int
    batch: int | None
    variant: dict[str, Any] | None
    submitted: float
    started: float | None
    finished: float | None
    attempts: int
    max_attempts: int
    time_limit: float | None
    worker: str | None
    run_id: str | None
    pid: int | None
    heartbeat: float | None
    cancel_requested: bool
    error: str | None
    output: str
    source: str
    inputs: list[dict[str, Any]]
    cells: int
    method: str
    memory_bytes: int
    summary: dict[str, Any] | None
    job_text: str | None = None
    job_table: dict[str, Any] | None = None

    @property
    def batch_id(self) -> str | None:
        """The batch as users type it: ``b<number>``."""
        return None if self.batch is None else f"b{self.batch}"

    @classmethod
    def from_row(cls, row: sqlite3.Row) -> "Job":
        d = dict(row)
        for key in ("variant", "summary", "job_table"):
            if d.get(key) is not None:
                d[key] = json.loads(d[key])
        d["inputs"] = json.loads(d["inputs"])
        d["cancel_requested"] = bool(d["cancel_requested"])
        return cls(**d)


@dataclass(frozen=True)
class Event:
    id: int
    job: int
    time: float
    event: str
    detail: str


@dataclass(frozen=True)
class Claim:
    """A job a worker slot now runs: the run it started and what it needs to run it."""

    id: int
    name: str
    run_id: str
    attempt: int
    output: str
    job_table: dict[str, Any]
    time_limit: float | None
    memory_bytes: int
    started: float


@dataclass(frozen=True)
class Recovered:
    """A running job taken back from a worker whose heartbeat went stale."""

    id: int
    name: str
    output: str
    outcome: str  # queued | failed | cancelled
    reason: str


@dataclass
class ClaimResult:
    claim: Claim | None = None
    recovered: list[Recovered] = field(default_factory=list)
    refused: list[tuple[int, str, str]] = field(default_factory=list)  # (id, name, reason)


def stamp(t: float | None) -> str:
    """A Unix time as local ISO 8601 (RFC 3339) with offset, whole seconds ("" for none)."""
    if t is None:
        return ""
    return datetime.datetime.fromtimestamp(t).astimezone().isoformat(timespec="seconds")
