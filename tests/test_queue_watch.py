"""``watch``'s estimate of what is left, on made-up residual histories, and its line for a
queued job."""

from __future__ import annotations

import math
from pathlib import Path

from sevenfold.cli import main
from sevenfold.queue import views
from sevenfold.queue.db import Queue
from sevenfold.queue.home import locate
from sevenfold.queue.submit import submit
from sevenfold.queue.watch import RATE_WINDOW, Progress, describe, estimate, steady

from queue_support import small_job

RTOL = 1e-8
FACTOR = 0.8  # the made-up solve's reduction per iteration
SECONDS = 0.5  # per iteration


def progress(history: list[float]) -> Progress:
    return Progress({"method": "amg", "rtol": RTOL}, history, [SECONDS * i for i in range(len(history))], None)


def geometric(n: int) -> list[float]:
    return [FACTOR**i for i in range(n)]


def test_a_residual_that_jumps_for_one_iteration_keeps_the_estimate_steady() -> None:
    """CG's residual may rise for an iteration: the estimates just before, at and after the
    jump stay near what the steady rate gives, not a hundred times more."""
    history = geometric(40)
    jump = 30
    history[jump] *= 50.0
    for n in (jump, jump + 1, jump + 2):  # the last iteration before the jump, the jump, after it
        e = estimate(progress(history[:n]))
        best = min(history[:n])
        expected = math.log(RTOL / best) / math.log(FACTOR)
        assert e.left is not None and abs(e.left - expected) <= 0.15 * expected, (n, e)
        assert e.seconds is not None and math.isclose(e.seconds, e.left * SECONDS)
    # the last step alone (the estimate watch gave before) would say the solve went backwards
    assert history[jump] / history[jump - 1] > 1


def test_a_stall_gives_no_estimate_rather_than_a_wild_one() -> None:
    history = geometric(20)
    stalled = history + [history[-1] * (1 - 1e-4 * i) for i in range(1, RATE_WINDOW + 1)]
    p = progress(stalled)
    assert not steady(stalled)
    e = estimate(p)
    assert e.left is None and e.seconds is None
    text = describe(p)
    assert "no steady progress" in text and "more to rtol" not in text and " s," not in text
    # a burst after a plateau is not steady either: the two halves of the window disagree
    burst = history + [history[-1]] * (RATE_WINDOW // 2) + [history[-1] * 0.1**i for i in range(1, 6)]
    assert not steady(burst) and estimate(progress(burst)).left is None
    # steady progress again: the estimate comes back
    again = stalled + [stalled[-1] * FACTOR**i for i in range(1, RATE_WINDOW + 1)]
    assert steady(again) and estimate(progress(again)).left is not None


def test_a_steady_solve_gets_an_estimate_in_iterations_and_seconds() -> None:
    history = geometric(15)
    p = progress(history)
    e = estimate(p)
    assert math.isclose(e.factor, FACTOR, rel_tol=1e-12)
    assert e.left == math.ceil(math.log(RTOL / history[-1]) / math.log(FACTOR))
    assert f"about {e.left} more to rtol" in describe(p) and f"about {e.seconds:.0f} s" in describe(p)
    assert estimate(progress(history[:3])).left is None  # too few iterations to judge
    assert estimate(progress(history + [RTOL / 2])).left == 0


def test_watch_on_a_queued_job_says_where_it_stands(tmp_path: Path, monkeypatch, capsys) -> None:
    home = locate(tmp_path / "home")
    with Queue(home) as q:
        first = submit(q, [small_job(tmp_path, "first")], priority=1)[0]
        second = submit(q, [small_job(tmp_path, "second")])[0]

    def cancel_instead_of_sleeping(seconds: float) -> None:  # the job ends, so watch returns
        assert main(["cancel", str(watched), "--home", str(home.root)]) == 0

    monkeypatch.setattr(views.time, "sleep", cancel_instead_of_sleeping)
    lines = {}
    for watched in (second.id, first.id):
        main(["watch", str(watched), "--lines", "--home", str(home.root)])
        lines[watched] = [ln for ln in capsys.readouterr().out.splitlines() if "queued" in ln]
    assert lines[second.id][0].endswith("queued: 1 job ahead")
    assert lines[first.id][0].endswith("queued: next to run")
    assert all(ln.count("queued") == 1 for ls in lines.values() for ln in ls)
