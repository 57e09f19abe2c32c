"""``sevenfold run`` handed to an idle worker on this machine (sevenfold.queue.handoff).

The hand-off must give what a run in the process gives: the same solution (to the solve's
rtol), the same summary and exit codes, and no queue made where there was none.
"""

from __future__ import annotations

import os
import socket
from pathlib import Path

import numpy as np
import pytest
import zarr

from sevenfold.cli import main
from sevenfold.queue import handoff
from sevenfold.queue.db import Queue
from sevenfold.queue.handoff import Handed, follow, idle_worker
from sevenfold.queue.home import Timing, locate
from sevenfold.queue.submit import enqueue, prepare

from queue_support import WorkerProcess, job, make_home, small_job, wait_for

COLUMN = """
name = "{name}"
physics = "generic"
[grid]
cells = [24, 20, 16]
size = [1.0, 1.0, 1.0]
[material]
value = 1.0
[[material.region]]
box = {{ min = [0.25, 0.25, 0.0], max = [0.75, 0.75, 1.0] }}
value = 1000.0
[source]
expression = "sin(pi * x) * sin(pi * y) * sin(pi * z)"
[boundary]
x_min = {{ type = "dirichlet", value = 0.0 }}
x_max = {{ type = "dirichlet", value = 0.0 }}
[solver]
method = "gmg"
rtol = 1e-8
{extra}
[output]
path = "{name}.zarr"
"""


def column_job(folder: Path, name: str, extra: str = "") -> Path:
    path = folder / f"{name}.toml"
    path.write_text(COLUMN.format(name=name, extra=extra))
    return path


@pytest.fixture(scope="module")
def idle_home(tmp_path_factory, warm_cache: Path):
    """A queue with one running slot worker on this machine."""
    root = tmp_path_factory.mktemp("handoff")
    home = make_home(root / "home", warm_cache)
    w = WorkerProcess(home)
    wait_for(lambda: "ready" in w.output(), "the worker's slot to be ready")
    yield home, root
    w.stop()


def test_run_is_handed_to_an_idle_worker_and_matches_a_run_here(idle_home, capsys) -> None:
    home, root = idle_home
    there = column_job(root, "there")
    assert main(["run", str(there), "--home", str(home.root)]) == 0
    printed = capsys.readouterr().out
    assert "run by worker" in printed and "converged: gmg" in printed and "balance" in printed
    attrs = dict(zarr.open_group(str(root / "there.zarr"), mode="r").attrs)
    assert attrs["complete"] and attrs["converged"]
    assert attrs["queue"]["worker"] and attrs["queue"]["pid"] != os.getpid()  # solved by the worker

    here = column_job(root, "here")
    assert main(["run", str(here), "--here", "--home", str(home.root), "-q"]) == 0
    assert capsys.readouterr().out.strip() == str(root / "here.zarr")
    here_attrs = dict(zarr.open_group(str(root / "here.zarr"), mode="r").attrs)
    assert "queue" not in here_attrs  # --here: solved in this process
    u_there = zarr.open_group(str(root / "there.zarr"), mode="r")["u"][...]
    u_here = zarr.open_group(str(root / "here.zarr"), mode="r")["u"][...]
    # both are CG solves of one system to rtol 1e-8 (common practice: agree to about rtol)
    assert np.abs(u_there - u_here).max() <= 1e-6 * np.abs(u_here).max()


def test_quiet_hand_off_prints_the_path_alone_and_honours_output(idle_home, capsys) -> None:
    home, root = idle_home
    target = root / "elsewhere" / "given.zarr"
    assert main(["run", str(column_job(root, "quiet")), "-q", "-o", str(target), "--home", str(home.root)]) == 0
    assert capsys.readouterr().out.strip() == str(target)
    attrs = dict(zarr.open_group(str(target), mode="r").attrs)
    assert attrs["complete"] and "queue" in attrs


def test_a_failing_hand_off_exits_as_a_run_here_would(idle_home, capsys) -> None:
    home, root = idle_home
    # stops short: the result is kept, marked, and the exit code is the solver's (1)
    short = column_job(root, "short", extra="max_iterations = 2")
    assert main(["run", str(short), "--home", str(home.root)]) == 1
    assert "result kept" in capsys.readouterr().err
    attrs = dict(zarr.open_group(str(root / "short.zarr"), mode="r").attrs)
    assert attrs["complete"] and attrs["converged"] is False
    # an input error the worker finds when it builds the problem: fft needs one k
    fft = column_job(root, "fft").read_text().replace('method = "gmg"', 'method = "fft"')
    (root / "fft.toml").write_text(fft)
    assert main(["run", str(root / "fft.toml"), "--home", str(home.root)]) == 2
    assert "fft" in capsys.readouterr().err
    assert main(["run", str(root / "fft.toml"), "--here", "--home", str(home.root)]) == 2


def test_no_queue_means_a_run_here_and_no_queue_made(tmp_path: Path, capsys) -> None:
    home = tmp_path / "never"
    assert main(["run", str(small_job(tmp_path, "plain")), "-q", "--home", str(home)]) == 0
    assert not home.exists()
    assert "queue" not in dict(zarr.open_group(str(tmp_path / "results" / "plain.zarr"), mode="r").attrs)


def _register(q: Queue, worker: str, host: str, pid: int, slots: int = 1) -> None:
    q.register_worker(worker, host, pid, slots)


