"""The queue without worker processes: snapshots, sweeps, refusals, state changes, recovery.

The end-to-end runs with worker processes are in test_queue_workers.py.
"""

from __future__ import annotations

import datetime
import errno
import json
import math
import os
import sqlite3
import subprocess
import threading
import tomllib
from pathlib import Path

import numpy as np
import pytest
import zarr
from hypothesis import given, settings
from hypothesis import strategies as st

from sevenfold import store
from sevenfold.cli import main
from sevenfold.errors import JobError, QueueError
from sevenfold.queue import child
from sevenfold.queue.db import Queue
from sevenfold.queue.files import read_runs, remove_partials, write_text_atomic
from sevenfold.queue.home import Home, Timing, locate
from sevenfold.queue.submit import submit
from sevenfold.queue.sweep import expand, set_dotted
from sevenfold.queue.tomlwrite import dumps
from sevenfold.queue.watch import plot, rate, remaining
from sevenfold.residual_log import log_path, read_log
from sevenfold.runner import run_job
from sevenfold.store import is_complete

from conftest import BAD_JOBS, bad_job_corpus
from queue_support import small_job

CORPUS = BAD_JOBS


@pytest.fixture
def home(tmp_path: Path) -> Home:
    return locate(tmp_path / "home")


def listing(home: Home, *args: str, capsys) -> list[dict]:
    assert main(["list", "--json", "--home", str(home.root), *args]) == 0
    return json.loads(capsys.readouterr().out)


# ---------------------------------------------------------------- the home
def test_home_from_option_then_environment(tmp_path: Path, monkeypatch) -> None:
    monkeypatch.setenv("SEVENFOLD_HOME", str(tmp_path / "from-env"))
    assert locate(tmp_path / "given").root == (tmp_path / "given").resolve()
    assert locate().root == (tmp_path / "from-env").resolve()
    monkeypatch.delenv("SEVENFOLD_HOME")
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "xdg"))  # platformdirs on Linux
    assert locate().root == (tmp_path / "xdg" / "sevenfold").resolve()


def test_timing_settings_are_checked(monkeypatch) -> None:
    monkeypatch.setenv("SEVENFOLD_STALE_SECONDS", "abc")
    with pytest.raises(QueueError, match="not a number"):
        Timing.from_env()
    monkeypatch.setenv("SEVENFOLD_STALE_SECONDS", "1")
    monkeypatch.setenv("SEVENFOLD_HEARTBEAT_SECONDS", "2")
    with pytest.raises(QueueError, match="at least twice"):
        Timing.from_env()


def test_database_is_wal_and_consistent(home: Home) -> None:
    Queue(home).close()
    with sqlite3.connect(home.db) as c:
        assert c.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
        assert c.execute("PRAGMA integrity_check").fetchone()[0] == "ok"


# ---------------------------------------------------------------- TOML writer
_keys = st.text(st.characters(blacklist_categories=("Cs",)), min_size=1, max_size=8)
_scalars = (st.integers(-2**63, 2**63 - 1) | st.floats(allow_nan=False) | st.booleans()
            | st.text(st.characters(blacklist_categories=("Cs",)), max_size=12))
_values = st.recursive(
    _scalars,
    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(_keys, inner, max_size=3),
    max_leaves=12,
)


@settings(max_examples=300, deadline=None)
@given(st.dictionaries(_keys, _values, max_size=5))
def test_toml_writer_round_trips(table: dict) -> None:
    assert tomllib.loads(dumps(table)) == table


def test_toml_writer_round_trips_the_examples() -> None:
    for path in sorted((Path(__file__).parents[1] / "jobs").glob("*.toml")):
        table = tomllib.loads(path.read_text())
        assert tomllib.loads(dumps(table)) == table, path.name


# ---------------------------------------------------------------- sweeps
SWEEP = """
name = "plate"
physics = "heat"
[grid]
cells = [6, 6, 6]
size = [0.1, 0.1, 0.1]
[material]
value = 20.0
[[material.region]]
box = {{ min = [0.0, 0.0, 0.0], max = [0.05, 0.1, 0.1] }}
value = 1.0
[boundary]
x_min = {{ type = "dirichlet", value = 300.0 }}
[solver]
method = "direct"
[sweep]
{sweep}
"""


def sweep_file(folder: Path, sweep: str, name: str = "plate.toml") -> Path:
    path = folder / name
    path.write_text(SWEEP.format(sweep=sweep))
    return path


