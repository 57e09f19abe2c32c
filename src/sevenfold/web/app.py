"""The web view's routes: three pages, their JSON, figures, and the two actions.

Pages are small HTML shells (``templates/page.html``) whose script (``static/view.js``)
fetches the JSON and polls it; every script and style ships in the package. The database
is read through :class:`.data.Reader` (read-only). ``cancel`` and ``retry`` go through the
queue's own :meth:`Queue.cancel` / :meth:`Queue.retry`, only with the token the command
printed, sent in the ``X-Sevenfold-Token`` header (a form or a page on another site cannot
set it without the browser asking this server first, which it never allows).
"""

from __future__ import annotations

import html
import secrets
import string
import threading
from importlib import resources
from pathlib import Path
from typing import Any, Callable

from starlette.applications import Starlette
from starlette.middleware import Middleware
from starlette.middleware.gzip import GZipMiddleware
from starlette.middleware.trustedhost import TrustedHostMiddleware
from starlette.requests import Request
from starlette.responses import HTMLResponse, JSONResponse, Response
from starlette.routing import Mount, Route
from starlette.staticfiles import StaticFiles

from ..errors import QueueError
from ..queue.commands import duration, public
from ..queue.views import show_rows
from ..queue.db import Queue
from ..queue.records import STATES, Job, stamp
from .data import Logs, NoQueue, NotFound, Reader, Results, now

TOKEN_HEADER = "X-Sevenfold-Token"
ACTIONS = {"cancel": ("queued", "running"), "retry": ("failed", "cancelled")}
MAX_EVENTS = 200  # the newest events a job page lists
SECURITY = {
    "Content-Security-Policy": "default-src 'self'; img-src 'self' data:; script-src 'self'; "
                               "style-src 'self'; connect-src 'self'; frame-ancestors 'none'",
    "X-Content-Type-Options": "nosniff",
    "Referrer-Policy": "no-referrer",  # the token in the address never leaves in a Referer
}


def _package_dir(name: str) -> Path:
    return Path(str(resources.files("sevenfold.web") / name))


def _page_template() -> string.Template:
    return string.Template((_package_dir("templates") / "page.html").read_text(encoding="utf-8"))


def _row(job: Job, now_s: float, live: dict[str, Any] | None = None) -> dict[str, Any]:
    """A job as the queue page shows it."""
    p = public(job)
    ran = None if job.started is None else (job.finished or now_s) - job.started
    row = {k: p[k] for k in ("id", "name", "state", "batch", "priority", "attempts", "max_attempts",
                             "submitted", "started", "finished", "method", "iterations")}
    row["residual"] = p["final_relative_residual"]
    row["ran"] = duration(ran)
    row["cancel_requested"] = job.cancel_requested
    row["note"] = job.error or ""
    if live:
        row["iterations"] = live.get("iteration")
        row["residual"] = live.get("residual")
    return row


def _int_arg(request: Request, name: str, default: int) -> int:
    raw = request.query_params.get(name)
    if raw is None or raw == "":
        return default
    try:
        return int(raw)
    except ValueError:
        raise BadRequest(f"{name}={raw!r} is not a whole number") from None


class BadRequest(Exception):
    pass


