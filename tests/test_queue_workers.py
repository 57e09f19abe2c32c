"""The queue end to end: worker processes, kills, cancels, retries, many clients at once.

Workers and clients run as separate processes, the way users run them. The tests share the
numba cache the warm_cache fixture compiles once per session (two workers started at once
from an empty cache); workers of every home and `sevenfold run` use it, as they share an
install's cache.
"""

from __future__ import annotations

import os
import signal
import sqlite3
import subprocess
import threading
from pathlib import Path

import pytest
import zarr

from sevenfold.queue.db import Queue
from sevenfold.queue.files import pid_alive, read_runs
from sevenfold.residual_log import log_path, read_log
from sevenfold.store import is_complete

from queue_support import (
    WorkerProcess, cli, endless_job, env, iterations_logged, job, make_home, partials, slow_job,
    small_job, submit, wait_for,
)


def integrity(home) -> str:
    with sqlite3.connect(home.db) as c:
        return c.execute("PRAGMA integrity_check").fetchone()[0]


def started_order(home) -> list[int]:
    with sqlite3.connect(home.db) as c:
        return [r[0] for r in c.execute("SELECT job FROM events WHERE event = 'started' ORDER BY id")]


# ---------------------------------------------------------------- throughput and exclusivity
def test_three_workers_run_thirty_jobs_once_each_by_priority(tmp_path: Path, warm_cache: Path) -> None:
    home = make_home(tmp_path / "home", warm_cache)  # (first starts at once: the warm_cache fixture)
    jobs = tmp_path / "jobs"
    jobs.mkdir()
    priority = {}
    for p in (1, 0, 2):  # submitted in an order that is not the order they must run in
        files = [small_job(jobs, f"job{i:02d}", n=5 + i % 4) for i in range(30) if i % 3 == p]
        priority.update({s["id"]: p for s in submit(home, *files, priority=p)})
    workers = [WorkerProcess(home, "--drain") for _ in range(3)]
    for w in workers:
        assert w.wait() == 0, w.output()
    with Queue(home) as q:
        final = q.jobs()
    assert len(final) == 30
    for j in final:
        assert j.state == "done" and j.attempts == 1, (j.id, j.state, j.error)
        runs = read_runs(Path(j.output))
        # the output's own record: one run started, one finished, and the result is that run's
        assert [r["event"] for r in runs] == ["start", "done"], (j.id, runs)
        assert runs[0]["job"] == j.id and runs[0]["run"] == runs[1]["run"]
        attrs = zarr.open_group(j.output, mode="r").attrs
        assert attrs["complete"] is True and attrs["queue"]["run"] == runs[1]["run"]
        assert attrs["queue"]["job"] == j.id and attrs["queue"]["attempt"] == 1
        assert partials(j.output) == []
    order = started_order(home)
    assert sorted(order) == sorted(priority)  # every job started exactly once
    assert [priority[i] for i in order] == sorted(priority.values(), reverse=True)
    assert integrity(home) == "ok"


# ---------------------------------------------------------------- a worker killed mid-solve
def test_sigkill_of_a_worker_mid_solve_requeues_the_job_which_then_completes(tmp_path: Path,
                                                                              warm_cache: Path) -> None:
    home = make_home(tmp_path / "home", warm_cache)
    fast = env(heartbeat=0.5, stale=5)
    (s,) = submit(home, slow_job(tmp_path, "victim"), environ=fast)
    a = WorkerProcess(home, environ=fast)
    wait_for(lambda: iterations_logged(s["output"]) >= 3, "the solve to be iterating")
    running = job(home, s["id"])
    assert running.state == "running" and running.pid is not None
    a.proc.send_signal(signal.SIGKILL)
    a.wait()
    # the child dies with its worker (it never finishes the solve on its own)
    wait_for(lambda: not pid_alive(running.pid), "the orphaned child to die")
    assert job(home, s["id"]).state == "running"  # nobody has noticed yet
    # what a kill during the write would leave behind: a half-written sibling of the result
    out = Path(s["output"])
    half = out.parent / f".{out.name}.partial-{running.pid}-0123abcd"
    (half / "temperature").mkdir(parents=True)
    b = WorkerProcess(home, "--drain", environ=fast)
    assert b.wait() == 0, b.output()
    done = job(home, s["id"])
    assert done.state == "done" and done.attempts == 2, (done.state, done.error)
    with Queue(home) as q:
        events = [e.event for e in q.events(s["id"])]
    assert events == ["submitted", "started", "requeued", "started", "done"]
    runs = read_runs(out)
    assert [r["event"] for r in runs] == ["start", "start", "done"]
    assert runs[0]["run"] != runs[1]["run"] == runs[2]["run"]
    attrs = zarr.open_group(str(out), mode="r").attrs
    assert attrs["queue"]["attempt"] == 2 and attrs["queue"]["run"] == runs[2]["run"]
    assert not half.exists() and partials(out) == []
    assert integrity(home) == "ok"