def test_sweep_product_makes_every_combination() -> None:
    table = tomllib.loads(SWEEP.format(sweep='"material.region.0.value" = [5.0, 10.0, 20.0]\n'
                                             '"grid.cells.0" = [6, 8]'))
    variants, info = expand(table)
    assert info.mode == "product" and info.size == 6
    combos = {(v.table["material"]["region"][0]["value"], v.table["grid"]["cells"][0]) for v in variants}
    assert combos == {(a, b) for a in (5.0, 10.0, 20.0) for b in (6, 8)}
    names = [v.table["name"] for v in variants]
    assert len(set(names)) == 6
    assert names[0] == "plate-0-value=5_cells=6" and names[5] == "plate-5-value=20_cells=8"
    assert all("sweep" not in v.table for v in variants)
    # the base table is not touched
    assert table["material"]["region"][0]["value"] == 1.0


def test_sweep_zip_pairs_values_and_names_say_them() -> None:
    table = tomllib.loads(SWEEP.format(sweep='mode = "zip"\n"material.value" = [10.0, 40.0]\n'
                                             '"boundary.x_min.value" = [280.0, 320.0]'))
    variants, info = expand(table)
    assert info.mode == "zip" and info.size == 2
    assert [(v.table["material"]["value"], v.table["boundary"]["x_min"]["value"]) for v in variants] == [
        (10.0, 280.0), (40.0, 320.0)]
    assert variants[1].table["name"] == "plate-1-material.value=40_boundary.x_min.value=320"


def test_sweep_accepts_unquoted_dotted_keys() -> None:
    table = tomllib.loads(SWEEP.format(sweep="material.value = [1.0, 2.0]"))
    variants, _ = expand(table)
    assert [v.table["material"]["value"] for v in variants] == [1.0, 2.0]


@pytest.mark.parametrize("sweep, message", [
    ('mode = "zip"\n"material.value" = [1.0, 2.0]\n"solver.rtol" = [1e-6]', "equal length"),
    ('"material.region.3.value" = [1.0]', "has 1 entries, so there is no entry 3"),
    ('"material.value" = 5.0', "must be a non-empty list"),
    ('"material.value" = []', "must be a non-empty list"),
    ('mode = "all"\n"material.value" = [1.0]', "mode must be 'product' or 'zip'"),
    ('"material.value.x" = [1.0]', "is a single value"),
    ('"hold.0.value" = [1.0]', "the job has no hold to index"),
])
def test_bad_sweeps_are_refused(sweep: str, message: str) -> None:
    with pytest.raises(JobError, match="sweep") as err:
        expand(tomllib.loads(SWEEP.format(sweep=sweep)), "plate.toml")
    assert message in str(err.value)


def test_set_dotted_creates_missing_tables() -> None:
    t = {"name": "a"}
    set_dotted(t, "solver.rtol", 1e-6)
    assert t == {"name": "a", "solver": {"rtol": 1e-6}}


def test_sweep_submit_shares_a_batch_and_batch_cancel_and_retry(tmp_path: Path, home: Home, capsys) -> None:
    path = sweep_file(tmp_path, '"material.region.0.value" = [5.0, 10.0, 20.0]\n"material.value" = [20.0, 40.0]')
    assert main(["submit", str(path), "--home", str(home.root), "--json"]) == 0
    submitted = json.loads(capsys.readouterr().out)
    assert len(submitted) == 6 and len({s["batch"] for s in submitted}) == 1
    batch = submitted[0]["batch"]
    assert batch.startswith("b")
    other = small_job(tmp_path, "alone")
    assert main(["submit", str(other), "--home", str(home.root)]) == 0
    capsys.readouterr()
    jobs = listing(home, "--batch", batch, capsys=capsys)
    assert sorted(j["id"] for j in jobs) == sorted(s["id"] for s in submitted)
    assert {tuple(sorted(j["variant"].items())) for j in jobs} == {
        (("material.region.0.value", a), ("material.value", b)) for a in (5.0, 10.0, 20.0) for b in (20.0, 40.0)}
    assert len({j["output"] for j in jobs}) == 6
    with Queue(home) as q:  # each variant runs its own values
        for s in submitted:
            t = q.get(s["id"]).job_table
            assert t["material"]["region"][0]["value"] == q.get(s["id"]).variant["material.region.0.value"]

    assert main(["cancel", batch, "--home", str(home.root)]) == 0
    capsys.readouterr()
    states = {j["id"]: j["state"] for j in listing(home, capsys=capsys)}
    assert all(states[s["id"]] == "cancelled" for s in submitted)
    assert [st for i, st in states.items() if i not in {s["id"] for s in submitted}] == ["queued"]

    assert main(["retry", batch, "--home", str(home.root)]) == 0
    capsys.readouterr()
    assert all(j["state"] == "queued" and j["attempts"] == 0 for j in listing(home, "--batch", batch, capsys=capsys))


