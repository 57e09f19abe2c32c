"""The web view's HTTP layer through Starlette's test client: pages, JSON, figures, tokens.

One queue is made for the module by the queue's own means (submit, a real draining worker,
cancel, a claim by a stand-in worker) so every state is present; a running job's residual
log is written by hand, with a corrupt line in it.
"""

from __future__ import annotations

import json
import sqlite3
from pathlib import Path

import pytest
from starlette.testclient import TestClient

from sevenfold.errors import QueueError
from sevenfold.queue.db import Queue
from sevenfold.queue.home import Timing
from sevenfold.queue.submit import submit as submit_files
from sevenfold.residual_log import log_path
from sevenfold.web.app import TOKEN_HEADER, create_app
from sevenfold.web.data import MAX_POINTS, LogFollower

from queue_support import WorkerProcess, make_home, small_job

TOKEN = "test-token-123"

SWEEP = """
name = "swept"
physics = "heat"
[grid]
cells = [6, 6, 6]
size = [0.1, 0.1, 0.1]
[material]
value = 20.0
[source]
value = 1.0e4
[boundary]
x_min = { type = "dirichlet", value = 300.0 }
[solver]
method = "direct"
[output]
path = "results/{name}.zarr"
[[probe]]
name = "centre"
point = [0.05, 0.05, 0.05]
[[probe]]
name = "scan"
line = { start = [0.0, 0.05, 0.05], end = [0.1, 0.05, 0.05], points = 11 }
[sweep]
"material.value" = [10.0, 40.0]
"""


@pytest.fixture(scope="module")
def queue_home(tmp_path_factory, warm_cache: Path):
    """Jobs in every state: done (a sweep of two), failed, cancelled, queued and running."""
    root = tmp_path_factory.mktemp("web")
    home = make_home(root / "home", warm_cache)
    (root / "sweep.toml").write_text(SWEEP)
    blocked = root / "blocked"
    blocked.mkdir()
    (blocked / "out" / "failing.residuals.jsonl").mkdir(parents=True)  # a folder where the log must go
    with Queue(home) as q:
        swept = submit_files(q, [root / "sweep.toml"])
        (failing,) = submit_files(q, [small_job(blocked, "failing", output="out/{name}.zarr")])
    w = WorkerProcess(home, "--drain")
    assert w.wait() == 0, w.output()
    with Queue(home) as q:
        (cancelled,) = submit_files(q, [small_job(root, "cancelled-one")])
        q.cancel([cancelled.id])
        (running,) = submit_files(q, [small_job(root, "running-one")], priority=5)
        claim = q.claim("stand-in-worker").claim  # running on a worker that is not there
        assert claim is not None and claim.id == running.id
        (queued,) = submit_files(q, [small_job(root, "queued-one")])
        states = {j.id: j.state for j in q.jobs()}
    ids = {"done": [j.id for j in swept], "failed": failing.id, "cancelled": cancelled.id,
           "running": running.id, "queued": queued.id}
    assert [states[i] for i in ids["done"]] == ["done", "done"]
    assert states[ids["failed"]] == "failed" and states[ids["cancelled"]] == "cancelled"
    assert states[ids["running"]] == "running" and states[ids["queued"]] == "queued"
    # the running job's log: 40 iterations, halving each time, one corrupt line among them
    log = log_path(Path(running.output))
    log.parent.mkdir(parents=True, exist_ok=True)
    lines = [json.dumps({"event": "start", "rtol": 1e-8, "method": "gmg"})]
    for i in range(40):
        lines.append(json.dumps({"iteration": i, "relative_residual": 0.5 ** i, "seconds": 0.1 * i}))
        if i == 20:
            lines.append('{"iteration": 21, "relative_resid')  # torn by a crash, then resumed
    log.write_text("\n".join(lines) + "\n")
    return home, ids


@pytest.fixture()
def client(queue_home):
    home, _ = queue_home
    return TestClient(create_app(home.root, TOKEN))