def test_a_worker_stopped_by_sigterm_puts_its_running_job_back(tmp_path: Path, warm_cache: Path) -> None:
    home = make_home(tmp_path / "home", warm_cache)
    (s,) = submit(home, endless_job(tmp_path, "interrupted"))
    w = WorkerProcess(home, environ=env(grace=60))
    wait_for(lambda: iterations_logged(s["output"]) >= 3, "the solve to be iterating")
    w.proc.send_signal(signal.SIGTERM)
    assert w.wait() == 0, w.output()
    assert "compiling" not in w.output()  # a new home: the kernels are in the install's cache
    said = w.output()  # the signal and the job's fate, said before the job's own line
    assert said.index(f"asked to stop (SIGTERM); the running jobs ({s['id']} interrupted)") \
        < said.index(f"requeued {s['id']} interrupted (worker shutting down)"), said
    j = job(home, s["id"])
    assert j.state == "queued" and j.attempts == 1 and j.worker is None
    with Queue(home) as q:
        assert [e.event for e in q.events(s["id"])] == ["submitted", "started", "requeued"]
        assert "shut down" in q.events(s["id"])[-1].detail
    end = list(read_log(log_path(Path(s["output"]))))[-1]
    assert end["event"] == "end" and "Cancelled" in end["error"]  # stopped cooperatively
    assert not Path(s["output"]).exists() and partials(s["output"]) == []


# ---------------------------------------------------------------- one worker, many situations
@pytest.fixture(scope="module")
def worker_home(tmp_path_factory, warm_cache: Path):
    """One running worker (1 slot, memory limit 0.3 GiB, 60 s grace) for the tests below."""
    root = tmp_path_factory.mktemp("shared")
    home = make_home(root / "home", warm_cache)
    w = WorkerProcess(home, "--memory", "0.3", environ=env(grace=60))
    yield home, root, w
    w.stop()
    assert integrity(home) == "ok"


def test_after_a_workers_first_start_a_run_in_its_own_process_compiles_nothing(
        tmp_path: Path, warm_cache: Path) -> None:
    """One compile per install: the kernels a worker compiled at its first start (the fixture's)
    serve `sevenfold run` in a process of its own, with no compile notice, on a grid with
    multigrid levels and on one without."""
    for n in (48, 12):
        path = small_job(tmp_path, f"own{n}", n=n, method="gmg")
        proc = cli(make_home(tmp_path / f"home{n}", warm_cache), "run", "--here", "--no-progress",
                   str(path))
        assert proc.returncode == 0, proc.stderr
        assert "compiling" not in proc.stdout + proc.stderr, proc.stdout + proc.stderr
        assert "converged: gmg" in proc.stdout


def test_watch_follows_a_running_job_until_it_ends(worker_home) -> None:
    home, root, _ = worker_home
    (s,) = submit(home, slow_job(root, "watched"))
    wait_for(lambda: job(home, s["id"]).state == "running", "the job to start")
    proc = cli(home, "watch", str(s["id"]), "--lines", "--interval", "0.2")
    assert proc.returncode == 0, proc.stderr
    assert job(home, s["id"]).state == "done"  # watch returned because the job ended
    lines = proc.stdout.splitlines()
    seen = [int(line.split("iteration ")[1].split(",")[0]) for line in lines if "running: iteration" in line]
    assert len(seen) >= 2 and seen == sorted(seen) and len(set(seen)) == len(seen)  # advancing
    assert any("rate" in line for line in lines) and any("more to rtol" in line for line in lines)
    assert "|" in proc.stdout and "*" in proc.stdout  # the residual plot
    assert lines[-1].startswith(f"job {s['id']} done:")


