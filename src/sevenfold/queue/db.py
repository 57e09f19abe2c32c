"""The queue database: one SQLite file in WAL mode; schema and every state change.

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
"""

from __future__ import annotations

import json
import random
import sqlite3
import time
import uuid
from typing import Any, Callable, Iterable, Sequence, TypeVar

from ..errors import JobError, QueueError
from ..memory import human
from .home import Home, Timing
from .records import FINISHED, STATES, Claim, ClaimResult, Event, Job, NewBatch, NewJob, Recovered

T = TypeVar("T")

SCHEMA_VERSION = 1
BUSY_TIMEOUT_MS = 5_000  # SQLite's own wait for the lock, per attempt
BUSY_DEADLINE = 600.0  # s: give up on a lock held this long
DEFAULT_MAX_ATTEMPTS = 3

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
_LIST_COLUMNS = (
    "id, name, state, priority, batch, variant, submitted, started, finished, attempts, "
    "max_attempts, time_limit, worker, run_id, pid, heartbeat, cancel_requested, error, output, "
    "source, inputs, cells, method, memory_bytes, summary"
)


def _busy(exc: sqlite3.OperationalError) -> bool:
    code = getattr(exc, "sqlite_errorcode", None)
    if code is not None:
        return (code & 0xFF) in (sqlite3.SQLITE_BUSY, sqlite3.SQLITE_LOCKED)
    text = str(exc).lower()
    return "locked" in text or "busy" in text


