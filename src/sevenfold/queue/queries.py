"""Looking at the queue: jobs, events, batches, workers, counts; reads only."""

from __future__ import annotations

import json
import sqlite3
import time
from typing import Any, Iterable, Sequence

from ..errors import QueueError
from .connection import Connection
from .records import STATES, Event, Job
from .schema import LIST_COLUMNS


class Queries(Connection):
    """The queue's reads, each on one consistent snapshot."""

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
        sql = f"SELECT {LIST_COLUMNS} FROM jobs"
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
