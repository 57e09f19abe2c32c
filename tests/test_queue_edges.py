"""The queue's rough edges: outputs two jobs would share, homes without a queue, retry of an
edited job file, forgetting finished jobs, a listing that fits the terminal, CSV, closed
pipes, and a sweep's results as a table."""

from __future__ import annotations

import csv
import io
import json
import os
import signal
import sqlite3
import subprocess
import sys
import threading
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
import zarr

from sevenfold.cli import main
from sevenfold.memory import KEEP_FREED_MEMORY
from sevenfold.queue import child, files
from sevenfold.queue.commands import PUBLIC_FIELDS, public
from sevenfold.queue.db import Queue
from sevenfold.queue.records import NewJob
from sevenfold.queue.files import read_runs, write_text_atomic
from sevenfold.queue.home import Home, locate
from sevenfold.queue.tomlwrite import dumps
from sevenfold.residual_log import log_path
from sevenfold.runner import probes_csv_path
from sevenfold.store import is_complete

from queue_support import WAIT, small_job, wait_for

SWEEP = """
name = "sw"
physics = "heat"
[grid]
cells = [6, 6, 6]
size = [0.1, 0.1, 0.1]
[material]
value = 10.0
[source]
value = 1.0e3
[boundary]
x_min = {{ type = "dirichlet", value = 300.0 }}
[[hold]]
name = "sink"
box = {{ min = [0.08, 0.0, 0.0], max = [0.1, 0.1, 0.1] }}
value = 290.0
[[probe]]
name = "c"
point = [0.05, 0.05, 0.05]
[[probe]]
name = "across"
line = {{ start = [0.0, 0.05, 0.05], end = [0.1, 0.05, 0.05], points = 5 }}
[solver]
method = "direct"
[output]
path = "res/{{name}}.zarr"
[sweep]
mode = "zip"
"material.value" = {k}
"source.value" = {q}
"""


@pytest.fixture
def home(tmp_path: Path) -> Home:
    return locate(tmp_path / "home")


def run(home: Home, *args: str, capsys) -> tuple[int, str, str]:
    code = main([*args, "--home", str(home.root)])
    got = capsys.readouterr()
    return code, got.out, got.err


def listing(home: Home, capsys) -> list[dict]:
    code, out, _ = run(home, "list", "--json", capsys=capsys)
    assert code == 0
    return json.loads(out)


def finish(home: Home, job_id: int) -> dict:
    """Run a queued job to its end the way a worker's slot does, in this process."""
    with Queue(home) as q:
        c = q.claim("test").claim
        assert c is not None and c.id == job_id
    write_text_atomic(home.job_file(c.id), dumps(c.job_table))
    reply = child.execute({"job": c.id, "run": c.run_id, "attempt": 1, "output": c.output, "worker": "test"},
                          home, child.ChildState(os.getppid()))
    with Queue(home) as q:
        assert q.finish(c.id, c.run_id, reply["summary"]) if reply["status"] == "done" else \
            q.fail(c.id, c.run_id, reply["error"])
    return reply


# ---------------------------------------------------------------- one output, one live job
def test_submit_refuses_an_output_a_queued_job_writes_and_names_it(tmp_path: Path, home: Home, capsys) -> None:
    first = small_job(tmp_path, "first")
    assert run(home, "submit", str(first), capsys=capsys)[0] == 0
    other = small_job(tmp_path, "other", output="results/first.zarr")  # another file, the same result
    code, _, err = run(home, "submit", str(other), capsys=capsys)
    line = " ".join(err.split())
    assert code == 2 and "Traceback" not in err
    assert "is already the output of job 1 (first, queued)" in line and "output.path" in line
    assert [j["id"] for j in listing(home, capsys)] == [1]
    # two files of one submit that write one result: refused together, nothing queued
    third = small_job(tmp_path, "third", output="results/shared.zarr")
    fourth = small_job(tmp_path, "fourth", output="results/shared.zarr")
    code, _, err = run(home, "submit", str(third), str(fourth), capsys=capsys)
    assert code == 2 and "also the output of a job from" in " ".join(err.split())
    assert [j["id"] for j in listing(home, capsys)] == [1]
    # once the first is cancelled, its output is free again
    assert run(home, "cancel", "1", capsys=capsys)[0] == 0
    assert run(home, "submit", str(other), capsys=capsys)[0] == 0
    # ... and retrying the cancelled one would now clash: it stays cancelled, saying why
    code, out, _ = run(home, "retry", "1", capsys=capsys)
    assert code == 0 and "not queued" in out and "job 2" in out
    assert {j["id"]: j["state"] for j in listing(home, capsys)} == {1: "cancelled", 2: "queued"}


