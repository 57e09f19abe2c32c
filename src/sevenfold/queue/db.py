"""The queue database: one SQLite file in WAL mode; :class:`Queue`, every operation on it.

Every change is one ``BEGIN IMMEDIATE ... COMMIT`` transaction, so a process killed at any
moment leaves the database as it was before or after that change, never between. With
``synchronous = FULL`` a committed change is on disk. While another process holds the write
lock, SQLite waits (busy timeout) and the transaction is retried with backoff, so "database
is locked" never reaches a user; only a lock held for :data:`BUSY_DEADLINE` seconds raises a
:class:`QueueError` that says so.

A job moves queued -> running -> done | failed | cancelled; ``retry`` sends failed and
cancelled jobs back to queued. A running job belongs to one run (``run_id``): a worker's
report about a run that is no longer the job's current one changes nothing. Times are Unix
seconds (UTC).

:class:`Queue` is assembled from one part per concern:

* :mod:`.schema`      the tables, and the event row every state change appends
* :mod:`.connection`  opening (WAL), the write and read transactions, retries on a busy lock
* :mod:`.queries`     looking: jobs, events, batches, workers, counts
* :mod:`.runs`        a worker's changes: heartbeats, claims, the end of a run, stale runs
* :mod:`.actions`     a user's changes: submit (``add``), cancel, retry, forget
"""

from __future__ import annotations

from .actions import DEFAULT_MAX_ATTEMPTS, Actions
from .connection import BUSY_DEADLINE, BUSY_TIMEOUT_MS
from .runs import Runs
from .schema import SCHEMA, SCHEMA_VERSION

__all__ = ["BUSY_DEADLINE", "BUSY_TIMEOUT_MS", "DEFAULT_MAX_ATTEMPTS", "SCHEMA", "SCHEMA_VERSION", "Queue"]


class Queue(Runs, Actions):
    """A connection to a queue home's database; one per thread."""