def test_sweep_that_would_overwrite_one_result_is_refused(tmp_path: Path, home: Home, capsys) -> None:
    text = SWEEP.format(sweep='"material.value" = [1.0, 2.0]\n"name" = ["same", "same"]')
    path = tmp_path / "clash.toml"
    path.write_text(text)
    assert main(["submit", str(path), "--home", str(home.root)]) == 2
    assert "would both write" in capsys.readouterr().err
    assert not home.db.exists()  # nothing queued: no queue was even started


def test_a_bad_combination_is_refused_with_its_values(tmp_path: Path, home: Home, capsys) -> None:
    path = sweep_file(tmp_path, '"material.region.0.value" = [5.0, -1.0]')
    assert main(["submit", str(path), "--home", str(home.root)]) == 2
    err = " ".join(capsys.readouterr().err.split())
    assert "must be positive" in err and "sweep combination 1: material.region.0.value=-1" in err
    assert not home.db.exists()  # nothing queued: no queue was even started


# ---------------------------------------------------------------- refusals at submit
@pytest.fixture
def corpus(tmp_path: Path) -> Path:
    return bad_job_corpus(tmp_path / "corpus")


def test_every_bad_job_is_refused_at_submit_and_the_queue_is_unchanged(corpus: Path, home: Home, capsys) -> None:
    good = small_job(corpus, "good")
    assert main(["submit", str(good), "--home", str(home.root)]) == 0
    capsys.readouterr()
    before = listing(home, capsys=capsys)
    for case in sorted(CORPUS.glob("*.toml")):
        if case.name == "sweep-needs-submit.toml":
            continue  # a sweep is exactly what submit accepts
        expected = case.read_bytes().split(b"\n", 1)[0].decode()[len("# expect: "):]
        assert main(["submit", str(corpus / case.name), str(good), "--home", str(home.root)]) == 2, case.name
        err = capsys.readouterr().err
        assert "Traceback" not in err
        one_line = " ".join(err.split())
        assert expected in one_line, (case.name, one_line)
        assert "nothing was submitted" in one_line
        assert listing(home, capsys=capsys) == before, case.name


# ---------------------------------------------------------------- snapshots
def test_snapshot_takes_edge_files_and_directional_files(tmp_path: Path, home: Home) -> None:
    """Graded-axis edges and one array per direction are copied into the home as well."""
    np.save(tmp_path / "z.npy", np.array([0.0, 0.01, 0.025, 0.05]))
    for c, v in zip("xyz", (5.0, 5.0, 0.5)):
        np.save(tmp_path / f"k{c}.npy", np.full((4, 4, 3), v))
    path = tmp_path / "graded.toml"
    path.write_text(
        'name = "graded"\n[grid]\ncells = [4, 4, "edges"]\nsize = [0.1, 0.1, "edges"]\n'
        '[grid.edges]\nz = "z.npy"\n[material]\nfile = ["kx.npy", "ky.npy", "kz.npy"]\n'
        '[boundary]\nz_min = { type = "dirichlet", value = 1.0 }\n[solver]\nmethod = "direct"\n')
    with Queue(home) as q:
        (j,) = submit(q, [path])
        stored = q.get(j.id)
    keys = sorted(i["key"] for i in stored.inputs)
    assert keys == ["grid.edges.z", "material.file.0", "material.file.1", "material.file.2"]
    snap = Path(stored.job_table["grid"]["edges"]["z"])
    assert snap.is_relative_to(home.inputs)
    np.testing.assert_array_equal(np.load(snap), [0.0, 0.01, 0.025, 0.05])
    assert all(Path(f).is_relative_to(home.inputs) for f in stored.job_table["material"]["file"])