# ---------------------------------------------------------------- a home without a queue
@pytest.mark.parametrize("command", [["list"], ["list", "--csv"], ["show", "1"], ["watch", "1", "--lines"],
                                     ["log", "1"], ["cancel", "1"], ["retry", "1"], ["forget", "1"],
                                     ["table", "b1"]])
def test_commands_refuse_a_home_without_a_queue(tmp_path: Path, command: list[str], capsys) -> None:
    where = tmp_path / "typo"
    assert main([*command, "--home", str(where)]) == 2
    got = capsys.readouterr()
    assert got.err.strip().count("\n") == 0 and "there is no queue in" in got.err  # one line
    assert not where.exists()  # nothing was created


def test_submit_and_worker_start_a_queue_and_say_so(tmp_path: Path, capsys, monkeypatch) -> None:
    job = small_job(tmp_path, "fresh")
    assert main(["submit", str(job), "--home", str(tmp_path / "new")]) == 0
    assert "new queue in" in capsys.readouterr().err and (tmp_path / "new" / "queue.db").is_file()
    assert main(["submit", str(small_job(tmp_path, "again")), "--home", str(tmp_path / "new")]) == 0
    assert "new queue" not in capsys.readouterr().err  # only the first time
    from sevenfold.queue import worker

    monkeypatch.setattr(worker.Worker, "run", lambda self, handle_signals=True: 0)
    assert main(["worker", "--drain", "--home", str(tmp_path / "other")]) == 0
    assert "new queue in" in capsys.readouterr().err and (tmp_path / "other").is_dir()


def test_a_refused_submit_creates_no_queue(tmp_path: Path, capsys) -> None:
    where = tmp_path / "new"
    bad = tmp_path / "bad.toml"
    bad.write_text(small_job(tmp_path, "bad").read_text().replace("cells = [6, 6, 6]", "cells = [6, 6]"))
    np.save(tmp_path / "k.npy", np.full((6, 6, 6), 3.0))
    good = small_job(tmp_path, "good")  # names an input file, which a snapshot would copy
    good.write_text(good.read_text().replace("value = 20.0", 'file = "k.npy"', 1))
    twin = small_job(tmp_path, "twin", output="results/good.zarr")
    for files in ([bad], [good, bad], [good, twin]):  # the last two write one result
        assert main(["submit", *map(str, files), "--home", str(where)]) == 2
        err = capsys.readouterr().err
        assert "nothing was submitted" in err and "Traceback" not in err
        assert "new queue" not in err and not where.exists()  # not even the folder


# ---------------------------------------------------------------- retry of an edited job file
def test_retry_says_the_file_changed_and_from_file_runs_the_edit(tmp_path: Path, home: Home, capsys) -> None:
    path = small_job(tmp_path, "edited", k=20.0)
    assert run(home, "submit", str(path), capsys=capsys)[0] == 0
    run(home, "cancel", "1", capsys=capsys)
    code, out, _ = run(home, "retry", "1", capsys=capsys)  # unchanged: no note
    assert code == 0 and "changed" not in out
    run(home, "cancel", "1", capsys=capsys)
    path.write_text(path.read_text().replace("value = 20.0", "value = 35.0"))
    code, out, _ = run(home, "show", "1", capsys=capsys)
    assert "changed since submit" in " ".join(out.split())
    code, out, _ = run(home, "retry", "1", capsys=capsys)
    line = " ".join(out.split())
    assert code == 0 and "queued again" in line and "changed since submit" in line and "--from-file 1" in line
    with Queue(home) as q:
        assert q.get(1).job_table["material"]["value"] == 20.0  # the snapshot, as documented
    run(home, "cancel", "1", capsys=capsys)
    code, out, _ = run(home, "retry", "1", "--from-file", capsys=capsys)
    assert code == 0 and "from the edited job file" in out
    with Queue(home) as q:
        job = q.get(1)
        assert job.job_table["material"]["value"] == 35.0 and job.job_text == path.read_text()
        assert job.state == "queued" and job.attempts == 0
        assert "from the job file as it is now" in q.events(1)[-1].detail
    # an edit that breaks the file is refused like submit refuses it, and nothing changes
    run(home, "cancel", "1", capsys=capsys)
    path.write_text(path.read_text().replace("value = 35.0", "value = -1.0"))
    code, _, err = run(home, "retry", "1", "--from-file", capsys=capsys)
    assert code == 2 and "must be positive" in " ".join(err.split()) and "Traceback" not in err
    with Queue(home) as q:
        assert q.get(1).state == "cancelled" and q.get(1).job_table["material"]["value"] == 35.0


