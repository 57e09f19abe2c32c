"""The web view in a real browser: Debian's chromium, headless, driven by Playwright.

The browser is never downloaded: Playwright launches /usr/bin/chromium (``.ci/run`` installs
it). Where it cannot start, the test skips, except in CI (``CI=true``), where it fails.
``SEVENFOLD_WEB_SHOTS=DIR`` keeps a screenshot of each page in DIR.
"""

from __future__ import annotations

import os
import re
from pathlib import Path

import pytest

from queue_support import WorkerProcess, endless_job, env, job, make_home, small_job, submit, wait_for
from web_support import ViewProcess

CHROMIUM = os.environ.get("SEVENFOLD_CHROMIUM", "/usr/bin/chromium")
ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
        "--disable-background-networking", "--disable-component-update", "--disable-sync"]
UI_WAIT = 60_000  # ms: a bound on how long a broken page hangs the test, not a speed claim


@pytest.fixture(scope="module")
def browser():
    try:
        from playwright.sync_api import sync_playwright

        pw = sync_playwright().start()
    except Exception as exc:  # the package missing, or its driver failing to start
        _cannot(f"playwright cannot start: {exc}")
    try:
        b = pw.chromium.launch(executable_path=CHROMIUM, args=ARGS)
    except Exception as exc:
        pw.stop()
        _cannot(f"chromium at {CHROMIUM} cannot start: {exc}")
    yield b
    b.close()
    pw.stop()


def _cannot(reason: str) -> None:
    if os.environ.get("CI") == "true":
        pytest.fail(f"{reason} (CI must run the browser tests: .ci/run installs chromium)")
    pytest.skip(reason)


def _shot(page, name: str) -> None:
    folder = os.environ.get("SEVENFOLD_WEB_SHOTS")
    if folder:
        Path(folder).mkdir(parents=True, exist_ok=True)
        page.screenshot(path=str(Path(folder) / f"{name}.png"), full_page=True)


def test_watch_a_solve_live_and_cancel_jobs_from_the_page(tmp_path: Path, warm_cache: Path, browser) -> None:
    home = make_home(tmp_path / "home", warm_cache)
    (solving,) = submit(home, endless_job(tmp_path, "endless"), priority=1)
    (waiting,) = submit(home, small_job(tmp_path, "waiting"))
    worker = WorkerProcess(home, environ=env(grace=60))  # one slot: "waiting" stays queued
    view = ViewProcess(home)
    page = browser.new_page(viewport={"width": 1400, "height": 900})
    problems: list[str] = []
    page.on("console", lambda m: problems.append(f"console {m.type}: {m.text}") if m.type == "error" else None)
    page.on("pageerror", lambda e: problems.append(f"page error: {e}"))
    try:
        # the queue page, opened with the printed link (it carries the token)
        page.goto(f"{view.url}/?token={view.token}")
        row = page.locator(f"#job-{solving['id']}")
        row.locator(".state-running").wait_for(timeout=UI_WAIT)
        page.locator(f"#job-{waiting['id']} .state-queued").wait_for(timeout=UI_WAIT)
        assert page.locator("#mode").inner_text() == "cancel and retry enabled"
        wait_for(lambda: row.locator(".iters").inner_text().strip() not in ("", "0"), "live iterations in the row")
        _shot(page, "queue")
        # cancel the queued job from its row (the button asks once more)
        button = page.locator(f"#job-{waiting['id']} button.cancel")
        button.click()
        button.click()
        page.locator(f"#job-{waiting['id']} .state-cancelled").wait_for(timeout=UI_WAIT)
        assert job(home, waiting["id"]).state == "cancelled"
        # the running job's page: its residual plot gains points while the worker solves
        row.locator("a").first.click()
        page.wait_for_url(re.compile(rf"/jobs/{solving['id']}\?token="))
        line = page.locator("#resplot polyline.series")
        line.wait_for(timeout=UI_WAIT)
        first = int(line.get_attribute("data-last"))
        wait_for(lambda: int(line.get_attribute("data-last") or -1) > first + 2, "the plot to gain points")
        assert int(line.get_attribute("data-points")) >= 2
        assert "rate" in page.locator("#progress").inner_text()
        _shot(page, "job-running")
        # cancel it with the page's button: the solve stops and the page shows it
        cancel = page.locator("#actions button.cancel")
        cancel.click()
        cancel.click()
        page.locator("#title .state-cancelled").wait_for(timeout=UI_WAIT)
        assert job(home, solving["id"]).state == "cancelled"
        assert "stopped at its next iteration" in job(home, solving["id"]).error
        page.locator("#actions button.retry").wait_for(timeout=UI_WAIT)  # now it may be retried
        _shot(page, "job-cancelled")
        # without the token the same pages are read-only: no buttons
        page.goto(f"{view.url}/jobs/{solving['id']}")
        page.locator("#summary tr").first.wait_for(timeout=UI_WAIT)
        assert page.locator("#mode").inner_text() == "read-only"
        assert page.locator("button.act").count() == 0
    finally:
        page.close()
        view.stop()
        worker.stop()
    assert problems == []
    assert "Traceback" not in view.output()