def test_snapshot_keeps_the_job_as_submitted(tmp_path: Path, home: Home) -> None:
    k = np.full((6, 6, 6), 20.0)
    k[:3] = 2.0
    np.save(tmp_path / "k.npy", k)
    path = tmp_path / "with-file.toml"
    path.write_text(
        'name = "with-file"\nphysics = "heat"\n[grid]\ncells = [6, 6, 6]\nsize = [0.1, 0.1, 0.1]\n'
        '[material]\nfile = "k.npy"\n[source]\nvalue = 1.0e3\n'
        '[boundary]\nx_min = { type = "dirichlet", value = 300.0 }\n[solver]\nmethod = "direct"\n'
        '[output]\npath = "out/{name}.zarr"\n')
    text = path.read_text()
    with Queue(home) as q:
        (j,) = submit(q, [path])
        # edit the job file and its array after submitting
        path.write_text(text.replace('value = 300.0', 'value = 500.0'))
        np.save(tmp_path / "k.npy", np.full((6, 6, 6), 1.0))
        stored = q.get(j.id)
    assert stored.job_text == text
    assert stored.output == str((tmp_path / "out" / "with-file.zarr").resolve())
    snap = Path(stored.job_table["material"]["file"])
    assert snap.is_relative_to(home.inputs)
    np.testing.assert_array_equal(np.load(snap), k)
    assert stored.inputs[0]["original"] == str((tmp_path / "k.npy").resolve())

    # run it the way a worker's child does, in this process
    write_text_atomic(home.job_file(j.id), dumps(stored.job_table))
    reply = child.execute({"job": j.id, "run": "r1", "attempt": 1, "output": stored.output, "worker": "test"},
                          home, child.ChildState(os.getppid()))
    assert reply["status"] == "done", reply
    g = zarr.open_group(stored.output, mode="r")
    assert g.attrs["job"]["boundary"]["x_min"]["value"] == 300.0
    assert g.attrs["queue"]["job"] == j.id and g.attrs["queue"]["run"] == "r1"
    # the same job run directly from an untouched copy gives the same field
    ref = tmp_path / "ref"
    ref.mkdir()
    np.save(ref / "k.npy", k)
    (ref / "with-file.toml").write_text(text)
    expected = run_job(ref / "with-file.toml").output
    np.testing.assert_array_equal(g["temperature"][:], zarr.open_group(str(expected), mode="r")["temperature"][:])
    runs = read_runs(Path(stored.output))
    assert [r["event"] for r in runs] == ["start", "done"] and runs[1]["run"] == "r1"


def test_failing_disk_write_fails_the_run_and_leaves_nothing_finished(tmp_path: Path, home: Home,
                                                                      monkeypatch) -> None:
    path = small_job(tmp_path, "disk")
    with Queue(home) as q:
        (j,) = submit(q, [path])
        stored = q.get(j.id)
    write_text_atomic(home.job_file(j.id), dumps(stored.job_table))

    original = store._write_json

    def full(path: Path, document) -> None:  # the group's metadata: the last write before the rename
        if path.parent.name.startswith(f".{Path(stored.output).name}.partial-"):
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        original(path, document)

    monkeypatch.setattr(store, "_write_json", full)
    reply = child.execute({"job": j.id, "run": "r1", "attempt": 1, "output": stored.output, "worker": "t"},
                          home, child.ChildState(os.getppid()))
    assert reply["status"] == "failed" and reply["kind"] == "os"
    assert "No space left on device" in reply["error"]
    out = Path(stored.output)
    assert not out.exists() and not is_complete(out)
    assert not list(out.parent.glob(f".{out.name}*"))  # no half-written sibling either
    assert [r["event"] for r in read_runs(out)] == ["start"]  # a run began; none finished