def test_queue_page_and_data_list_every_job_sorted_as_list_sorts(client, queue_home) -> None:
    home, ids = queue_home
    page = client.get("/")
    assert page.status_code == 200 and "/static/view.js" in page.text
    assert "script-src 'self'" in page.headers["content-security-policy"]  # no CDN can load
    d = client.get("/api/queue").json()
    with Queue(home) as q:
        expected = [j.id for j in q.jobs()]  # what `sevenfold list` shows, in its order
    assert [j["id"] for j in d["jobs"]] == expected
    by_id = {j["id"]: j for j in d["jobs"]}
    done = by_id[ids["done"][0]]
    assert done["state"] == "done" and done["batch"] and done["iterations"] >= 1 and done["residual"] < 1e-8
    assert by_id[ids["failed"]]["note"].startswith("cannot write the residual log")
    live = by_id[ids["running"]]
    assert live["iterations"] == 39 and live["residual"] == pytest.approx(0.5 ** 39)
    assert d["live"][str(ids["running"])]["iteration"] == 39
    assert d["counts"] == {"queued": 1, "running": 1, "done": 2, "failed": 1, "cancelled": 1}
    # unchanged since the version the page holds: no rows sent again, live values still are
    again = client.get("/api/queue", params={"since": d["version"]}).json()
    assert again["jobs"] is None and again["live"][str(ids["running"])]["iteration"] == 39


def test_queue_filters_by_state_and_batch(client, queue_home) -> None:
    _, ids = queue_home
    failed = client.get("/api/queue", params={"state": "failed"}).json()["jobs"]
    assert [j["id"] for j in failed] == [ids["failed"]]
    batch = client.get("/api/queue").json()["jobs"][0]["batch"]
    for value in (batch, batch[1:]):  # b3 or 3
        rows = client.get("/api/queue", params={"batch": value}).json()["jobs"]
        assert [j["id"] for j in rows] == ids["done"]
    assert client.get("/api/queue", params={"state": "sleeping"}).status_code == 400
    assert client.get("/api/queue", params={"batch": "x7"}).status_code == 400


def test_job_page_and_data_of_a_running_job(client, queue_home) -> None:
    _, ids = queue_home
    job_id = ids["running"]
    assert client.get(f"/jobs/{job_id}").status_code == 200
    d = client.get(f"/api/jobs/{job_id}").json()
    rows = dict(d["rows"])
    assert rows["state"] == "running" and rows["worker"].startswith("stand-in-worker")
    p = d["progress"]
    # every complete line but the torn one; the rate is watch.rate's: 0.5 per iteration
    assert [pt[0] for pt in p["points"]] == list(range(40)) and p["skipped"] == 1
    assert p["iteration"] == 39 and p["rate"] == pytest.approx(0.5)
    # iterations left to rtol 1e-8 from 0.5^39 = 1.8e-12: none; the text is watch.describe's
    assert p["left"] == 0 and p["text"].startswith("iteration 39, relative residual 1.819e-12, rate 0.500")
    assert rows["last residual"] == p["text"]
    assert d["actions"] == {"cancel": True, "retry": False}
    assert [e["event"] for e in d["events"]] == ["submitted", "started"]
    # the next poll asks only for what it lacks
    more = client.get(f"/api/jobs/{job_id}", params={"after": 39, "run": p["run"]}).json()["progress"]
    assert more["points"] == [] and not more["reset"] and more["last"] == [39, pytest.approx(0.5 ** 39)]


def test_residual_points_are_capped_and_logs_followed_incrementally(tmp_path: Path) -> None:
    log = tmp_path / "a.residuals.jsonl"
    with open(log, "w") as fh:
        fh.write(json.dumps({"event": "start", "rtol": 1e-6}) + "\n")
        for i in range(5 * MAX_POINTS):
            fh.write(json.dumps({"iteration": i, "relative_residual": 1.0 / (i + 1)}) + "\n")
        fh.write('{"iteration": 5000, "rel')  # being written
    f = LogFollower(log)
    f.update()
    assert MAX_POINTS // 2 <= len(f.points) <= MAX_POINTS and f.points[0][0] == 0
    assert f.progress().iteration == 5 * MAX_POINTS - 1
    with open(log, "a") as fh:  # the writer finishes the line and goes on
        fh.write('ative_residual": 1e-4}\n' + json.dumps({"iteration": 5001, "relative_residual": 9e-5}) + "\n")
    f.update()
    assert f.progress().iteration == 5001 and f.skipped == 0
    log.write_text(json.dumps({"event": "start", "rtol": 1e-6}) + "\n")  # a new run's log
    f.update()
    assert f.points == [] and f.progress().iteration is None


