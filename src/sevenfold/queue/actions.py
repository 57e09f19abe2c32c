"""What a user does to the queue: submit jobs, cancel, retry and forget them."""

from __future__ import annotations

import json
import sqlite3
import time
from typing import Callable, Iterable, Sequence

from ..errors import JobError, QueueError
from .queries import Queries
from .records import FINISHED, Job, NewBatch, NewJob
from .schema import record_event

DEFAULT_MAX_ATTEMPTS = 3


class Actions(Queries):
    """The state changes a user asks for, each one transaction: all of its jobs or none."""

    def add(self, jobs: Sequence[tuple[NewJob, NewBatch | None, int]], priority: int = 0,
            time_limit: float | None = None, max_attempts: int = DEFAULT_MAX_ATTEMPTS) -> list[Job]:
        """Enter jobs in one transaction: all of them or none.

        ``jobs`` holds (job, its batch or None, a key grouping the jobs of one batch).
        """
        now = time.time()

        one_writer_each(job for job, _, _ in jobs)

        def fn(c: sqlite3.Connection) -> list[int]:
            batch_ids: dict[int, int] = {}
            ids = []
            for job, batch, group in jobs:
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
                record_event(c, job_id, now, "submitted", f"from {job.source}, priority {priority}")
            return ids

        ids = self.write(fn)
        return self.jobs(ids=ids)

    def cancel(self, ids: Sequence[int]) -> list[tuple[Job, str]]:
        """Cancel jobs: queued ones at once, running ones by raising their cancel flag.

        Returns each job (as it was) with what happened to it.
        """
        now = time.time()

        def one(c: sqlite3.Connection, job_id: int, row: sqlite3.Row) -> str:
            state = row["state"]
            if state == "queued":
                c.execute("UPDATE jobs SET state = 'cancelled', finished = ?, error = ? WHERE id = ?",
                          (now, "cancelled before it started", job_id))
                record_event(c, job_id, now, "cancelled", "cancelled before it started")
                return "cancelled"
            if state == "running":
                flag = self.home.cancel_flag(job_id)
                flag.parent.mkdir(parents=True, exist_ok=True)
                flag.touch()
                if not row["cancel_requested"]:
                    c.execute("UPDATE jobs SET cancel_requested = 1 WHERE id = ?", (job_id,))
                    record_event(c, job_id, now, "cancel-requested", f"running on {row['worker']}")
                return f"stopping (running on {row['worker']})"
            return f"already {state}; nothing to cancel"

        return self._each_job(ids, "state, worker, cancel_requested", one)

    def retry(self, ids: Sequence[int], replace: dict[int, NewJob] | None = None) -> list[tuple[Job, str]]:
        """Send failed and cancelled jobs back to the queue, from their snapshot, attempts 0.

        ``replace`` gives new snapshots (a job file edited since submit, validated again) for
        some of the jobs. A job whose output is now that of a queued or running job stays as
        it was, and its line says which job.
        """
        now = time.time()
        replace = replace or {}

        def one(c: sqlite3.Connection, job_id: int, row: sqlite3.Row) -> str:
            state = row["state"]
            if state not in ("failed", "cancelled"):
                return f"{state}; nothing to retry"
            new = replace.get(job_id)
            output = new.output if new is not None else row["output"]
            other = _writer(c, output, job_id)
            if other is not None:
                return f"not queued: {_taken(output, other)}"
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
            record_event(c, job_id, now, "retried",
                         f"was {state}" + ("; from the job file as it is now" if new is not None else ""))
            return "queued again" + (" from the edited job file" if new is not None else "")

        return self._each_job(ids, "state, output", one)

    def forget(self, ids: Sequence[int]) -> list[tuple[Job, str]]:
        """Remove finished jobs (done, failed, cancelled) and their history from the database,
        in one transaction; queued and running jobs are left alone. Returns each job (as it
        was) with what happened to it. Files are the caller's: see ``commands.forget_files``.
        """
        def one(c: sqlite3.Connection, job_id: int, row: sqlite3.Row) -> str:
            if row["state"] not in FINISHED:
                return f"{row['state']}; not forgotten (only done, failed or cancelled jobs are)"
            c.execute("DELETE FROM events WHERE job = ?", (job_id,))
            c.execute("DELETE FROM jobs WHERE id = ?", (job_id,))
            if row["batch"] is not None:
                c.execute("DELETE FROM batches WHERE id = ? AND NOT EXISTS "
                          "(SELECT 1 FROM jobs WHERE batch = ?)", (row["batch"], row["batch"]))
            return "forgotten"

        return self._each_job(ids, "state, batch", one)

    def _each_job(self, ids: Sequence[int], columns: str,
                  one: Callable[[sqlite3.Connection, int, sqlite3.Row], str]) -> list[tuple[Job, str]]:
        """``one`` on each job of ``ids`` (its row's ``columns``), all in one transaction;
        each job as it was before, with what ``one`` said happened to it. An unknown id
        raises QueueError and changes nothing."""
        def fn(c: sqlite3.Connection) -> list[tuple[int, str]]:
            out = []
            for job_id in ids:
                row = c.execute(f"SELECT {columns} FROM jobs WHERE id = ?", (job_id,)).fetchone()
                if row is None:
                    raise QueueError(f"there is no job {job_id}")
                out.append((job_id, one(c, job_id, row)))
            return out

        before = {j.id: j for j in self.jobs(ids=ids)}
        return [(before[i], what) for i, what in self.write(fn)]


def one_writer_each(jobs: Iterable[NewJob]) -> None:
    """JobError when two of ``jobs`` (entered together) write one output."""
    sources: dict[str, str] = {}  # output -> the job file of the first job writing it
    for job in jobs:
        if job.output in sources:
            raise JobError(f"{job.output!r} is also the output of a job from {sources[job.output]}; "
                           "give each job its own output.path", "output.path", job.source)
        sources[job.output] = job.source


def _writer(c: sqlite3.Connection, output: str, other_than: int | None = None) -> sqlite3.Row | None:
    """The queued or running job that writes ``output`` (not job ``other_than``), or None."""
    return c.execute(
        "SELECT id, name, state FROM jobs WHERE output = ? AND state IN ('queued', 'running') AND id != ? "
        "ORDER BY id LIMIT 1", (output, -1 if other_than is None else other_than)).fetchone()


def _taken(output: str, other: sqlite3.Row) -> str:
    return (f"{output!r} is already the output of job {other['id']} ({other['name']}, {other['state']}); "
            f"let it finish, cancel it (sevenfold cancel {other['id']}), or give this job another output.path")