def test_retry_from_file_keeps_a_sweep_jobs_combination(tmp_path: Path, home: Home, capsys) -> None:
    path = tmp_path / "sw.toml"
    path.write_text(SWEEP.format(k="[10.0, 20.0]", q="[1e3, 2e3]"))
    assert run(home, "submit", str(path), capsys=capsys)[0] == 0
    run(home, "cancel", "b1", capsys=capsys)
    path.write_text(path.read_text().replace("value = 300.0", "value = 310.0"))
    assert run(home, "retry", "2", "--from-file", capsys=capsys)[0] == 0
    with Queue(home) as q:
        t = q.get(2).job_table
        assert (t["material"]["value"], t["source"]["value"]) == (20.0, 2e3)  # its own combination
        assert t["boundary"]["x_min"]["value"] == 310.0  # with the edit
    # a combination the edited sweep no longer makes is refused
    run(home, "cancel", "2", capsys=capsys)
    path.write_text(path.read_text().replace('"material.value" = [10.0, 20.0]', '"material.value" = [10.0, 30.0]'))
    code, _, err = run(home, "retry", "2", "--from-file", capsys=capsys)
    assert code == 2 and "no longer makes" in " ".join(err.split())


def test_a_changed_input_file_is_noticed(tmp_path: Path, home: Home, capsys) -> None:
    np.save(tmp_path / "k.npy", np.full((6, 6, 6), 3.0))
    path = small_job(tmp_path, "arr")
    path.write_text(path.read_text().replace("value = 20.0", 'file = "k.npy"', 1))
    assert run(home, "submit", str(path), capsys=capsys)[0] == 0
    run(home, "cancel", "1", capsys=capsys)
    np.save(tmp_path / "k.npy", np.full((6, 6, 6), 4.0))
    code, out, _ = run(home, "retry", "1", capsys=capsys)
    assert code == 0 and "material.file" in out and "changed" in out


# ---------------------------------------------------------------- forget
def test_forget_removes_finished_jobs_and_keeps_results_unless_asked(tmp_path: Path, home: Home, capsys,
                                                                      monkeypatch) -> None:
    np.save(tmp_path / "k.npy", np.full((6, 6, 6), 3.0))
    kept = small_job(tmp_path, "kept")
    kept.write_text(kept.read_text().replace("value = 20.0", 'file = "k.npy"', 1))
    gone = small_job(tmp_path, "gone")
    waiting = small_job(tmp_path, "waiting")
    for p in (kept, gone):
        assert run(home, "submit", str(p), capsys=capsys)[0] == 0
        finish(home, listing(home, capsys)[-1]["id"])
    assert run(home, "submit", str(waiting), capsys=capsys)[0] == 0
    out_kept, out_gone = (Path(j["output"]) for j in listing(home, capsys)[:2])
    assert is_complete(out_kept) and is_complete(out_gone) and probes_csv_path(out_gone) is not None
    with Queue(home) as q:
        snapshot = Path(q.get(1).inputs[0]["snapshot"])

    # queued jobs are never touched, whatever is asked
    code, out, _ = run(home, "forget", "3", "--delete-results", capsys=capsys)
    assert code == 0 and "not forgotten" in out and [j["id"] for j in listing(home, capsys)] == [1, 2, 3]

    code, out, _ = run(home, "forget", "1", capsys=capsys)
    assert code == 0 and "forgotten; result kept" in out
    assert [j["id"] for j in listing(home, capsys)] == [2, 3]
    assert is_complete(out_kept) and log_path(out_kept).exists()  # the result stays
    assert not home.job_dir(1).exists()
    assert snapshot.exists()  # used within the grace period: a submit may be using it

    monkeypatch.setattr(files, "INPUT_GRACE", 0.0)
    code, out, _ = run(home, "forget", "--state", "done", "--delete-results", capsys=capsys)
    assert code == 0 and "result deleted" in out
    assert [j["id"] for j in listing(home, capsys)] == [3]
    assert not out_gone.exists() and not log_path(out_gone).exists() and read_runs(out_gone) == []
    assert not list(out_gone.parent.glob(f".{out_gone.name}*"))  # nothing hidden left behind
    with sqlite3.connect(home.db) as c:
        assert c.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        assert c.execute("SELECT COUNT(*) FROM events WHERE job IN (1, 2)").fetchone()[0] == 0
    # the snapshot of job 1 is no one's now and old enough: the next forget removes it
    np.save(tmp_path / "k.npy", np.full((6, 6, 6), 3.0))
    assert run(home, "submit", str(kept), capsys=capsys)[0] == 0  # job 4 shares its content
    run(home, "cancel", "4", capsys=capsys)
    assert snapshot.exists()
    assert run(home, "forget", "4", capsys=capsys)[0] == 0
    assert not snapshot.exists() and not snapshot.parent.exists()


