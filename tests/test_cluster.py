"""``sevenfold worker --cluster``: queued jobs run on a real Dask cluster on loopback.

A ``distributed.LocalCluster`` with two worker processes (one thread each) is started by the
tests themselves; the claiming worker runs as a separate process, as users run it. Waits are
generous bounds, never assertions of speed.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import zarr

from sevenfold.queue.cluster import INSTALL_HINT
from sevenfold.queue.db import Queue
from sevenfold.queue.files import pid_alive, read_runs
from sevenfold.residual_log import log_path, read_log
from sevenfold.store import is_complete

from queue_support import (
    WAIT, WorkerProcess, cli, endless_job, env, iterations_logged, job, make_home, partials,
    small_job, submit, wait_for,
)


# Some 35 AMG-CG iterations of ~0.05 s each on this machine (rtol reached, true residual
# included): long enough to kill a Dask worker in the middle of the solve.
STEADY = """
name = "{name}"
physics = "generic"
[grid]
cells = [40, 40, 40]
size = [1.0, 1.0, 1.0]
[material]
expression = "exp(6 * sin(37 * x) * sin(41 * y) * sin(43 * z))"
[source]
value = 1.0
[boundary]
x_min = {{ type = "dirichlet", value = 0.0 }}
[solver]
method = "amg"
rtol = 1e-11
max_iterations = 2000
stagnation_window = 2000
[output]
path = "results/{{name}}.zarr"
"""


def steady_job(folder: Path, name: str) -> Path:
    path = folder / f"{name}.toml"
    path.write_text(STEADY.format(name=name))
    return path


@pytest.fixture(scope="module")
def cluster():
    distributed = pytest.importorskip("distributed")
    c = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                 dashboard_address=None)
    try:
        yield c
    finally:
        c.close()


def dask_worker_pids(cluster) -> set[int]:
    distributed = pytest.importorskip("distributed")
    with distributed.Client(cluster.scheduler_address, set_as_default=False) as client:
        return set(client.run(os.getpid).values())


def events(home, job_id: int) -> list[str]:
    with Queue(home) as q:
        return [e.event for e in q.events(job_id)]


def local_results(pairs: list[tuple[Path, Path]]) -> None:
    """The same jobs run by ``run_job`` in a process set up as a slot child is (one BLAS
    thread) with one numba thread, as the cluster tasks run with ``--threads 1``."""
    code = ("import sys; from sevenfold.runner import run_job\n"
            "for job, out in zip(sys.argv[1::2], sys.argv[2::2]): run_job(job, out)\n")
    e = env()
    e.update({"NUMBA_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1",
              "MKL_NUM_THREADS": "1"})
    args = [str(p) for pair in pairs for p in pair]
    proc = subprocess.run([sys.executable, "-c", code, *args], env=e, capture_output=True, text=True,
                          timeout=WAIT)
    assert proc.returncode == 0, proc.stderr


def test_eight_jobs_finish_on_the_cluster_identical_to_local_runs(tmp_path: Path, cluster) -> None:
    home = make_home(tmp_path / "home")
    jobs = tmp_path / "jobs"
    jobs.mkdir()
    # gmg and direct are bitwise reproducible; amg is not even between two local processes
    # (pyamg seeds its spectral-radius estimate from numpy's global random state)
    methods = ["gmg", "direct"] * 4
    files = [small_job(jobs, f"c{i}", n=24 + 2 * (i % 3), k=5.0 + i, method=m) for i, m in enumerate(methods)]
    submitted = submit(home, *files)
    w = WorkerProcess(home, "--cluster", cluster.scheduler_address, "--drain")
    assert w.wait() == 0, w.output()
    assert "Traceback" not in w.output()
    pids = dask_worker_pids(cluster)
    for s, f in zip(submitted, files):
        j = job(home, s["id"])
        assert j.state == "done" and j.attempts == 1, (j.id, j.state, j.error)
        runs = read_runs(Path(j.output))
        assert [r["event"] for r in runs] == ["start", "done"]
        assert runs[0]["pid"] in pids and runs[0]["pid"] != w.proc.pid  # ran on a Dask worker
        assert runs[0]["dask_worker"].startswith("tcp://127.0.0.1:")
        g = zarr.open_group(j.output, mode="r")
        assert g.attrs["complete"] is True and g.attrs["queue"]["run"] == runs[0]["run"]
    local = [(f, tmp_path / "local" / f"{s['name']}.zarr") for s, f in zip(submitted, files)]
    local_results(local)
    for s, (_, reference) in zip(submitted, local):
        g = zarr.open_group(s["output"], mode="r")
        np.testing.assert_array_equal(g["temperature"][:], zarr.open_group(str(reference), mode="r")["temperature"][:])
        assert g.attrs["solver"]["iterations"] == zarr.open_group(str(reference), mode="r").attrs["solver"]["iterations"]
    # the residuals reached the queue's readers while on the cluster: log reads the residual log
    proc = cli(home, "log", str(submitted[0]["id"]), "--csv")
    assert proc.returncode == 0, proc.stderr
    logged = list(read_log(log_path(Path(submitted[0]["output"]))))
    assert len(proc.stdout.splitlines()) - 1 == sum(1 for r in logged if "iteration" in r) > 0
    # both Dask workers took part
    assert len({read_runs(Path(s["output"]))[0]["pid"] for s in submitted}) == 2


def test_a_killed_dask_worker_mid_solve_reruns_the_task_and_every_job_finishes(tmp_path: Path,
                                                                                cluster) -> None:
    home = make_home(tmp_path / "home")
    (victim,) = submit(home, steady_job(tmp_path, "victim"))
    others = submit(home, *[small_job(tmp_path, f"other{i}", n=16, method="amg") for i in range(3)])
    w = WorkerProcess(home, "--cluster", cluster.scheduler_address, "--drain", environ=env(heartbeat=0.5, stale=5))
    try:
        wait_for(lambda: iterations_logged(victim["output"]) >= 3, "the solve to be iterating")
        (first,) = [r for r in read_runs(Path(victim["output"])) if r["event"] == "start"]
        os.kill(first["pid"], signal.SIGKILL)  # the Dask worker process running the solve
        assert w.wait() == 0, w.output()
    finally:
        w.stop()
    j = job(home, victim["id"])
    assert j.state == "done" and j.attempts == 2, (j.state, j.attempts, j.error, w.output())
    assert events(home, victim["id"]) == ["submitted", "started", "restarted", "done"]
    runs = read_runs(Path(victim["output"]))
    assert [r["event"] for r in runs] == ["start", "start", "done"]
    assert runs[0]["pid"] != runs[1]["pid"] and not pid_alive(runs[0]["pid"])
    assert runs[0]["run"] == runs[1]["run"] == runs[2]["run"]
    assert zarr.open_group(victim["output"], mode="r").attrs["queue"]["attempt"] == 2
    assert is_complete(Path(victim["output"])) and partials(victim["output"]) == []
    for s in others:
        assert job(home, s["id"]).state == "done"


def test_cancel_reaches_a_running_task(tmp_path: Path, cluster) -> None:
    home = make_home(tmp_path / "home")
    (s,) = submit(home, endless_job(tmp_path, "endless"))
    w = WorkerProcess(home, "--cluster", cluster.scheduler_address, "--drain", environ=env(grace=60))
    try:
        wait_for(lambda: iterations_logged(s["output"]) >= 3, "the solve to be iterating")
        proc = cli(home, "cancel", str(s["id"]))
        assert proc.returncode == 0 and "stopping" in proc.stdout, proc.stderr
        assert w.wait() == 0, w.output()
    finally:
        w.stop()
    j = job(home, s["id"])
    assert j.state == "cancelled" and "stopped at its next iteration" in j.error, (j.state, j.error)
    end = list(read_log(log_path(Path(s["output"]))))[-1]
    assert end["event"] == "end" and "Cancelled" in end["error"]  # the solve on the Dask worker raised
    assert not Path(s["output"]).exists() and partials(s["output"]) == []


def test_a_killed_claimer_stops_its_task_and_the_job_is_taken_back(tmp_path: Path, cluster) -> None:
    home = make_home(tmp_path / "home")
    fast = env(heartbeat=0.5, stale=5)
    (s,) = submit(home, endless_job(tmp_path, "orphan"), environ=fast)
    w = WorkerProcess(home, "--cluster", cluster.scheduler_address, environ=fast)
    wait_for(lambda: iterations_logged(s["output"]) >= 3, "the solve to be iterating")
    w.proc.send_signal(signal.SIGKILL)
    w.wait()
    # the scheduler releases the dead client's future; the task sees it and stops cooperatively
    log = log_path(Path(s["output"]))
    wait_for(lambda: any(r.get("event") == "end" for r in read_log(log)), "the orphaned task to stop", timeout=60)
    end = list(read_log(log))[-1]
    assert "Cancelled" in end["error"]
    (start,) = [r for r in read_runs(Path(s["output"])) if r["event"] == "start"]
    assert pid_alive(start["pid"])  # stopped by the solve itself, not by killing the Dask worker
    assert cli(home, "cancel", str(s["id"]), environ=fast).returncode == 0
    wait_for(lambda: cli(home, "list", environ=fast).returncode == 0 and job(home, s["id"]).state == "cancelled",
             "list to take the silent worker's job back", every=1.0)
    assert not Path(s["output"]).exists()


def test_an_unreachable_scheduler_fails_fast_and_leaves_the_jobs_queued(tmp_path: Path) -> None:
    pytest.importorskip("distributed")
    home = make_home(tmp_path / "home")
    (s,) = submit(home, small_job(tmp_path, "waiting"))
    proc = cli(home, "worker", "--cluster", "tcp://127.0.0.1:1", "--drain", timeout=120)
    assert proc.returncode == 2, (proc.stdout, proc.stderr)
    assert "cannot reach the Dask scheduler at tcp://127.0.0.1:1" in proc.stderr
    assert "the queued jobs stay queued" in proc.stderr and "Traceback" not in proc.stderr
    assert len(proc.stderr.strip().splitlines()) == 1
    j = job(home, s["id"])
    assert j.state == "queued" and j.attempts == 0 and j.worker is None
    assert events(home, s["id"]) == ["submitted"]


def test_without_dask_the_cluster_worker_says_what_to_install(tmp_path: Path, monkeypatch, capsys) -> None:
    from sevenfold import cli as sevenfold_cli

    monkeypatch.setitem(sys.modules, "distributed", None)  # import distributed raises ImportError
    home = make_home(tmp_path / "home")
    (s,) = submit(home, small_job(tmp_path, "local"))
    code = sevenfold_cli.main(["worker", "--cluster", "tcp://127.0.0.1:8786", "--home", str(home.root)])
    assert code == 2
    assert INSTALL_HINT in capsys.readouterr().err.replace("\n", "")
    assert job(home, s["id"]).state == "queued"
