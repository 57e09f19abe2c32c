"""The web view under load: 20 clients poll it while a worker drains 30 small jobs.

Nothing may be lost (every job done, started exactly once), no request may fail, and the
queue's own commands, run meanwhile as users run them, never see "database is locked".
The clients poll for ``SEVENFOLD_WEB_LOAD_SECONDS`` (default 15 s here, to keep CI short;
``benchmarks/web_bench.py`` runs the full minute) or until the worker is done, whichever
is later.
"""

from __future__ import annotations

import os
import sqlite3
import time
from pathlib import Path

from sevenfold.queue.db import Queue
from sevenfold.queue.files import read_runs

from queue_support import WorkerProcess, cli, make_home, small_job, submit
from web_support import Pollers, ViewProcess

SECONDS = float(os.environ.get("SEVENFOLD_WEB_LOAD_SECONDS", "15"))


def test_twenty_polling_clients_while_a_worker_drains_thirty_jobs(tmp_path: Path, warm_cache: Path) -> None:
    home = make_home(tmp_path / "home", warm_cache)
    jobs = tmp_path / "jobs"
    jobs.mkdir()
    queued = submit(home, *[small_job(jobs, f"load{i:02d}", n=4 + i % 3) for i in range(30)])
    ids = [s["id"] for s in queued]
    view = ViewProcess(home)
    pollers = Pollers(view.url, ids, clients=20, every=1.0)
    worker = WorkerProcess(home, "--drain")
    commands = []
    started = time.monotonic()
    try:
        while worker.proc.poll() is None or time.monotonic() - started < SECONDS:
            for args in (["list", "--json"], ["show", str(ids[len(commands) % len(ids)])]):
                commands.append(cli(home, *args))
        assert worker.wait() == 0, worker.output()
    finally:
        pollers.stop()
        worker.stop()
        view.stop()
    for proc in commands:
        assert proc.returncode == 0, proc.stderr
        assert "locked" not in (proc.stdout + proc.stderr).lower() and "Traceback" not in proc.stderr
    assert "locked" not in worker.output().lower()
    assert pollers.failures == [] and set(pollers.codes) == {200}, (pollers.failures[:5], pollers.codes)
    assert pollers.requests >= 20 * 2 * 3  # every client polled, again and again
    assert "Traceback" not in view.output()
    with Queue(home) as q:
        final = q.jobs()
    assert sorted(j.id for j in final) == sorted(ids)
    for j in final:
        assert j.state == "done" and j.attempts == 1, (j.id, j.state, j.error)
        assert [r["event"] for r in read_runs(Path(j.output))] == ["start", "done"], j.id
    with sqlite3.connect(home.db) as c:
        started_events = [r[0] for r in c.execute("SELECT job FROM events WHERE event = 'started'")]
        assert sorted(started_events) == sorted(ids)  # each job started exactly once
        assert c.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