def test_job_page_of_a_done_job_shows_balance_probes_and_figures(client, queue_home) -> None:
    _, ids = queue_home
    job_id = ids["done"][0]
    d = client.get(f"/api/jobs/{job_id}").json()
    res = d["result"]
    assert res["solution"] == "temperature" and res["units"] == "K"
    assert res["balance"]["rows"][0][0] == "source (free cells)"
    # source 1e4 W/m^3 in 1e-3 m^3: 10 W, all leaving through x_min (steady state)
    assert res["balance"]["rows"][0][1] == pytest.approx(10.0, rel=1e-9)
    assert [p["name"] for p in res["probe_points"]] == ["centre"] and res["probe_points"][0]["value"] > 300.0
    assert res["figures"] == ["slices", "probes"]
    assert d["actions"] == {"cancel": False, "retry": False}
    assert len(d["progress"]["points"]) == d["job"]["iterations"] + 1  # the whole history
    for kind in res["figures"]:
        png = client.get(f"/figures/{job_id}/{kind}.png")
        assert png.status_code == 200 and png.headers["content-type"] == "image/png"
        assert png.content[:8] == b"\x89PNG\r\n\x1a\n" and len(png.content) > 10_000  # drawn
    assert client.get(f"/figures/{ids['queued']}/slices.png").status_code == 404
    assert client.get(f"/figures/{job_id}/nonsense.png").status_code == 404


def test_batch_page_shows_a_quantity_against_the_swept_parameter(client, queue_home) -> None:
    home, ids = queue_home
    batch = client.get(f"/api/jobs/{ids['done'][0]}").json()["job"]["batch"]
    number = int(batch[1:])
    assert client.get(f"/batches/{number}").status_code == 200
    d = client.get(f"/api/batches/{number}").json()
    assert d["batch"]["keys"] == ["material.value"] and d["quantity"] == "max temperature"
    assert "probe centre" in d["quantities"] and "probe scan (max along the line)" in d["quantities"]
    values = {j["variant"]["material.value"]: j["value"] for j in d["jobs"]}
    # the same heat through a four times better conductor: the rise over 300 K is four times smaller
    # (linear problem, fixed source and Dirichlet value; from the equation itself)
    assert (values[10.0] - 300.0) / (values[40.0] - 300.0) == pytest.approx(4.0, rel=1e-9)
    probe = client.get(f"/api/batches/{number}", params={"quantity": "probe centre"}).json()
    assert all(j["value"] > 300.0 for j in probe["jobs"])
    assert client.get(f"/api/batches/{number}", params={"quantity": "colour"}).status_code == 400


def test_unknown_ids_are_404(client) -> None:
    for url in ("/jobs/9999", "/batches/9999", "/api/jobs/9999", "/api/batches/9999",
                "/figures/9999/slices.png", "/no/such/page"):
        r = client.get(url)
        assert r.status_code == 404, url
    assert "there is no job 9999" in client.get("/api/jobs/9999").json()["error"]
    assert "there is no job 9999" in client.get("/jobs/9999").text
    r = client.post("/api/jobs/9999/cancel", headers={TOKEN_HEADER: TOKEN})
    assert r.status_code == 404


def test_a_missing_queue_home_gives_a_clear_message(tmp_path: Path) -> None:
    client = TestClient(create_app(tmp_path / "nowhere", TOKEN))
    assert client.get("/").status_code == 200  # the page loads and says why it is empty
    for url in ("/api/queue", "/api/jobs/1", "/api/batches/1"):
        r = client.get(url)
        assert r.status_code == 503 and "there is no queue home at" in r.json()["error"], url
    assert not (tmp_path / "nowhere").exists()  # the view creates nothing
    (tmp_path / "empty").mkdir()
    r = TestClient(create_app(tmp_path / "empty", TOKEN)).get("/api/queue")
    assert r.status_code == 503 and "has no queue yet" in r.json()["error"]
    assert list((tmp_path / "empty").iterdir()) == []


def test_the_database_is_opened_read_only(client, queue_home) -> None:
    home, _ = queue_home
    reader = client.app.state.reader
    with pytest.raises(QueueError, match="readonly"):
        reader.queue().write(lambda c: c.execute("DELETE FROM jobs"))
    assert reader.queue().readonly
    with sqlite3.connect(home.db) as c:
        assert c.execute("SELECT COUNT(*) FROM jobs").fetchone()[0] == 6


