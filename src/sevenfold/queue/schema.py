"""The queue database's tables, and the event row every state change appends.

:data:`SCHEMA` is run (``CREATE ... IF NOT EXISTS``) each time a writer opens the database;
:data:`SCHEMA_VERSION` is kept in ``meta`` so that an older sevenfold refuses a newer queue.
"""

from __future__ import annotations

import sqlite3

SCHEMA_VERSION = 1

SCHEMA = (
    "CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL)",
    """CREATE TABLE IF NOT EXISTS batches (
        id INTEGER PRIMARY KEY AUTOINCREMENT,
        source TEXT NOT NULL,
        mode TEXT NOT NULL,
        keys TEXT NOT NULL,
        size INTEGER NOT NULL,
        submitted REAL NOT NULL)""",
    """CREATE TABLE IF NOT EXISTS jobs (
        id INTEGER PRIMARY KEY AUTOINCREMENT,
        name TEXT NOT NULL,
        state TEXT NOT NULL CHECK (state IN ('queued', 'running', 'done', 'failed', 'cancelled')),
        priority INTEGER NOT NULL DEFAULT 0,
        batch INTEGER REFERENCES batches (id),
        variant TEXT,
        submitted REAL NOT NULL,
        started REAL,
        finished REAL,
        attempts INTEGER NOT NULL DEFAULT 0,
        max_attempts INTEGER NOT NULL,
        time_limit REAL,
        worker TEXT,
        run_id TEXT,
        pid INTEGER,
        heartbeat REAL,
        cancel_requested INTEGER NOT NULL DEFAULT 0,
        error TEXT,
        output TEXT NOT NULL,
        source TEXT NOT NULL,
        job_text TEXT NOT NULL,
        job_table TEXT NOT NULL,
        inputs TEXT NOT NULL,
        cells INTEGER NOT NULL,
        method TEXT NOT NULL,
        memory_bytes INTEGER NOT NULL,
        summary TEXT)""",
    "CREATE INDEX IF NOT EXISTS jobs_by_state ON jobs (state, priority DESC, id)",
    "CREATE INDEX IF NOT EXISTS jobs_by_batch ON jobs (batch)",
    "CREATE INDEX IF NOT EXISTS jobs_by_output ON jobs (output)",
    """CREATE TABLE IF NOT EXISTS events (
        id INTEGER PRIMARY KEY AUTOINCREMENT,
        job INTEGER NOT NULL REFERENCES jobs (id),
        time REAL NOT NULL,
        event TEXT NOT NULL,
        detail TEXT NOT NULL DEFAULT '')""",
    "CREATE INDEX IF NOT EXISTS events_by_job ON events (job, id)",
    """CREATE TABLE IF NOT EXISTS workers (
        id TEXT PRIMARY KEY,
        host TEXT NOT NULL,
        pid INTEGER NOT NULL,
        slots INTEGER NOT NULL,
        started REAL NOT NULL,
        heartbeat REAL NOT NULL,
        stopped REAL)""",
)

# Columns of a listing: everything but the job file's text and table.
LIST_COLUMNS = (
    "id, name, state, priority, batch, variant, submitted, started, finished, attempts, "
    "max_attempts, time_limit, worker, run_id, pid, heartbeat, cancel_requested, error, output, "
    "source, inputs, cells, method, memory_bytes, summary"
)


def record_event(c: sqlite3.Connection, job_id: int, now: float, event: str, detail: str) -> None:
    """Append a job's event, inside the caller's transaction."""
    c.execute("INSERT INTO events (job, time, event, detail) VALUES (?, ?, ?, ?)",
              (job_id, now, event, detail))