def test_cancel_stops_a_running_solve_at_its_next_iteration(worker_home) -> None:
    home, root, _ = worker_home
    (s,) = submit(home, endless_job(root, "endless"))
    wait_for(lambda: iterations_logged(s["output"]) >= 3, "the solve to be iterating")
    proc = cli(home, "cancel", str(s["id"]))
    assert proc.returncode == 0 and "stopping" in proc.stdout, proc.stderr
    wait_for(lambda: job(home, s["id"]).state == "cancelled", "the job to be cancelled", timeout=50)
    j = job(home, s["id"])
    assert "stopped at its next iteration" in j.error  # not killed: the grace is 60 s
    end = list(read_log(log_path(Path(s["output"]))))[-1]
    assert end["event"] == "end" and "Cancelled" in end["error"]  # the CG loop raised Cancelled
    assert not Path(s["output"]).exists() and partials(s["output"]) == []


def test_a_crashed_solve_fails_alone_and_retry_completes_it(worker_home) -> None:
    home, root, w = worker_home
    (s,) = submit(home, slow_job(root, "crashing"))
    wait_for(lambda: iterations_logged(s["output"]) >= 2, "the solve to be iterating")
    pid = job(home, s["id"]).pid
    os.kill(pid, signal.SIGKILL)  # what the out-of-memory killer does
    wait_for(lambda: job(home, s["id"]).state == "failed", "the job to fail")
    j = job(home, s["id"])
    assert "killed by SIGKILL" in j.error and j.finished is not None
    assert w.proc.poll() is None  # the worker lives on
    (after,) = submit(home, small_job(root, "after-crash"))  # a new child takes the next job
    wait_for(lambda: job(home, after["id"]).state == "done", "the next job to run")
    proc = cli(home, "retry", str(s["id"]))
    assert proc.returncode == 0 and "queued again" in proc.stdout, proc.stderr
    wait_for(lambda: job(home, s["id"]).state == "done", "the retried job to finish")
    assert job(home, s["id"]).attempts == 1 and is_complete(Path(s["output"]))
    assert partials(s["output"]) == []


def test_a_failing_write_fails_with_the_os_error_then_retry_after_the_fix(worker_home) -> None:
    home, root, _ = worker_home
    folder = root / "blocked"
    folder.mkdir()
    (folder / "out").write_text("a file where the results folder should be\n")
    # a file where the output's folder must be is known before anything runs: submit refuses it
    proc = cli(home, "submit", str(small_job(folder, "refused", output="out/{name}.zarr")))
    assert proc.returncode == 2 and "is a file, not a folder" in " ".join(proc.stderr.split())
    (folder / "out").unlink()
    # a folder where the residual log must go is met only when the run writes
    (folder / "out" / "blocked.residuals.jsonl").mkdir(parents=True)
    (s,) = submit(home, small_job(folder, "blocked", output="out/{name}.zarr"))
    wait_for(lambda: job(home, s["id"]).state == "failed", "the job to fail")
    j = job(home, s["id"])
    log = folder / "out" / "blocked.residuals.jsonl"
    assert j.error == f"cannot write the residual log {log}: Is a directory"  # the line `run` prints
    assert not is_complete(Path(s["output"]))
    log.rmdir()  # the user frees the path
    assert cli(home, "retry", str(s["id"])).returncode == 0
    wait_for(lambda: job(home, s["id"]).state == "done", "the retried job to finish")
    assert is_complete(Path(s["output"]))