def test_forget_deletes_only_a_result_the_job_itself_wrote(tmp_path: Path, home: Home, capsys) -> None:
    big = small_job(tmp_path, "big")
    assert run(home, "submit", str(big), capsys=capsys)[0] == 0
    assert run(home, "cancel", "1", capsys=capsys)[0] == 0  # before it ever ran
    output = Path(listing(home, capsys)[0]["output"])
    # the same output written by a run of its own, outside the queue
    assert main(["run", "--here", "--no-progress", str(big)]) == 0
    capsys.readouterr()
    assert is_complete(output)
    code, out, _ = run(home, "forget", "--state", "cancelled", "--delete-results", capsys=capsys)
    assert code == 0 and "forgotten; result kept (not written by this job: written outside the queue)" in out
    assert is_complete(output) and log_path(output).exists()  # the user's result, untouched
    # job 2 writes it and is forgotten, its result kept; job 3, the same output cancelled
    # before it ran, did not write it
    assert run(home, "submit", str(big), capsys=capsys)[0] == 0
    finish(home, 2)
    assert run(home, "forget", "2", capsys=capsys)[0] == 0
    assert run(home, "submit", str(big), capsys=capsys)[0] == 0
    assert run(home, "cancel", "3", capsys=capsys)[0] == 0
    code, out, _ = run(home, "forget", "3", "--delete-results", capsys=capsys)
    assert code == 0 and "result kept (not written by this job: written by job 2)" in out
    assert is_complete(output)
    # a job's result is its own until a separate run writes over it
    assert run(home, "submit", str(big), capsys=capsys)[0] == 0
    finish(home, 4)
    assert main(["run", "--here", "--no-progress", str(big)]) == 0
    capsys.readouterr()
    code, out, _ = run(home, "forget", "4", "--delete-results", capsys=capsys)
    assert code == 0 and "result kept (not written by this job: written outside the queue)" in out
    assert is_complete(output)
    # a job's own result goes with it
    assert run(home, "submit", str(big), capsys=capsys)[0] == 0
    finish(home, 5)
    code, out, _ = run(home, "forget", "5", "--delete-results", capsys=capsys)
    assert code == 0 and "forgotten; result deleted" in out
    assert not output.exists() and not log_path(output).exists() and read_runs(output) == []


def test_forget_of_a_batch_and_an_unusable_request(tmp_path: Path, home: Home, capsys) -> None:
    path = tmp_path / "sw.toml"
    path.write_text(SWEEP.format(k="[10.0, 20.0]", q="[1e3, 2e3]"))
    assert run(home, "submit", str(path), capsys=capsys)[0] == 0
    run(home, "cancel", "b1", capsys=capsys)
    assert run(home, "forget", capsys=capsys)[0] == 2  # neither ids nor a state
    assert run(home, "forget", "b1", capsys=capsys)[0] == 0
    assert listing(home, capsys) == []
    with sqlite3.connect(home.db) as c:
        assert c.execute("SELECT COUNT(*) FROM batches").fetchone()[0] == 0
    assert run(home, "forget", "b1", capsys=capsys)[0] == 2  # gone: an unknown batch now


def test_a_killed_forget_leaves_the_database_as_before(tmp_path: Path, home: Home, capsys, monkeypatch) -> None:
    """The deletion is one transaction: an error inside it changes nothing."""
    assert run(home, "submit", str(small_job(tmp_path, "a")), capsys=capsys)[0] == 0
    run(home, "cancel", "1", capsys=capsys)
    real = Queue.write

    def dies(self, fn):
        def half(c):
            fn(c)
            raise KeyboardInterrupt  # stands for the process being killed before COMMIT
        return real(self, half)

    monkeypatch.setattr(Queue, "write", dies)
    with pytest.raises(KeyboardInterrupt):
        with Queue(home) as q:
            q.forget([1])
    monkeypatch.undo()
    assert [j["id"] for j in listing(home, capsys)] == [1]