# ---------------------------------------------------------------- state changes
def test_claims_are_exclusive_under_concurrent_workers(tmp_path: Path, home: Home) -> None:
    files = [small_job(tmp_path, f"j{i}") for i in range(12)]
    with Queue(home) as q:
        submit(q, files)
    claimed: list[int] = []
    lock = threading.Lock()

    def claimer(name: str) -> None:
        with Queue(home) as q:
            while True:
                c = q.claim(name).claim
                if c is None:
                    return
                with lock:
                    claimed.append(c.id)

    threads = [threading.Thread(target=claimer, args=(f"w{i}",)) for i in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert sorted(claimed) == list(range(1, 13))  # each job once, none lost


def test_stale_runs_are_requeued_then_failed_after_max_attempts(tmp_path: Path, home: Home) -> None:
    timing = Timing(heartbeat=1.0, stale=5.0, grace=1.0)
    with Queue(home, timing) as q:
        (j,) = submit(q, [small_job(tmp_path, "victim")], max_attempts=2)
        out = Path(j.output)
        out.parent.mkdir(parents=True)
        p = subprocess.Popen(["true"])
        p.wait()
        (out.parent / f".{out.name}.partial-{p.pid}-abcdef12").mkdir()  # a half-written result
        (out.parent / f".{out.name}.partial-{os.getpid()}-abcdef12").mkdir()  # one still being written
        for attempt in (1, 2):
            c = q.claim("w-dead").claim
            assert c is not None and c.id == j.id and c.attempt == attempt
            assert q.claim("w-other").claim is None  # running, heartbeat fresh: nobody else gets it
            q.write(lambda con: con.execute("UPDATE jobs SET heartbeat = heartbeat - 60 WHERE id = ?", (j.id,)))
            recovered = q.recover_stale()
            assert [r.id for r in recovered] == [j.id]
            for r in recovered:
                remove_partials(Path(r.output))
            after = q.get(j.id)
            if attempt == 1:
                assert after.state == "queued" and after.attempts == 1 and after.worker is None
            else:
                assert after.state == "failed" and "the last of 2 allowed" in after.error
        assert [e.event for e in q.events(j.id)] == ["submitted", "started", "requeued", "started", "failed"]
        assert q.finish(j.id, c.run_id, {"iterations": 1}) is False  # the dead run's late report changes nothing
        assert q.get(j.id).state == "failed"
    left = sorted(p.name for p in out.parent.iterdir())
    assert left == [f".{out.name}.partial-{os.getpid()}-abcdef12"]


def test_cancel_and_retry_rules(tmp_path: Path, home: Home) -> None:
    with Queue(home) as q:
        a, b, c = submit(q, [small_job(tmp_path, n) for n in ("a", "b", "c")])
        claim = q.claim("w").claim
        assert claim.id == a.id
        outcome = dict((job.id, what) for job, what in q.cancel([a.id, b.id]))
        assert outcome[b.id] == "cancelled" and outcome[a.id].startswith("stopping")
        assert home.cancel_flag(a.id).exists()
        assert q.get(a.id).state == "running" and q.get(a.id).cancel_requested
        assert q.cancelled(a.id, claim.run_id, "cancelled while running")
        assert q.finish(c.id, "not-a-run", {}) is False
        retried = dict((job.id, what) for job, what in q.retry([a.id, b.id, c.id]))
        assert retried == {a.id: "queued again", b.id: "queued again", c.id: "queued; nothing to retry"}
        assert not home.cancel_flag(a.id).exists()
        assert q.get(a.id).attempts == 0 and not q.get(a.id).cancel_requested
        with pytest.raises(QueueError, match="no job 99"):
            q.resolve(["99"])
        with pytest.raises(QueueError, match="no batch b7"):
            q.resolve(["b7"])


def test_memory_admission_refuses_a_job_too_large_for_the_worker(tmp_path: Path, home: Home) -> None:
    with Queue(home) as q:
        small, large = submit(q, [small_job(tmp_path, "small"), small_job(tmp_path, "large", n=40)])
        limit = (small.memory_bytes + large.memory_bytes) // 2
        r = q.claim("w", memory_total=limit, memory_free=limit)
        assert r.claim is not None and r.claim.id == small.id and r.refused == []
        r = q.claim("w", memory_total=limit, memory_free=limit)
        assert r.claim is None and [job_id for job_id, _, _ in r.refused] == [large.id]
        refused = q.get(large.id)
        assert refused.state == "failed" and refused.started is None and refused.attempts == 0
        assert "not started: needs about" in refused.error and "--memory" in refused.error
        # a job that fits alone but not beside the running one waits
        again = q.retry([large.id])
        assert again[0][1] == "queued again"
        r = q.claim("w", memory_total=10 * large.memory_bytes, memory_free=large.memory_bytes // 2)
        assert r.claim is None and q.get(large.id).state == "queued"


def test_priorities_order_claims(tmp_path: Path, home: Home) -> None:
    with Queue(home) as q:
        low = submit(q, [small_job(tmp_path, "low")], priority=-1)[0]
        mid1, mid2 = submit(q, [small_job(tmp_path, "m1"), small_job(tmp_path, "m2")])
        high = submit(q, [small_job(tmp_path, "high")], priority=5)[0]
        order = [q.claim("w").claim.id for _ in range(4)]
    assert order == [high.id, mid1.id, mid2.id, low.id]


# ---------------------------------------------------------------- watch arithmetic
def test_rate_and_remaining_iterations() -> None:
    history = [0.5 ** i for i in range(12)]
    assert math.isclose(rate(history), 0.5)
    # from 0.5^11 to 1e-8 at 0.5 per iteration: log(1e-8 / 0.5^11) / log(0.5) = 15.6 -> 16
    assert remaining(history[-1], 1e-8, 0.5) == 16
    assert remaining(1e-9, 1e-8, 0.5) == 0
    assert remaining(1e-3, 1e-8, 1.2) is None
    assert rate([1.0]) is None


def test_plot_puts_the_residual_on_a_log_scale() -> None:
    lines = plot([10.0 ** -i for i in range(9)], width=9, height=9)
    rows = lines[:9]
    # one star per column, one row lower per decade
    assert [row.index("*") - row.index("|") - 1 for row in rows] == list(range(9))
    assert rows[0].startswith("  1e+0") and rows[-1].startswith("  1e-8")


# ---------------------------------------------------------------- the command line
def test_list_json_has_the_documented_fields(tmp_path: Path, home: Home, capsys) -> None:
    assert main(["submit", str(small_job(tmp_path, "one")), "--priority", "3", "--home", str(home.root)]) == 0
    out = capsys.readouterr().out
    assert out.split()[0] == "1" and "one" in out
    (j,) = listing(home, capsys=capsys)
    for key, kind in (("id", int), ("name", str), ("state", str), ("attempts", int), ("priority", int),
                      ("output", str), ("submitted", str)):
        assert isinstance(j[key], kind), key
    for key in ("error", "started", "finished"):
        assert key in j and j[key] is None
    assert j["state"] == "queued" and j["priority"] == 3 and j["attempts"] == 0
    submitted = datetime.datetime.fromisoformat(j["submitted"])  # ISO 8601 with its offset
    with Queue(home) as q:
        assert submitted.tzinfo is not None and submitted.timestamp() == int(q.get(j["id"]).submitted)
    assert listing(home, "--state", "done", capsys=capsys) == []


def test_show_and_log_of_a_finished_job(tmp_path: Path, home: Home, capsys) -> None:
    with Queue(home) as q:
        (j,) = submit(q, [small_job(tmp_path, "shown", method="amg", n=10)])
        c = q.claim("w").claim
    write_text_atomic(home.job_file(j.id), dumps(c.job_table))
    reply = child.execute({"job": j.id, "run": c.run_id, "attempt": 1, "output": c.output, "worker": "w"},
                          home, child.ChildState(os.getppid()))
    with Queue(home) as q:
        assert q.finish(j.id, c.run_id, reply["summary"])
    assert main(["show", str(j.id), "--home", str(home.root)]) == 0
    text = capsys.readouterr().out
    for word in ("shown", "done", "amg", "iterations", "final relative residual", "complete", "[grid]", "started",
                 "balance", "relative imbalance"):
        assert word in text, word
    assert main(["log", str(j.id), "--csv", "--home", str(home.root)]) == 0
    rows = capsys.readouterr().out.strip().splitlines()
    assert rows[0] == "iteration,relative_residual,seconds,method"
    assert all(r.endswith(",amg") for r in rows[1:])  # the method that produced each record
    logged = [r for r in read_log(log_path(Path(j.output))) if "iteration" in r]
    assert [float(r.split(",")[1]) for r in rows[1:]] == [r["relative_residual"] for r in logged]
    assert main(["show", "999", "--home", str(home.root)]) == 2
    assert "no job 999" in capsys.readouterr().err


def test_cancel_of_an_unknown_id_changes_nothing(tmp_path: Path, home: Home, capsys) -> None:
    assert main(["submit", str(small_job(tmp_path, "keep")), "--home", str(home.root)]) == 0
    capsys.readouterr()
    assert main(["cancel", "1", "42", "--home", str(home.root)]) == 2
    assert "no job 42" in capsys.readouterr().err
    assert listing(home, capsys=capsys)[0]["state"] == "queued"