def test_a_solve_that_stops_short_fails_and_keeps_its_result(worker_home) -> None:
    home, root, _ = worker_home
    path = small_job(root, "short", n=24, method="gmg")  # above gmg's 16^3 coarsest level, so it iterates
    path.write_text(path.read_text().replace('method = "gmg"', 'method = "gmg"\nrtol = 1e-14\nmax_iterations = 2'))
    (s,) = submit(home, path)
    wait_for(lambda: job(home, s["id"]).state == "failed", "the job to fail")
    j = job(home, s["id"])
    assert "did not converge in 2 iterations" in j.error and "not converged" in j.error
    assert s["output"] in j.error  # the failure names the result it kept
    out = Path(s["output"])
    assert is_complete(out) and partials(out) == []
    attrs = zarr.open_group(str(out), mode="r").attrs
    assert attrs["converged"] is False and attrs["solver"]["stop"] == "max_iterations"
    proc = cli(home, "show", str(s["id"]))
    assert proc.returncode == 0 and "NOT converged" in proc.stdout, proc.stderr


def test_a_job_larger_than_the_workers_memory_is_not_started(worker_home) -> None:
    home, root, _ = worker_home
    (big,) = submit(home, small_job(root, "big", n=64, method="amg"))
    wait_for(lambda: job(home, big["id"]).state == "failed", "the job to be refused")
    j = job(home, big["id"])
    assert j.started is None and j.attempts == 0
    assert "not started: needs about" in j.error and "more than the 307.2 MiB" in j.error


# ---------------------------------------------------------------- grace period and time limit
def test_a_solve_that_does_not_stop_is_killed_after_the_grace_and_time_limits_hold(tmp_path: Path,
                                                                                  warm_cache: Path) -> None:
    home = make_home(tmp_path / "home", warm_cache)
    w = WorkerProcess(home, environ=env(grace=1))
    try:
        # a direct solve (sparse LU) does not poll between iterations: it must be killed
        (lu,) = submit(home, small_job(tmp_path, "lu", n=36, method="direct"))
        wait_for(lambda: iterations_logged(lu["output"]) >= 1, "the factorisation to begin")
        assert cli(home, "cancel", str(lu["id"])).returncode == 0
        wait_for(lambda: job(home, lu["id"]).state in ("cancelled", "done"), "the job to end")
        j = job(home, lu["id"])
        assert j.state == "cancelled" and "killed after the 1 s grace period" in j.error
        assert not Path(lu["output"]).exists() and partials(lu["output"]) == []
        (limited,) = submit(home, endless_job(tmp_path, "limited"), extra=("--time-limit", "3"))
        wait_for(lambda: job(home, limited["id"]).state == "failed", "the time limit to stop the job")
        assert "exceeded its time limit of 3 s" in job(home, limited["id"]).error
        (after,) = submit(home, small_job(tmp_path, "after"))
        wait_for(lambda: job(home, after["id"]).state == "done", "a job after the kill to run")
    finally:
        w.stop()
    assert integrity(home) == "ok"


# ---------------------------------------------------------------- many clients at once
def test_concurrent_submits_while_workers_run_never_see_a_locked_database(tmp_path: Path,
                                                                          warm_cache: Path) -> None:
    home = make_home(tmp_path / "home", warm_cache)
    jobs = tmp_path / "jobs"
    jobs.mkdir()
    workers = [WorkerProcess(home) for _ in range(2)]
    results: list[subprocess.CompletedProcess] = []
    lock = threading.Lock()

    def client(i: int) -> None:
        files = [small_job(jobs, f"c{i}-{k}", n=4) for k in range(2)]
        for args in (["submit", *map(str, files), "--json"], ["list", "--json"]):
            proc = cli(home, *args)
            with lock:
                results.append(proc)

    try:
        threads = [threading.Thread(target=client, args=(i,)) for i in range(8)]
        for t in threads:
            t.start()
        for t in threads:
            t.join()
        for proc in results:
            assert proc.returncode == 0, proc.stderr
            assert "locked" not in proc.stderr.lower() and "Traceback" not in proc.stderr
        with Queue(home) as q:
            wait_for(lambda: q.counts()["done"] == 16, "all 16 jobs to finish")
            assert len(q.jobs()) == 16
    finally:
        for w in workers:
            w.stop()
    for w in workers:
        assert "Traceback" not in w.output()
    assert integrity(home) == "ok"