def create_app(home_root: str | Path, token: str | None = None,
               allowed_hosts: list[str] | None = None) -> Starlette:
    """The view of the queue in ``home_root``; actions need ``token`` (a random one if None).

    ``allowed_hosts``: the host names requests may address (others get 400), so a web page
    whose name is made to point at 127.0.0.1 cannot read the queue; None allows any.
    """
    reader = Reader(Path(home_root))
    logs, results = Logs(), Results()
    token = token or secrets.token_urlsafe(24)
    template = _page_template()
    rows_cache: dict[tuple, list[dict[str, Any]]] = {}  # (version, state, batch) -> the queue's rows
    rows_lock = threading.Lock()

    def page(kind: str, title: str, data: dict[str, Any], status: int = 200) -> HTMLResponse:
        attrs = " ".join(f'data-{k}="{html.escape(str(v), quote=True)}"' for k, v in data.items())
        body = template.substitute(title=html.escape(title), page=kind, data=attrs,
                                   home=html.escape(str(reader.home.root)))
        return HTMLResponse(body, status_code=status, headers=SECURITY)

    def not_found_page(message: str) -> HTMLResponse:
        return page("missing", "not found", {"message": message}, status=404)

    def api(fn: Callable[[Request], Any]) -> Callable[[Request], Response]:
        def endpoint(request: Request) -> Response:
            try:
                body = fn(request)
            except NoQueue as exc:
                return JSONResponse({"error": str(exc), "no_queue": True}, status_code=503,
                                    headers={"Cache-Control": "no-store"})
            except NotFound as exc:
                return JSONResponse({"error": str(exc)}, status_code=404)
            except BadRequest as exc:
                return JSONResponse({"error": str(exc)}, status_code=400)
            except (QueueError, OSError) as exc:  # the database or a file could not be read now
                return JSONResponse({"error": f"could not read the queue: {exc}"}, status_code=503,
                                    headers={"Cache-Control": "no-store"})
            if isinstance(body, Response):
                return body
            return JSONResponse(body, headers={"Cache-Control": "no-store"})
        return endpoint

    # ------------------------------------------------------------ pages
    def queue_page(request: Request) -> Response:
        return page("queue", "queue", {})

    def job_page(request: Request) -> Response:
        job_id = request.path_params["id"]
        try:
            job = reader.job(job_id)
        except NotFound as exc:
            return not_found_page(str(exc))
        except NoQueue:
            return page("job", f"job {job_id}", {"id": job_id})
        return page("job", f"job {job.id} {job.name}", {"id": job_id})

    def batch_page(request: Request) -> Response:
        batch_id = request.path_params["id"]
        try:
            found = reader.queue().batch(batch_id)
        except NoQueue:
            found = {}
        if found is None:
            return not_found_page(f"there is no batch b{batch_id} in the queue at {str(reader.home.root)!r}")
        return page("batch", f"batch b{batch_id}", {"id": batch_id})

    # ------------------------------------------------------------ data
    def queue_data(request: Request) -> dict[str, Any]:
        state = request.query_params.get("state") or None
        if state is not None and state not in STATES:
            raise BadRequest(f"state={state!r} is not one of {', '.join(STATES)}")
        raw_batch = (request.query_params.get("batch") or "").strip().lstrip("bB")
        if raw_batch and not raw_batch.isdecimal():
            raise BadRequest(f"batch={request.query_params.get('batch')!r} is not a batch id (b<number>)")
        batch = int(raw_batch) if raw_batch else None
        q = reader.queue()
        version = f"{reader.home.db.stat().st_ino}-{q.last_event()}"
        t = now()
        running = q.jobs(state="running")
        live = {j.id: logs.snapshot(j, points=False) for j in running
                if (state in (None, "running")) and (batch is None or j.batch == batch)}
        out: dict[str, Any] = {
            "home": str(reader.home.root),
            "version": version,
            "counts": q.counts(),
            "workers": [{"id": w["id"], "slots": w["slots"]} for w in q.workers()],
            "live": {str(i): {"iteration": s["iteration"], "residual": s["residual"], "text": s["text"],
                              "ran": duration(t - j.started) if j.started else ""}
                     for j in running if (i := j.id) in live for s in [live[i]]},
            "jobs": None,
        }
        if request.query_params.get("since") != version:
            key = (version, state, batch)
            with rows_lock:
                rows = rows_cache.get(key)
            if rows is None:  # the first client to see a change builds the rows for all
                rows = [_row(j, t, live.get(j.id)) for j in q.jobs(state=state, batch=batch)]
                with rows_lock:
                    rows_cache[key] = rows
                    while len(rows_cache) > 8:
                        rows_cache.pop(next(iter(rows_cache)))
            out["jobs"] = rows
        return out

    def job_data(request: Request) -> dict[str, Any]:
        job = reader.job(request.path_params["id"])
        after = _int_arg(request, "after", -1)
        progress = logs.snapshot(job, after=after, run=request.query_params.get("run"))
        t = now()
        q = reader.queue()
        events = q.events(job.id)
        result = results.info(job.output) if job.state == "done" else None
        return {
            "job": _row(job, t, progress if job.state == "running" else None),
            "rows": show_rows(job, t, progress["text"] if progress["last"] else None),
            "events": [{"time": stamp(e.time), "event": e.event, "detail": e.detail}
                       for e in events[-MAX_EVENTS:]],
            "events_total": len(events),
            "progress": progress,
            "actions": {name: job.state in allowed for name, allowed in ACTIONS.items()},
            "result": result,
        }

    def batch_data(request: Request) -> dict[str, Any]:
        batch_id = request.path_params["id"]
        q = reader.queue()
        batch = q.batch(batch_id)
        if batch is None:
            raise NotFound(f"there is no batch b{batch_id} in the queue at {str(reader.home.root)!r}")
        jobs = q.jobs(batch=batch_id)
        done = [j for j in jobs if j.state == "done"]
        infos = {j.id: results.info(j.output) for j in done}
        quantities = ["iterations", "final relative residual", "job seconds"]
        sample = next((i for i in infos.values() if i), None)
        if sample:
            quantities[:0] = [f"max {sample['solution']}", f"min {sample['solution']}"]
            quantities += [f"probe {p['name']}" for p in sample["probe_points"]]
            quantities += [f"probe {n} (max along the line)" for n in sample["probe_lines"]]
        chosen = request.query_params.get("quantity") or quantities[0]
        if chosen not in quantities:
            raise BadRequest(f"quantity={chosen!r} is not one of: {', '.join(quantities)}")

        def value(j: Job) -> float | None:
            info = infos.get(j.id)
            s = j.summary or {}
            if chosen == "iterations":
                return s.get("iterations")
            if chosen == "final relative residual":
                return s.get("final_relative_residual")
            if chosen == "job seconds":
                return (s.get("seconds") or {}).get("job")
            if info is None:
                return None
            if chosen.startswith(("max ", "min ")):
                ext = results.extrema(j.output)
                return None if ext is None else ext[0 if chosen.startswith("min ") else 1]
            for p in info["probe_points"]:
                if chosen == f"probe {p['name']}":
                    return p["value"]
            for n in info["probe_lines"]:
                if chosen == f"probe {n} (max along the line)":
                    return info["line_maxima"].get(n)
            return None

        return {
            "batch": {"id": f"b{batch_id}", "source": batch["source"], "mode": batch["mode"],
                      "keys": batch["keys"], "size": batch["size"], "submitted": stamp(batch["submitted"])},
            "quantities": quantities,
            "quantity": chosen,
            "units": sample["units"] if sample and chosen.startswith(("max", "min", "probe")) else "",
            "jobs": [{"id": j.id, "name": j.name, "state": j.state, "variant": j.variant or {},
                      "value": value(j) if j.state == "done" else None} for j in jobs],
        }

    def figure(request: Request) -> Response:
        try:
            job = reader.job(request.path_params["id"])
        except (NotFound, NoQueue) as exc:
            return Response(str(exc), status_code=404, media_type="text/plain")
        png = results.figure(job.output, request.path_params["kind"]) if job.state == "done" else None
        if png is None:
            return Response(f"job {job.id} has no {request.path_params['kind']} figure ({job.state})",
                            status_code=404, media_type="text/plain")
        return Response(png, media_type="image/png", headers={"Cache-Control": "no-cache"})

    # ------------------------------------------------------------ actions
    def action(request: Request) -> Response:
        name = request.path_params["action"]
        if name not in ACTIONS:
            return JSONResponse({"error": f"no action {name!r}"}, status_code=404)
        given = request.headers.get(TOKEN_HEADER, "")
        if not given or not secrets.compare_digest(given.encode(), token.encode()):
            return JSONResponse({"error": "this view is read-only: actions need the link with the token "
                                          "that `sevenfold view` printed when it started"}, status_code=403)
        job = reader.job(request.path_params["id"])
        allowed = ACTIONS[name]
        if job.state not in allowed:
            return JSONResponse({"error": f"job {job.id} is {job.state}; only {' or '.join(allowed)} jobs "
                                          f"can be {'cancelled' if name == 'cancel' else 'retried'}"},
                                status_code=409)
        with Queue(reader.home, reader.timing) as q:
            ((before, what),) = (q.cancel if name == "cancel" else q.retry)([job.id])
        if before.state not in allowed:  # it changed state meanwhile; the queue did nothing
            return JSONResponse({"error": f"job {job.id}: {what}"}, status_code=409)
        return JSONResponse({"id": job.id, "action": name, "result": what})

    routes = [
        Route("/", queue_page),
        Route("/jobs/{id:int}", job_page),
        Route("/batches/{id:int}", batch_page),
        Route("/api/queue", api(queue_data)),
        Route("/api/jobs/{id:int}", api(job_data)),
        Route("/api/batches/{id:int}", api(batch_data)),
        Route("/api/jobs/{id:int}/{action:str}", api(action), methods=["POST"]),
        Route("/figures/{id:int}/{kind:str}.png", figure),
        Mount("/static", StaticFiles(directory=str(_package_dir("static"))), name="static"),
    ]
    middleware = [Middleware(GZipMiddleware, minimum_size=2000)]
    if allowed_hosts:
        middleware.insert(0, Middleware(TrustedHostMiddleware, allowed_hosts=allowed_hosts))
    app = Starlette(routes=routes, middleware=middleware)
    app.state.token = token
    app.state.reader = reader
    return app