# ---------------------------------------------------------------- list: terminal, CSV, pipes
def _subprocess(home: Home, *args: str, columns: int = 60) -> subprocess.Popen:
    env = {**os.environ, "COLUMNS": str(columns)}
    env.pop("SEVENFOLD_HOME", None)
    return subprocess.Popen([sys.executable, "-m", "sevenfold.cli", *args, "--home", str(home.root)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=env)


def test_list_fits_the_terminal_and_show_has_the_full_text(tmp_path: Path, home: Home) -> None:
    long_name = "a-rather-long-job-name-" + "x" * 60
    long_error = "input: " + " ".join(f"word{i}" for i in range(60))
    assert main(["submit", str(small_job(tmp_path, long_name)), "--home", str(home.root)]) == 0
    with Queue(home) as q:
        c = q.claim("test").claim
        q.fail(c.id, c.run_id, long_error)
    proc = _subprocess(home, "list", columns=60)
    out, err = proc.communicate(timeout=120)
    text = out.decode()
    assert proc.returncode == 0, err
    rows = text.splitlines()
    assert all(len(r) <= 60 for r in rows), [len(r) for r in rows]
    assert "\u2026" in text and "show ID" in text
    assert long_name not in text and "word59" not in text
    proc = _subprocess(home, "list", columns=40)  # narrow: less needed columns go, id and state stay
    out, _ = proc.communicate(timeout=120)
    rows = out.decode().splitlines()
    assert all(len(r) <= 40 for r in rows) and rows[0].split()[:3] == ["id", "name", "state"]
    assert rows[1].split()[0] == "1" and "failed" in rows[1] and "submitted" not in rows[0]
    proc = _subprocess(home, "show", "1", columns=60)
    out, _ = proc.communicate(timeout=120)
    flat = "".join(out.decode().split())
    assert long_name in flat and "".join(long_error.split()) in flat


def test_list_csv_is_the_json_as_rows(tmp_path: Path, home: Home, capsys) -> None:
    path = tmp_path / "sw.toml"
    path.write_text(SWEEP.format(k="[10.0, 20.0]", q="[1e3, 2e3]"))
    assert run(home, "submit", str(path), capsys=capsys)[0] == 0
    as_json = listing(home, capsys)
    assert tuple(as_json[0]) == PUBLIC_FIELDS
    with Queue(home) as q:
        assert tuple(public(q.get(1))) == PUBLIC_FIELDS
    code, out, _ = run(home, "list", "--csv", capsys=capsys)
    rows = list(csv.DictReader(io.StringIO(out)))
    assert code == 0 and len(rows) == len(as_json) == 2
    for r, j in zip(rows, as_json):
        assert tuple(r) == PUBLIC_FIELDS
        assert int(r["id"]) == j["id"] and r["name"] == j["name"] and r["output"] == j["output"]
        assert json.loads(r["variant"]) == j["variant"] and r["error"] == ""


def _many_jobs(home: Home, n: int) -> None:
    """``n`` queued jobs entered directly (no validation): output long enough to fill a pipe."""
    with Queue(home) as q:
        q.add([(NewJob(f"job-{i}", f"/tmp/out-{i}.zarr", "/tmp/x.toml", "", {}, [], 8, "direct", 1), None, 0)
               for i in range(n)])


@pytest.mark.parametrize("args", [["list", "--json"], ["list", "--csv"], ["list"]])
def test_a_reader_that_stops_early_ends_the_command_quietly(tmp_path: Path, home: Home, args: list[str]) -> None:
    _many_jobs(home, 3000)  # ~2 MB of JSON: the writer meets the closed pipe mid-way
    proc = _subprocess(home, *args, columns=200)
    first = proc.stdout.readline()
    proc.stdout.close()  # what `| head -1` does once it has its line
    _, err = proc.communicate(timeout=120)
    assert first and proc.returncode == 0, err.decode()
    assert err.decode() == ""  # no traceback, no "Exception ignored"


# ---------------------------------------------------------------- table
def test_table_puts_swept_values_against_result_numbers(tmp_path: Path, home: Home, capsys) -> None:
    path = tmp_path / "sw.toml"
    path.write_text(SWEEP.format(k="[10.0, 20.0, 20.0]", q="[1e3, 2e3, 4e3]"))
    assert run(home, "submit", str(path), capsys=capsys)[0] == 0
    for job_id in (1, 2):
        assert finish(home, job_id)["status"] == "done"
    # a result that carries more numbers (e.g. headline numbers) gives them as columns
    out2 = Path(listing(home, capsys)[1]["output"])
    zarr.open_group(str(out2), mode="r+").attrs["headline"] = {
        "maximum": {"value": 1.5, "at": [0.1, 0.2, 0.3], "note": "text is skipped"},
        "regions": [{"name": "die", "mean": 2.5, "cells": 8}], "flag": True}
    code, out, _ = run(home, "table", "b1", "--csv", capsys=capsys)
    rows = list(csv.DictReader(io.StringIO(out)))
    assert code == 0 and [r["id"] for r in rows] == ["1", "2", "3"]
    assert list(rows[0])[:5] == ["id", "name", "state", "material.value", "source.value"]
    assert [r["state"] for r in rows] == ["done", "done", "queued"]
    assert [(float(r["material.value"]), float(r["source.value"])) for r in rows] == [(10.0, 1e3), (20.0, 2e3), (20.0, 4e3)]
    for r in rows[:2]:  # each number is what the result holds, read independently here
        g = zarr.open_group(str(Path(listing(home, capsys)[int(r["id"]) - 1]["output"])), mode="r")
        u = g["temperature"][:]
        assert float(r["temperature.max"]) == float(u.max()) and float(r["temperature.min"]) == float(u.min())
        assert float(r["probe.c"]) == float(g["probe_c"][0])
        assert float(r["probe.across.max"]) == float(g["probe_across"][:].max())
        bal = g.attrs["balance"]
        assert float(r["out.x_min"]) == bal["faces"]["x_min"] and float(r["into.sink"]) == bal["holds"][0]["inflow"]
        assert int(float(r["iterations"])) == g.attrs["solver"]["iterations"]
    # -k lap T = q with fixed boundary values and uniform k: T depends on q/k only (linearity,
    # common practice), so (10, 1e3) and (20, 2e3) give one temperature field
    assert float(rows[0]["temperature.max"]) == pytest.approx(float(rows[1]["temperature.max"]), rel=1e-12)
    assert float(rows[0]["probe.c"]) == pytest.approx(float(rows[1]["probe.c"]), rel=1e-12)
    assert rows[1]["headline.maximum.value"] == "1.5" and rows[1]["headline.regions.die.mean"] == "2.5"
    assert rows[0]["headline.maximum.value"] == "" and "headline.flag" not in rows[1]
    assert "headline.maximum.note" not in rows[1] and "headline.maximum.at.0" in rows[1]
    assert rows[2]["temperature.max"] == ""  # not run yet: no numbers
    code, out, _ = run(home, "table", "b1", capsys=capsys)
    assert code == 0 and "material.value" in out and "2 of 3 jobs done" in " ".join(out.split())
    code, out, _ = run(home, "table", "b1", "--json", capsys=capsys)
    assert code == 0 and json.loads(out)[1]["headline.regions.die.mean"] == 2.5
    # a result deleted behind the queue's back gives an empty row, not an error
    import shutil

    shutil.rmtree(out2)
    code, out, _ = run(home, "table", "b1", "--csv", capsys=capsys)
    assert code == 0 and list(csv.DictReader(io.StringIO(out)))[1]["temperature.max"] == ""


def test_the_warm_up_lock_is_taken_in_the_cache_and_skipped_where_there_is_none(
        tmp_path: Path, monkeypatch, capsys) -> None:
    """The worker's warm-up serialises its compile with a lock file in numba's cache folder
    (shared by every home and by `sevenfold run`); where that folder cannot be had, the
    warm-up goes on without the lock rather than stop the worker."""
    import fcntl

    from sevenfold.kernels import cache
    from sevenfold.queue import child

    monkeypatch.setattr(cache, "cache_dir", lambda: tmp_path / "numba")
    with child._warm_up_lock():
        lock = tmp_path / "numba" / "sevenfold-warm-up.lock"
        assert lock.exists()
        with open(lock) as other, pytest.raises(BlockingIOError):  # held: another process waits
            fcntl.flock(other, fcntl.LOCK_EX | fcntl.LOCK_NB)

    def no_cache():
        raise RuntimeError("cannot cache function: no locator available")

    monkeypatch.setattr(cache, "cache_dir", no_cache)
    ran = []
    with child._warm_up_lock():
        ran.append(True)
    assert ran == [True]
    assert "warm-up without a lock: cannot cache function" in capsys.readouterr().err


def test_a_slots_process_runs_numba_and_numexpr_on_its_share_and_blas_on_one(no_malloc_settings) -> None:
    """The environment a slot's child starts with (queue.worker.slot_environment), asked of a
    fresh interpreter: numexpr followed OMP_NUM_THREADS = 1 before it was given its own."""
    import json
    import subprocess
    import sys

    from sevenfold.queue.worker import slot_environment

    probe = ("import json, numba, numexpr; print(json.dumps([numba.config.NUMBA_NUM_THREADS, "
             "numexpr.get_num_threads()]))")
    proc = subprocess.run([sys.executable, "-c", probe], env=slot_environment(2),
                          capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr
    assert json.loads(proc.stdout.strip().splitlines()[-1]) == [2, 2]
    env = slot_environment(1)
    assert env["OPENBLAS_NUM_THREADS"] == env["MKL_NUM_THREADS"] == "1"
    assert env["MALLOC_MMAP_MAX_"] == "0"  # freed memory kept for the next job (memory.KEEP_FREED_MEMORY)


@pytest.fixture
def no_malloc_settings(monkeypatch) -> None:
    """This process's environment without malloc variables (dask's nanny, started in-process
    by the cluster tests, sets MALLOC_TRIM_THRESHOLD_ in os.environ)."""
    for name in KEEP_FREED_MEMORY:
        monkeypatch.delenv(name, raising=False)


def test_a_user_s_malloc_settings_win_over_the_slot_s(monkeypatch, no_malloc_settings) -> None:
    from sevenfold.queue.worker import slot_environment

    monkeypatch.setenv("MALLOC_MMAP_MAX_", "65536")
    env = slot_environment(1)
    assert env["MALLOC_MMAP_MAX_"] == "65536" and env["MALLOC_TRIM_THRESHOLD_"] == str(1 << 40)


_HELD = """
import json, numpy as np
from pathlib import Path
from sevenfold.memory import held_free_bytes, release_freed_memory
def rss():
    line = [l for l in Path("/proc/self/status").read_text().splitlines() if l.startswith("VmRSS:")][0]
    return int(line.split()[1]) * 1024
before = rss()
a = np.ones(256 << 17)  # 256 MiB, touched
del a
freed, held = rss(), held_free_bytes()
release_freed_memory()
print(json.dumps([before, freed, held, rss()]))
"""


@pytest.mark.skipif(not Path("/proc/self/status").exists(), reason="reads VmRSS from Linux's /proc")
def test_a_slot_keeps_the_memory_its_job_freed_until_it_gives_it_back(no_malloc_settings) -> None:
    """In a slot's environment a freed 256 MiB array stays resident and held by malloc
    (glibc's mallinfo2) until release_freed_memory (malloc_trim); with glibc's own defaults it
    is unmapped at once: the setting is what keeps it."""
    from sevenfold.queue.worker import slot_environment

    mib = 1 << 20

    def probe(env: dict[str, str]) -> list[int]:
        proc = subprocess.run([sys.executable, "-c", _HELD], env=env, capture_output=True, text=True,
                              timeout=120)
        assert proc.returncode == 0, proc.stderr
        return json.loads(proc.stdout.strip().splitlines()[-1])

    before, freed, held, released = probe(slot_environment(1))
    assert freed - before > 200 * mib and held > 250 * mib
    assert freed - released > 200 * mib
    before, freed, held, released = probe({**slot_environment(1), "MALLOC_MMAP_MAX_": "65536",
                                           "MALLOC_TRIM_THRESHOLD_": str(128 * 1024)})
    assert freed - before < 50 * mib and held < 50 * mib


_BEFORE_JOBS = """
import json, numpy as np
from pathlib import Path
from sevenfold.queue.child import hold_at_most
def rss():
    line = [l for l in Path("/proc/self/status").read_text().splitlines() if l.startswith("VmRSS:")][0]
    return int(line.split()[1]) * 1024
a = np.ones(256 << 17)  # 256 MiB, touched, then freed: held
del a
held = rss()
hold_at_most(1 << 30)  # a job admitted for 1 GiB: keep it
larger = rss()
hold_at_most(64 << 20)  # a job admitted for 64 MiB: give it back
print(json.dumps([held, larger, rss()]))
"""


@pytest.mark.skipif(not Path("/proc/self/status").exists(), reason="reads VmRSS from Linux's /proc")
def test_a_slot_gives_back_what_a_smaller_job_is_not_admitted_for(no_malloc_settings) -> None:
    """child.hold_at_most, called before each job: the freed 256 MiB stay for a job admitted
    for 1 GiB and go before one admitted for 64 MiB."""
    from sevenfold.queue.worker import slot_environment

    proc = subprocess.run([sys.executable, "-c", _BEFORE_JOBS], env=slot_environment(1),
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    held, larger, smaller = json.loads(proc.stdout.strip().splitlines()[-1])
    mib = 1 << 20
    assert abs(larger - held) < 20 * mib
    assert held - smaller > 200 * mib


def test_a_slot_reads_requests_and_says_when_it_has_waited_long_enough() -> None:
    """child.requests: one JSON request a line, blank lines skipped, lines split across
    writes joined; on_idle once per wait longer than ``idle`` (not again while still
    waiting), none while requests keep coming; the end of the channel ends the requests."""
    import threading
    import time

    read, write = os.pipe()
    idle: list[float] = []
    got: list[dict] = []

    def reader() -> None:
        for request in child.requests(read, 0.2, lambda: idle.append(time.monotonic())):
            got.append(request)

    thread = threading.Thread(target=reader, daemon=True)
    thread.start()
    try:
        os.write(write, b'{"job": 1}\n\n{"jo')
        time.sleep(0.05)
        os.write(write, b'b": 2}\n')
        time.sleep(0.7)  # one wait past 0.2 s: on_idle once
        assert [r["job"] for r in got] == [1, 2] and len(idle) == 1
        os.write(write, b'{"job": 3}\n')
        time.sleep(0.05)
        assert len(got) == 3 and len(idle) == 1
    finally:
        os.close(write)
    thread.join(5.0)
    assert not thread.is_alive() and len(idle) <= 2
    os.close(read)


# ---------------------------------------------------------------- a worker stopped by a signal
@pytest.mark.parametrize("signum", [signal.SIGINT, signal.SIGTERM])
def test_a_worker_says_which_signal_stopped_it_and_what_becomes_of_its_jobs(
        home: Home, monkeypatch, signum: signal.Signals) -> None:
    """SIGTERM as Ctrl-C's SIGINT: one line naming the signal and the running jobs, which go
    back to the queue. The slots are stand-ins (no child process): slot 1 runs a job until
    the worker stops, slot 2 is idle."""
    from sevenfold.queue import worker

    class Slot(threading.Thread):
        def __init__(self, w: worker.Worker, index: int, threads: int) -> None:
            super().__init__(daemon=True)
            self.worker, self.busy, self.failure = w, False, None
            self.current = SimpleNamespace(id=7, name="big", run_id="r7") if index == 1 else None

        def run(self) -> None:
            self.worker.stopping.wait(WAIT)

    monkeypatch.setattr(worker, "Slot", Slot)
    said: list[str] = []
    w = worker.Worker(home, worker.WorkerOptions(slots=2), say=said.append)
    before = signal.getsignal(signum)

    def send() -> None:
        wait_for(lambda: said, "the worker to start")
        os.kill(os.getpid(), signum)

    threading.Thread(target=send, daemon=True).start()
    assert w.run(handle_signals=True) == 0
    stops = [line for line in said if "asked to stop" in line]
    assert len(stops) == 1, said
    assert f"asked to stop ({signum.name}); the running jobs (7 big) stop at their next iteration " \
           "and go back to the queue" in stops[0]
    assert signal.getsignal(signum) is before  # the handler is the worker's only while it runs
    assert worker.stop_notice(signum, []).endswith(f"asked to stop ({signum.name}); no job was running")


def test_a_stop_notice_that_cannot_be_printed_does_not_stop_the_stop() -> None:
    """A signal landing while the main thread itself prints makes the notice's write
    reentrant (Python raises RuntimeError): the notice is lost, the stop goes on."""
    from sevenfold.queue.worker import say_in_handler

    said: list[str] = []

    def reentrant(text: str) -> None:
        raise RuntimeError("reentrant call inside <_io.BufferedWriter name='<stdout>'>")

    say_in_handler(reentrant, "asked to stop (SIGINT); no job was running")  # no exception
    say_in_handler(said.append, "asked to stop (SIGTERM); no job was running")
    assert said == ["asked to stop (SIGTERM); no job was running"]
