"""A worker's side of the queue: registering, heartbeats, claims and the end of each run.

A running job belongs to one run (``run_id``): a worker's report about a run that is no
longer the job's current one changes nothing. Runs whose heartbeat went stale are taken
back (requeued, failed or cancelled) by the next claim or ``recover_stale``.
"""

from __future__ import annotations

import json
import sqlite3
import time
import uuid
from typing import Any, Sequence

from ..memory import human
from .connection import Connection
from .records import Claim, ClaimResult, Recovered
from .schema import record_event


class Runs(Connection):
    """The state changes a worker makes, each one transaction."""

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
            record_event(c, r["id"], now, "requeued" if outcome == "queued" else outcome, reason)
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
                    record_event(c, r["id"], now, "failed", reason)
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
            record_event(c, chosen["id"], now, "started",
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
            record_event(c, job_id, now, event, detail)
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
            record_event(c, job_id, now, "restarted", detail)
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