def test_idle_worker_takes_only_a_live_local_slot_worker_with_nothing_queued(tmp_path: Path) -> None:
    home = locate(tmp_path / "home")
    with Queue(home, Timing()) as q:
        assert idle_worker(q) is None  # no worker
        host = socket.gethostname()
        _register(q, f"{host}:1:dask", host, os.getpid())
        _register(q, "far:1", "another-host", os.getpid())
        assert idle_worker(q) is None  # a cluster worker and another machine's worker
        _register(q, f"{host}:dead", host, 2**22 + 12345)  # no such process
        assert idle_worker(q) is None
        from sevenfold.queue.worker import cores

        if cores() > 1:  # a slot of a two-slot worker has half the cores: run is faster here
            _register(q, f"{host}:shared", host, os.getpid(), slots=2)
            assert idle_worker(q) is None
        _register(q, f"{host}:me", host, os.getpid())
        assert idle_worker(q) == f"{host}:me"
        enqueue(q, [prepare(small_job(tmp_path, "waiting"), home)])
        assert idle_worker(q) is None  # a job waits: a hand-off would wait behind it


def test_a_hand_off_no_worker_takes_is_cancelled_and_left_to_the_caller(tmp_path: Path, monkeypatch) -> None:
    monkeypatch.setattr(handoff, "LOST_AFTER", 0.2)
    home = locate(tmp_path / "home")
    with Queue(home, Timing()) as q:
        (queued,) = enqueue(q, [prepare(small_job(tmp_path, "orphan"), home)], max_attempts=1)
        assert follow(Handed(q, queued, "gone"), lambda j, p: None, poll=0.02) is None
    assert job(home, queued.id).state == "cancelled"


def test_ctrl_c_during_a_hand_off_cancels_the_queued_job(tmp_path: Path, monkeypatch, capsys) -> None:
    """README: Ctrl-C cancels the handed-off job; run exits 130 and says no result was written.
    (A worker that never takes the job stands in; the interrupt arrives while following.)"""
    home = locate(tmp_path / "home")
    Queue(home, Timing()).close()
    monkeypatch.setattr(handoff, "idle_worker", lambda queue: "stand-in")

    def interrupted(handed, on_progress, poll=handoff.POLL):
        raise KeyboardInterrupt

    monkeypatch.setattr(handoff, "follow", interrupted)
    assert main(["run", str(small_job(tmp_path, "stopped")), "--home", str(home.root)]) == 130
    assert "cancelled" in capsys.readouterr().err
    with Queue(home, Timing()) as q:
        (j,) = q.jobs()
    assert j.state == "cancelled" and not (tmp_path / "results" / "stopped.zarr").exists()


def test_a_rung_worker_looks_at_once(tmp_path: Path) -> None:
    """The bell (sevenfold.queue.wake): a worker napping with a 30 s poll wakes within a
    second when rung, a ring nobody listens to is reported unheard, and a second bell on the
    same home and pid is not listening (that worker just polls)."""
    import threading
    import time

    from sevenfold.queue.wake import Bell, ring
    from sevenfold.queue.worker import Worker, WorkerOptions

    home = make_home(tmp_path / "home")
    worker = Worker(home, WorkerOptions(poll=30.0), say=lambda text: None)
    try:
        assert worker.bell.listening
        assert not Bell(home.root, os.getpid()).listening
        woke: list[float] = []
        napper = threading.Thread(target=lambda: (worker.nap(), woke.append(time.monotonic())))
        napper.start()
        time.sleep(0.2)
        rung = time.monotonic()
        assert ring(home.root, os.getpid())
        napper.join(5.0)
        assert woke and woke[0] - rung < 1.0, woke
        assert not ring(tmp_path / "elsewhere", os.getpid())  # no worker of that home
        quiet = Bell(tmp_path / "other", os.getpid())
        t0 = time.monotonic()
        assert quiet.wait(0.1) is False and time.monotonic() - t0 >= 0.09
        quiet.close()
    finally:
        worker.bell.close()


def test_hand_off_rings_the_worker_it_chose(idle_home, monkeypatch) -> None:
    """run queues the job, then rings the bell of the idle worker it found (its pid, its
    home), so the job starts without waiting for the worker's next poll."""
    home, root = idle_home
    rung: list[tuple[Path, int]] = []
    monkeypatch.setattr(handoff, "ring", lambda where, pid: rung.append((Path(where), pid)) or True)
    handed = handoff.hand_off(column_job(root, "rung"), None, home.root)
    assert handed is not None
    (worker_pid,) = [int(w["pid"]) for w in handed.queue.workers() if w["id"] == handed.worker]
    assert rung == [(home.root, worker_pid)]
    assert follow(handed, lambda j, p: None).state == "done"


def test_the_worker_rings_the_follower_when_the_run_ends(idle_home) -> None:
    """The worker rings the handed job's bell (wake.job_bell) when its run ends, so `run`
    reports at once: followed with a 30 s poll, a job of well under a second is reported
    within 10 s only if the ring was heard (without it the first look after the start
    comes 30 s later)."""
    import time

    home, root = idle_home
    handed = handoff.hand_off(column_job(root, "bell"), None, home.root)
    assert handed is not None
    t0 = time.monotonic()
    ended = follow(handed, lambda j, p: None, poll=30.0)
    assert ended is not None and ended.state == "done"
    assert time.monotonic() - t0 < 10.0