class Queue:
    """A connection to a queue home's database; one per thread."""

    def __init__(self, home: Home, timing: Timing | None = None, readonly: bool = False) -> None:
        """Open (and on first use create) the queue database.

        ``readonly``: open an existing database read-only (SQLite ``mode=ro``), for viewers;
        nothing is created, and any change raises :class:`QueueError`. In WAL mode a reader
        never blocks the writers.
        """
        self.home = home
        self.timing = timing or Timing.from_env()
        self.readonly = readonly
        if readonly and not home.db.is_file():
            raise QueueError(f"there is no queue in {str(home.root)!r} yet (no queue.db); "
                             "submit a job there first, or name another --home")
        try:
            if readonly:
                self._conn = sqlite3.connect(home.db.as_uri() + "?mode=ro", uri=True,
                                             timeout=BUSY_TIMEOUT_MS / 1000, isolation_level=None)
            else:
                self._conn = sqlite3.connect(
                    str(home.db), timeout=BUSY_TIMEOUT_MS / 1000, isolation_level=None
                )
        except sqlite3.Error as exc:
            raise QueueError(f"cannot open the queue database {str(home.db)!r}: {exc}") from None
        self._conn.row_factory = sqlite3.Row
        self._retry(self._check_readable if readonly else self._setup)

    # ---------------------------------------------------------------- transactions
    def _setup(self) -> None:
        c = self._conn
        c.execute(f"PRAGMA busy_timeout = {BUSY_TIMEOUT_MS}")
        mode = c.execute("PRAGMA journal_mode = WAL").fetchone()[0]
        if str(mode).lower() != "wal":
            raise QueueError(f"the queue database {str(self.home.db)!r} cannot use WAL mode (got {mode})")
        c.execute("PRAGMA synchronous = FULL")
        c.execute("PRAGMA foreign_keys = ON")
        c.execute("BEGIN IMMEDIATE")
        try:
            for statement in SCHEMA:
                c.execute(statement)
            row = c.execute("SELECT value FROM meta WHERE key = 'schema'").fetchone()
            if row is None:
                c.execute("INSERT INTO meta (key, value) VALUES ('schema', ?)", (str(SCHEMA_VERSION),))
            elif int(row[0]) > SCHEMA_VERSION:
                raise QueueError(
                    f"the queue in {str(self.home.root)!r} was made by a newer sevenfold "
                    f"(schema {row[0]}); upgrade sevenfold to use it"
                )
            c.execute("COMMIT")
        except BaseException:
            if c.in_transaction:
                c.execute("ROLLBACK")
            raise

    def _check_readable(self) -> None:
        c = self._conn
        c.execute(f"PRAGMA busy_timeout = {BUSY_TIMEOUT_MS}")
        row = c.execute("SELECT value FROM meta WHERE key = 'schema'").fetchone()
        if row is None or int(row[0]) > SCHEMA_VERSION:
            raise QueueError(f"the queue in {str(self.home.root)!r} has schema "
                             f"{row[0] if row else 'none'}; this sevenfold reads schema {SCHEMA_VERSION}")

    def _retry(self, fn: Callable[[], T]) -> T:
        deadline = time.monotonic() + BUSY_DEADLINE
        delay = 0.005
        while True:
            try:
                return fn()
            except sqlite3.OperationalError as exc:
                if self._conn.in_transaction:
                    try:
                        self._conn.execute("ROLLBACK")
                    except sqlite3.Error:
                        pass
                if not _busy(exc):
                    raise QueueError(f"the queue database {str(self.home.db)!r} failed: {exc}") from None
                if time.monotonic() > deadline:
                    raise QueueError(
                        f"the queue database {str(self.home.db)!r} stayed locked by another process "
                        f"for {BUSY_DEADLINE:.0f} s; is a process stuck holding it?"
                    ) from None
                time.sleep(delay * (0.5 + random.random()))
                delay = min(delay * 2, 0.25)
            except sqlite3.DatabaseError as exc:
                raise QueueError(f"the queue database {str(self.home.db)!r} failed: {exc}") from None

    def write(self, fn: Callable[[sqlite3.Connection], T]) -> T:
        """Run ``fn(connection)`` in one write transaction, retried while the lock is busy.

        ``fn`` must only touch the database (and idempotent files), as it may run again.
        """
        def attempt() -> T:
            c = self._conn
            c.execute("BEGIN IMMEDIATE")
            try:
                result = fn(c)
                c.execute("COMMIT")
                return result
            except BaseException:
                if c.in_transaction:
                    c.execute("ROLLBACK")
                raise

        return self._retry(attempt)

    def read(self, fn: Callable[[sqlite3.Connection], T]) -> T:
        """Run ``fn(connection)`` on one consistent snapshot of the database."""
        def attempt() -> T:
            c = self._conn
            c.execute("BEGIN")
            try:
                return fn(c)
            finally:
                if c.in_transaction:
                    c.execute("COMMIT")

        return self._retry(attempt)

    def close(self) -> None:
        self._conn.close()

    def __enter__(self) -> "Queue":
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # ---------------------------------------------------------------- submitting
    def add(self, jobs: Sequence[tuple[NewJob, NewBatch | None, int]], priority: int = 0,
            time_limit: float | None = None, max_attempts: int = DEFAULT_MAX_ATTEMPTS) -> list[Job]:
        """Enter jobs in one transaction: all of them or none.

        ``jobs`` holds (job, its batch or None, a key grouping the jobs of one batch).
        """
        now = time.time()

        def fn(c: sqlite3.Connection) -> list[int]:
            batch_ids: dict[int, int] = {}
            ids = []
            sources: dict[str, str] = {}  # output -> the job file of a job entered in this call
            for job, batch, group in jobs:
                if job.output in sources:
                    raise JobError(f"{job.output!r} is also the output of a job from {sources[job.output]}; "
                                   "give each job its own output.path", "output.path", job.source)
                sources[job.output] = job.source
                other = _writer(c, job.output)
                if other is not None:
                    raise JobError(_taken(job.output, other), "output.path", job.source)
                batch_id = None
                if batch is not None:
                    if group not in batch_ids:
                        cur = c.execute(
                            "INSERT INTO batches (source, mode, keys, size, submitted) VALUES (?, ?, ?, ?, ?)",
                            (batch.source, batch.mode, json.dumps(list(batch.keys)), batch.size, now),
                        )
                        batch_ids[group] = int(cur.lastrowid)
                    batch_id = batch_ids[group]
                cur = c.execute(
                    """INSERT INTO jobs (name, state, priority, batch, variant, submitted, max_attempts,
                           time_limit, output, source, job_text, job_table, inputs, cells, method,
                           memory_bytes)
                       VALUES (?, 'queued', ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)""",
                    (job.name, priority, batch_id,
                     None if job.variant is None else json.dumps(job.variant), now, max_attempts,
                     time_limit, job.output, job.source, job.job_text, json.dumps(job.job_table),
                     json.dumps(job.inputs), job.cells, job.method, job.memory_bytes),
                )
                job_id = int(cur.lastrowid)
                ids.append(job_id)
                _event(c, job_id, now, "submitted", f"from {job.source}, priority {priority}")
            return ids

        ids = self.write(fn)
        return self.jobs(ids=ids)

    # ---------------------------------------------------------------- looking
    def get(self, job_id: int) -> Job:
        """The job with this id, with its job text and table; QueueError when unknown."""
        row = self.read(lambda c: c.execute("SELECT * FROM jobs WHERE id = ?", (job_id,)).fetchone())
        if row is None:
            raise QueueError(f"there is no job {job_id} in the queue at {str(self.home.root)!r}")
        return Job.from_row(row)

    def jobs(self, state: str | None = None, batch: int | None = None,
             ids: Iterable[int] | None = None) -> list[Job]:
        """Jobs by id, optionally only those in ``state``, of ``batch`` or with these ``ids``."""
        where, args = [], []
        if state is not None:
            where.append("state = ?")
            args.append(state)
        if batch is not None:
            where.append("batch = ?")
            args.append(batch)
        if ids is not None:
            id_list = list(ids)
            if not id_list:
                return []
            where.append(f"id IN ({', '.join('?' * len(id_list))})")
            args.extend(id_list)
        sql = f"SELECT {_LIST_COLUMNS} FROM jobs"
        if where:
            sql += " WHERE " + " AND ".join(where)
        sql += " ORDER BY id"
        rows = self.read(lambda c: c.execute(sql, args).fetchall())
        return [Job.from_row(r) for r in rows]

    def events(self, job_id: int) -> list[Event]:
        rows = self.read(lambda c: c.execute(
            "SELECT id, job, time, event, detail FROM events WHERE job = ? ORDER BY id", (job_id,)).fetchall())
        return [Event(**dict(r)) for r in rows]

    def batch(self, batch_id: int) -> dict[str, Any] | None:
        """A batch's row (``source mode keys size submitted``; ``keys`` a list), None when unknown."""
        row = self.read(lambda c: c.execute("SELECT * FROM batches WHERE id = ?", (batch_id,)).fetchone())
        if row is None:
            return None
        return {**dict(row), "keys": json.loads(row["keys"])}

    def last_event(self) -> int:
        """The id of the newest event (0 for none): it changes whenever a job changes state."""
        return int(self.read(lambda c: c.execute("SELECT COALESCE(MAX(id), 0) FROM events").fetchone()[0]))

    def counts(self) -> dict[str, int]:
        """How many jobs are in each state."""
        rows = self.read(lambda c: c.execute("SELECT state, COUNT(*) FROM jobs GROUP BY state").fetchall())
        out = {s: 0 for s in STATES}
        out.update({r[0]: int(r[1]) for r in rows})
        return out

    def workers(self, alive_only: bool = True) -> list[dict[str, Any]]:
        """Workers that have not stopped and whose heartbeat is fresh (or all of them)."""
        cutoff = time.time() - self.timing.stale
        rows = self.read(lambda c: c.execute("SELECT * FROM workers ORDER BY started").fetchall())
        out = [dict(r) for r in rows]
        if alive_only:
            out = [w for w in out if w["stopped"] is None and w["heartbeat"] >= cutoff]
        return out

    def resolve(self, targets: Sequence[str]) -> list[int]:
        """Job ids named by ``targets``: job ids (``12``) and batch ids (``b3``, all its jobs)."""
        ids: list[int] = []
        for t in targets:
            t = t.strip()
            if t[:1] in ("b", "B") and t[1:].isdecimal():
                batch = int(t[1:])
                found = self.read(lambda c: [r[0] for r in c.execute(
                    "SELECT id FROM jobs WHERE batch = ? ORDER BY id", (batch,))])
                if not found:
                    raise QueueError(f"there is no batch {t} in the queue at {str(self.home.root)!r}")
                ids.extend(found)
            elif t.isdecimal():
                job_id = int(t)
                exists = self.read(lambda c: c.execute("SELECT 1 FROM jobs WHERE id = ?", (job_id,)).fetchone())
                if exists is None:
                    raise QueueError(f"there is no job {job_id} in the queue at {str(self.home.root)!r}")
                ids.append(job_id)
            else:
                raise QueueError(f"{t!r} is neither a job id (a number) nor a batch id (b<number>)")
        return list(dict.fromkeys(ids))

    # ---------------------------------------------------------------- stale runs
    def _recover_stale(self, c: sqlite3.Connection, now: float) -> list[Recovered]:
        cutoff = now - self.timing.stale
        rows = c.execute(
            "SELECT id, name, output, attempts, max_attempts, worker, heartbeat, cancel_requested "
            "FROM jobs WHERE state = 'running' AND heartbeat < ?", (cutoff,)).fetchall()
        out = []
        for r in rows:
            silent = f"worker {r['worker']} sent no heartbeat for {now - r['heartbeat']:.0f} s during attempt {r['attempts']}"
            if r["cancel_requested"]:
                outcome, reason = "cancelled", f"cancelled; {silent}"
                c.execute("UPDATE jobs SET state = 'cancelled', finished = ?, error = ?, pid = NULL "
                          "WHERE id = ?", (now, reason, r["id"]))
            elif r["attempts"] >= r["max_attempts"]:
                outcome = "failed"
                reason = f"{silent}, the last of {r['max_attempts']} allowed; giving up"
                c.execute("UPDATE jobs SET state = 'failed', finished = ?, error = ?, pid = NULL "
                          "WHERE id = ?", (now, reason, r["id"]))
            else:
                outcome, reason = "queued", f"{silent}; back in the queue"
                c.execute(
                    "UPDATE jobs SET state = 'queued', started = NULL, worker = NULL, run_id = NULL, "
                    "pid = NULL, heartbeat = NULL WHERE id = ?", (r["id"],))
            _event(c, r["id"], now, "requeued" if outcome == "queued" else outcome, reason)
            out.append(Recovered(r["id"], r["name"], r["output"], outcome, reason))
        return out

    def recover_stale(self) -> list[Recovered]:
        """Take running jobs back from workers whose heartbeat is older than ``timing.stale``.

        A job goes back to the queue, or fails once it has used ``max_attempts``, or ends
        cancelled when a cancel was pending. The caller removes the half-written outputs.
        """
        now = time.time()
        cutoff = now - self.timing.stale
        stale = self.read(lambda c: c.execute(
            "SELECT 1 FROM jobs WHERE state = 'running' AND heartbeat < ? LIMIT 1", (cutoff,)).fetchone())
        if stale is None:
            return []
        return self.write(lambda c: self._recover_stale(c, time.time()))

    # ---------------------------------------------------------------- workers
    def register_worker(self, worker: str, host: str, pid: int, slots: int) -> None:
        now = time.time()
        self.write(lambda c: c.execute(
            "INSERT OR REPLACE INTO workers (id, host, pid, slots, started, heartbeat, stopped) "
            "VALUES (?, ?, ?, ?, ?, ?, NULL)", (worker, host, pid, slots, now, now)))

    def worker_stopped(self, worker: str) -> None:
        self.write(lambda c: c.execute("UPDATE workers SET stopped = ? WHERE id = ?", (time.time(), worker)))

    def heartbeat(self, worker: str, run_ids: Sequence[str]) -> set[str]:
        """Prove ``worker`` and its runs alive; returns the runs no longer the worker's."""
        now = time.time()

        def fn(c: sqlite3.Connection) -> set[str]:
            c.execute("UPDATE workers SET heartbeat = ? WHERE id = ?", (now, worker))
            lost = set()
            for run in run_ids:
                cur = c.execute("UPDATE jobs SET heartbeat = ? WHERE run_id = ? AND state = 'running'",
                                (now, run))
                if cur.rowcount == 0:
                    lost.add(run)
            return lost

        return self.write(fn)

    def claim(self, worker: str, memory_total: int | None = None,
              memory_free: int | None = None) -> ClaimResult:
        """Take the next queued job for ``worker``: highest priority first, then oldest.

        Stale runs are recovered first, in the same transaction. A job whose memory estimate
        exceeds ``memory_total`` (bytes) fails with the reason; one that exceeds only
        ``memory_free`` (what the worker's other slots leave) waits for a later claim.
        """
        now = time.time()
        cutoff = now - self.timing.stale
        pending = self.read(lambda c: c.execute(
            "SELECT EXISTS (SELECT 1 FROM jobs WHERE state = 'queued') "
            "OR EXISTS (SELECT 1 FROM jobs WHERE state = 'running' AND heartbeat < ?)", (cutoff,)).fetchone()[0])
        if not pending:
            return ClaimResult()

        def fn(c: sqlite3.Connection) -> ClaimResult:
            now = time.time()
            result = ClaimResult(recovered=self._recover_stale(c, now))
            rows = c.execute("SELECT id, name, memory_bytes FROM jobs WHERE state = 'queued' "
                             "ORDER BY priority DESC, id LIMIT 1000").fetchall()
            chosen = None
            for r in rows:
                if memory_total is not None and r["memory_bytes"] > memory_total:
                    reason = (f"not started: needs about {human(r['memory_bytes'])} by estimate, more than "
                              f"the {human(memory_total)} worker {worker} may use (--memory); retry it on "
                              "a worker with more memory, or make the job smaller")
                    c.execute("UPDATE jobs SET state = 'failed', finished = ?, error = ? WHERE id = ?",
                              (now, reason, r["id"]))
                    _event(c, r["id"], now, "failed", reason)
                    result.refused.append((r["id"], r["name"], reason))
                    continue
                if memory_free is not None and r["memory_bytes"] > memory_free:
                    continue
                chosen = r
                break
            if chosen is None:
                return result
            run_id = uuid.uuid4().hex
            c.execute(
                "UPDATE jobs SET state = 'running', worker = ?, run_id = ?, attempts = attempts + 1, "
                "started = ?, heartbeat = ?, pid = NULL, error = NULL WHERE id = ?",
                (worker, run_id, now, now, chosen["id"]))
            row = c.execute("SELECT name, attempts, output, job_table, time_limit, memory_bytes "
                            "FROM jobs WHERE id = ?", (chosen["id"],)).fetchone()
            _event(c, chosen["id"], now, "started",
                   f"on {worker}, attempt {row['attempts']}, run {run_id[:12]}")
            result.claim = Claim(chosen["id"], row["name"], run_id, row["attempts"], row["output"],
                                 json.loads(row["job_table"]), row["time_limit"], row["memory_bytes"], now)
            return result

        return self.write(fn)

    def _end_run(self, job_id: int, run_id: str, state: str, event: str, detail: str,
                 error: str | None = None, summary: dict[str, Any] | None = None) -> bool:
        now = time.time()

        def fn(c: sqlite3.Connection) -> bool:
            if state == "queued":
                cur = c.execute(
                    "UPDATE jobs SET state = 'queued', started = NULL, worker = NULL, run_id = NULL, "
                    "pid = NULL, heartbeat = NULL WHERE id = ? AND run_id = ? AND state = 'running'",
                    (job_id, run_id))
            else:
                cur = c.execute(
                    "UPDATE jobs SET state = ?, finished = ?, error = ?, summary = ?, pid = NULL "
                    "WHERE id = ? AND run_id = ? AND state = 'running'",
                    (state, now, error, None if summary is None else json.dumps(summary), job_id, run_id))
            if cur.rowcount == 0:
                return False
            _event(c, job_id, now, event, detail)
            return True

        return self.write(fn)

    def note_attempt(self, job_id: int, run_id: str, attempt: int, detail: str) -> bool:
        """The run started again (a cluster task rerun after its Dask worker was lost)."""
        now = time.time()

        def fn(c: sqlite3.Connection) -> bool:
            cur = c.execute("UPDATE jobs SET attempts = ? WHERE id = ? AND run_id = ? AND state = 'running' "
                            "AND attempts < ?", (attempt, job_id, run_id, attempt))
            if cur.rowcount == 0:
                return False
            _event(c, job_id, now, "restarted", detail)
            return True

        return self.write(fn)

    def set_pid(self, job_id: int, run_id: str, pid: int) -> None:
        """Record the process running the job's current run."""
        self.write(lambda c: c.execute("UPDATE jobs SET pid = ? WHERE id = ? AND run_id = ?",
                                       (pid, job_id, run_id)))

    def finish(self, job_id: int, run_id: str, summary: dict[str, Any]) -> bool:
        """The run made a complete result. False when the run was no longer the job's."""
        iters = summary.get("iterations")
        res = summary.get("final_relative_residual")
        detail = f"{iters} iterations, relative residual {res:.2e}" if isinstance(res, float) else ""
        return self._end_run(job_id, run_id, "done", "done", detail, None, summary)

    def fail(self, job_id: int, run_id: str, error: str, kind: str | None = None) -> bool:
        """The run failed; ``kind`` (input, os, solver, memory, internal), when the run said
        which, is kept as the summary's ``failure``, so a client can exit as ``run`` would."""
        return self._end_run(job_id, run_id, "failed", "failed", error, error,
                             None if kind is None else {"failure": kind})

    def cancelled(self, job_id: int, run_id: str, reason: str) -> bool:
        return self._end_run(job_id, run_id, "cancelled", "cancelled", reason, reason)

    def requeue(self, job_id: int, run_id: str, reason: str) -> bool:
        """Put a running job back (its worker is shutting down); its attempt still counts."""
        return self._end_run(job_id, run_id, "queued", "requeued", reason)

    # ---------------------------------------------------------------- user actions
    def cancel(self, ids: Sequence[int]) -> list[tuple[Job, str]]:
        """Cancel jobs: queued ones at once, running ones by raising their cancel flag.

        Returns each job (as it was) with what happened to it.
        """
        now = time.time()

        def fn(c: sqlite3.Connection) -> list[tuple[int, str]]:
            out = []
            for job_id in ids:
                row = c.execute("SELECT state, worker, cancel_requested FROM jobs WHERE id = ?",
                                (job_id,)).fetchone()
                if row is None:
                    raise QueueError(f"there is no job {job_id}")
                state = row["state"]
                if state == "queued":
                    c.execute("UPDATE jobs SET state = 'cancelled', finished = ?, error = ? WHERE id = ?",
                              (now, "cancelled before it started", job_id))
                    _event(c, job_id, now, "cancelled", "cancelled before it started")
                    out.append((job_id, "cancelled"))
                elif state == "running":
                    flag = self.home.cancel_flag(job_id)
                    flag.parent.mkdir(parents=True, exist_ok=True)
                    flag.touch()
                    if not row["cancel_requested"]:
                        c.execute("UPDATE jobs SET cancel_requested = 1 WHERE id = ?", (job_id,))
                        _event(c, job_id, now, "cancel-requested", f"running on {row['worker']}")
                    out.append((job_id, f"stopping (running on {row['worker']})"))
                else:
                    out.append((job_id, f"already {state}; nothing to cancel"))
            return out

        before = {j.id: j for j in self.jobs(ids=ids)}
        return [(before[i], what) for i, what in self.write(fn)]

    def retry(self, ids: Sequence[int], replace: dict[int, NewJob] | None = None) -> list[tuple[Job, str]]:
        """Send failed and cancelled jobs back to the queue, from their snapshot, attempts 0.

        ``replace`` gives new snapshots (a job file edited since submit, validated again) for
        some of the jobs. A job whose output is now that of a queued or running job stays as
        it was, and its line says which job.
        """
        now = time.time()
        replace = replace or {}

        def fn(c: sqlite3.Connection) -> list[tuple[int, str]]:
            out = []
            for job_id in ids:
                row = c.execute("SELECT state, output FROM jobs WHERE id = ?", (job_id,)).fetchone()
                if row is None:
                    raise QueueError(f"there is no job {job_id}")
                state = row["state"]
                if state in ("failed", "cancelled"):
                    new = replace.get(job_id)
                    output = new.output if new is not None else row["output"]
                    other = _writer(c, output, job_id)
                    if other is not None:
                        out.append((job_id, f"not queued: {_taken(output, other)}"))
                        continue
                    self.home.cancel_flag(job_id).unlink(missing_ok=True)
                    c.execute(
                        "UPDATE jobs SET state = 'queued', attempts = 0, started = NULL, finished = NULL, "
                        "worker = NULL, run_id = NULL, pid = NULL, heartbeat = NULL, "
                        "cancel_requested = 0, error = NULL, summary = NULL WHERE id = ?", (job_id,))
                    if new is not None:
                        c.execute(
                            "UPDATE jobs SET name = ?, output = ?, job_text = ?, job_table = ?, inputs = ?, "
                            "cells = ?, method = ?, memory_bytes = ? WHERE id = ?",
                            (new.name, new.output, new.job_text, json.dumps(new.job_table),
                             json.dumps(new.inputs), new.cells, new.method, new.memory_bytes, job_id))
                    _event(c, job_id, now, "retried",
                           f"was {state}" + ("; from the job file as it is now" if new is not None else ""))
                    out.append((job_id, "queued again" + (" from the edited job file" if new is not None else "")))
                elif state == "done":
                    out.append((job_id, "done; nothing to retry"))
                else:
                    out.append((job_id, f"{state}; nothing to retry"))
            return out

        before = {j.id: j for j in self.jobs(ids=ids)}
        return [(before[i], what) for i, what in self.write(fn)]


    def forget(self, ids: Sequence[int]) -> list[tuple[Job, str]]:
        """Remove finished jobs (done, failed, cancelled) and their history from the database,
        in one transaction; queued and running jobs are left alone. Returns each job (as it
        was) with what happened to it. Files are the caller's: see ``commands.forget_files``.
        """
        def fn(c: sqlite3.Connection) -> list[tuple[int, str]]:
            out = []
            for job_id in ids:
                row = c.execute("SELECT state, batch FROM jobs WHERE id = ?", (job_id,)).fetchone()
                if row is None:
                    raise QueueError(f"there is no job {job_id}")
                if row["state"] not in FINISHED:
                    out.append((job_id, f"{row['state']}; not forgotten (only done, failed or cancelled jobs are)"))
                    continue
                c.execute("DELETE FROM events WHERE job = ?", (job_id,))
                c.execute("DELETE FROM jobs WHERE id = ?", (job_id,))
                if row["batch"] is not None:
                    c.execute("DELETE FROM batches WHERE id = ? AND NOT EXISTS "
                              "(SELECT 1 FROM jobs WHERE batch = ?)", (row["batch"], row["batch"]))
                out.append((job_id, "forgotten"))
            return out

        before = {j.id: j for j in self.jobs(ids=ids)}
        return [(before[i], what) for i, what in self.write(fn)]

    def outputs_in_use(self, outputs: Iterable[str]) -> dict[str, int]:
        """Of ``outputs``, those some job in the queue (any state) names: output -> a job id."""
        wanted = list(dict.fromkeys(outputs))

        def fn(c: sqlite3.Connection) -> dict[str, int]:
            found = {}
            for o in wanted:
                row = c.execute("SELECT id FROM jobs WHERE output = ? ORDER BY id DESC LIMIT 1", (o,)).fetchone()
                if row is not None:
                    found[o] = int(row[0])
            return found

        return self.read(fn)

    def inputs_in_use(self) -> set[str]:
        """Every input snapshot path a job in the queue refers to."""
        rows = self.read(lambda c: c.execute("SELECT inputs FROM jobs WHERE inputs != '[]'").fetchall())
        return {i["snapshot"] for r in rows for i in json.loads(r[0])}


def _writer(c: sqlite3.Connection, output: str, other_than: int | None = None) -> sqlite3.Row | None:
    """The queued or running job that writes ``output`` (not job ``other_than``), or None."""
    return c.execute(
        "SELECT id, name, state FROM jobs WHERE output = ? AND state IN ('queued', 'running') AND id != ? "
        "ORDER BY id LIMIT 1", (output, -1 if other_than is None else other_than)).fetchone()


def _taken(output: str, other: sqlite3.Row) -> str:
    return (f"{output!r} is already the output of job {other['id']} ({other['name']}, {other['state']}); "
            f"let it finish, cancel it (sevenfold cancel {other['id']}), or give this job another output.path")


def _event(c: sqlite3.Connection, job_id: int, now: float, event: str, detail: str) -> None:
    c.execute("INSERT INTO events (job, time, event, detail) VALUES (?, ?, ?, ?)",
              (job_id, now, event, detail))
