"""auto's switch from gmg to amg is told plainly: summary, residual log, show, watch and log.

The rate guard is made to trip (GUARD_ITERATIONS 2, GUARD_RATE 0: any gmg that has not
converged after two iterations is 'too slow'), so the switch happens on a small job.
"""

from __future__ import annotations

import os
from pathlib import Path

import pytest
import zarr
from queue_support import small_job

from sevenfold.cli import main
from sevenfold.queue import child
from sevenfold.queue.db import Queue
from sevenfold.queue.files import write_text_atomic
from sevenfold.queue.home import locate
from sevenfold.queue.submit import submit
from sevenfold.queue.tomlwrite import dumps
from sevenfold.queue.watch import describe, log_lines, read_progress
from sevenfold.residual_log import read_log
from sevenfold.runner import run_job
from sevenfold.solvers import select


@pytest.fixture
def slow_gmg(monkeypatch):
    monkeypatch.setattr(select, "GUARD_ITERATIONS", 2)
    monkeypatch.setattr(select, "GUARD_RATE", 0.0)


def _job(tmp_path: Path, name: str = "switch") -> Path:
    # a Dirichlet face: not fft, so gmg; 20^3 cells so that gmg has levels below the finest
    # (16^3 and smaller are gmg's coarsest level, solved exactly before the guard could trip)
    return small_job(tmp_path, name, n=20, method="auto")


def test_the_switch_is_recorded_where_it_happens(tmp_path: Path, slow_gmg, capsys) -> None:
    result = run_job(_job(tmp_path))
    s = result.solve
    assert s.switch is not None and (s.switch["from"], s.switch["to"], s.switch["after_iterations"]) == ("gmg", "amg", 2)
    records = list(read_log(result.residual_log))
    kinds = [r.get("event") or r["method"] for r in records]
    # start, gmg iterations 0..2, the switch, amg iterations 0..n, end
    assert kinds[:5] == ["start", "gmg", "gmg", "gmg", "switch"]
    assert kinds[5:-1] == ["amg"] * (s.iterations + 1) and kinds[-1] == "end"
    p = read_progress(result.output)
    assert p.iteration == s.iterations and p.method == "amg"  # the same count as the summary
    assert describe(p).startswith("auto switched from gmg to amg after 2 gmg iterations")
    text = log_lines(p)
    marked = [i for i, line in enumerate(text) if "auto switched from gmg to amg" in line]
    assert len(marked) == 1 and text[marked[0] - 1].endswith("gmg") and text[marked[0] + 1].endswith("amg")
    csv = log_lines(p, csv=True)
    assert csv[0] == "iteration,relative_residual,seconds,method"
    assert [row.split(",")[3] for row in csv[1:]] == ["gmg"] * 3 + ["amg"] * (s.iterations + 1)
    attrs = zarr.open_group(str(result.output), mode="r").attrs
    assert attrs["solver"]["switch"]["after_iterations"] == 2
    assert attrs["solver"]["iterations"] == s.iterations


def test_run_says_so_in_its_summary_line(tmp_path: Path, slow_gmg, capsys) -> None:
    assert main(["run", str(_job(tmp_path)), "--no-progress"]) == 0
    out = " ".join(capsys.readouterr().out.split())
    assert "*** auto switched from gmg to amg after 2 gmg iterations" in out
    assert "(auto switched from gmg after 2 gmg iterations)" in out


def test_show_and_log_of_a_switched_job(tmp_path: Path, slow_gmg, capsys) -> None:
    home = locate(tmp_path / "home")
    with Queue(home) as q:
        (j,) = submit(q, [_job(tmp_path, "queued-switch")])
        c = q.claim("w").claim
    write_text_atomic(home.job_file(j.id), dumps(c.job_table))
    reply = child.execute({"job": j.id, "run": c.run_id, "attempt": 1, "output": c.output, "worker": "w"},
                          home, child.ChildState(os.getppid()))
    summary = reply["summary"]
    with Queue(home) as q:
        assert q.finish(j.id, c.run_id, summary)
    assert main(["show", str(j.id), "--home", str(home.root)]) == 0
    text = " ".join(capsys.readouterr().out.split())
    assert "switched auto switched from gmg to amg after 2 gmg iterations" in text
    assert f"{summary['iterations']} iterations" in text
    assert f"now amg, iteration {summary['iterations']}," in text  # show's count is the summary's
    assert "headline numbers" in text
    assert main(["log", str(j.id), "--home", str(home.root)]) == 0
    rows = capsys.readouterr().out.splitlines()
    assert sum("auto switched from gmg to amg" in r for r in rows) == 1
    assert main(["watch", str(j.id), "--lines", "--home", str(home.root)]) == 0
    text = capsys.readouterr().out
    assert sum("*** auto switched from gmg to amg after 2 gmg iterations" in r for r in text.splitlines()) == 1
    assert f"amg-sa {summary['iterations']} iterations (auto switched from gmg" in " ".join(text.split())


def test_the_web_view_follows_a_switch(tmp_path: Path, slow_gmg) -> None:
    from sevenfold.web.data import LogFollower

    result = run_job(_job(tmp_path, "web-switch"))
    follower = LogFollower(result.residual_log)
    follower.update()
    p = follower.progress()
    assert follower.skipped == 0 and p.iteration == result.solve.iterations and p.method == "amg"
    assert describe(p).startswith("auto switched from gmg to amg")