def test_actions_need_the_token_and_a_state_that_allows_them(client, queue_home) -> None:
    home, ids = queue_home
    q = Queue(home, Timing.from_env())
    # without the token, or with a wrong one, nothing happens
    for headers in ({}, {TOKEN_HEADER: "guess"}, {TOKEN_HEADER: ""}):
        r = client.post(f"/api/jobs/{ids['queued']}/cancel", headers=headers)
        assert r.status_code == 403 and "read-only" in r.json()["error"]
    r = client.post(f"/api/jobs/{ids['queued']}/cancel?token={TOKEN}")  # the token only in a header
    assert r.status_code == 403
    assert q.get(ids["queued"]).state == "queued"
    # states that forbid the action: refused, the job unchanged
    for job_id, action in ((ids["done"][0], "cancel"), (ids["failed"], "cancel"), (ids["done"][0], "retry"),
                           (ids["queued"], "retry"), (ids["running"], "retry")):
        before, events = q.get(job_id), q.events(job_id)
        r = client.post(f"/api/jobs/{job_id}/{action}", headers={TOKEN_HEADER: TOKEN})
        assert r.status_code == 409, (job_id, action)
        assert q.get(job_id).state == before.state and q.events(job_id) == events
    assert client.post(f"/api/jobs/{ids['queued']}/delete", headers={TOKEN_HEADER: TOKEN}).status_code == 404
    assert client.get(f"/api/jobs/{ids['queued']}/cancel").status_code == 405  # actions are POSTs
    # with the token: the queue's own cancel and retry act
    r = client.post(f"/api/jobs/{ids['queued']}/cancel", headers={TOKEN_HEADER: TOKEN})
    assert r.status_code == 200 and r.json()["result"] == "cancelled"
    assert q.get(ids["queued"]).state == "cancelled"
    r = client.post(f"/api/jobs/{ids['running']}/cancel", headers={TOKEN_HEADER: TOKEN})
    assert r.status_code == 200 and r.json()["result"].startswith("stopping")
    assert q.get(ids["running"]).cancel_requested and home.cancel_flag(ids["running"]).exists()
    r = client.post(f"/api/jobs/{ids['failed']}/retry", headers={TOKEN_HEADER: TOKEN})
    assert r.status_code == 200 and r.json()["result"] == "queued again"
    assert q.get(ids["failed"]).state == "queued"
    assert [e.event for e in q.events(ids["failed"])][-1] == "retried"
    # another start of the view has another token: this one's links stop working
    other = TestClient(create_app(home.root))
    assert other.post(f"/api/jobs/{ids['cancelled']}/retry", headers={TOKEN_HEADER: TOKEN}).status_code == 403
    q.close()


def test_static_files_are_served_from_the_package(client) -> None:
    js = client.get("/static/view.js")
    assert js.status_code == 200 and "function plot(" in js.text
    assert "http://" not in js.text and "https://" not in js.text  # nothing fetched from elsewhere
    assert client.get("/static/view.css").status_code == 200


def test_the_view_listens_on_loopback_and_refuses_a_busy_port(tmp_path: Path) -> None:
    import socket
    import subprocess
    import sys

    from sevenfold.web.serve import is_loopback

    assert is_loopback("127.0.0.1") and is_loopback("localhost") and is_loopback("::1")
    assert not is_loopback("0.0.0.0") and not is_loopback("192.0.2.7")
    with socket.socket() as taken:
        taken.bind(("127.0.0.1", 0))
        taken.listen(1)
        port = taken.getsockname()[1]
        proc = subprocess.run([sys.executable, "-m", "sevenfold.cli", "view", "--home", str(tmp_path),
                               "--port", str(port)], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 2 and f"cannot listen on 127.0.0.1:{port}" in proc.stderr
    assert "choose another --port" in proc.stderr and "Traceback" not in proc.stderr


def test_on_loopback_only_this_machines_names_are_served(queue_home) -> None:
    home, _ = queue_home
    app = create_app(home.root, TOKEN, ["127.0.0.1", "localhost"])
    assert TestClient(app, base_url="http://127.0.0.1:8765").get("/api/queue").status_code == 200
    assert TestClient(app, base_url="http://localhost:9999").get("/api/queue").status_code == 200
    # a name of another site made to point at 127.0.0.1 (DNS rebinding) reads nothing
    assert TestClient(app, base_url="http://attacker.example:8765").get("/api/queue").status_code == 400
