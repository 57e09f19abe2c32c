"""The queue's subcommands: submit, list, show, watch, log, cancel, retry, forget, table, worker, view.

Registered on the ``sevenfold`` parser by :func:`register`; each one is a thin shell over
:mod:`sevenfold.queue.db`, :mod:`.submit`, :mod:`.results` and :mod:`.worker`. The ones that
only look (list, show, watch, log, table) are in :mod:`.views`. Every
command takes ``--home DIR`` (else ``$SEVENFOLD_HOME``, else the user data directory); only
``submit`` and ``worker`` start a queue where there is none.
"""

from __future__ import annotations

import argparse
import json
import math
from pathlib import Path
from typing import Any

from rich.markup import escape

from ..errors import QueueError
from .db import Queue
from .records import FINISHED, STATES, Job, stamp
from .home import Home, locate

STATE_STYLE = {"queued": "cyan", "running": "yellow", "done": "green", "failed": "red", "cancelled": "magenta"}


def consoles():
    from ..console import err, out

    return out, err


def queue_of(args: argparse.Namespace, create: bool = False) -> Queue:
    """The queue of ``--home``; only ``create`` (submit, worker) starts one, saying so on stderr."""
    home = _home(args, create)
    return Queue(home)


def _home(args: argparse.Namespace, create: bool = False) -> Home:
    home = locate(args.home, create=create)
    if create and not home.db.exists():
        consoles()[1].print(f"new queue in {escape(str(home.root))}", soft_wrap=True)
    return home


def seconds_arg(text: str) -> float:
    """``90``, ``90s``, ``15m``, ``2h`` -> seconds."""
    units = {"s": 1.0, "m": 60.0, "h": 3600.0}
    t = text.strip().lower()
    scale = 1.0
    if t and t[-1] in units:
        scale, t = units[t[-1]], t[:-1]
    try:
        value = float(t) * scale
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a duration (e.g. 90, 90s, 15m, 2h)") from None
    if not (value > 0 and math.isfinite(value)):
        raise argparse.ArgumentTypeError(f"{text!r} must be a positive duration")
    return value


def _positive_int(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be at least 1, got {value}")
    return value


def _gib(text: str) -> int:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number of GiB") from None
    if not (value > 0 and math.isfinite(value)):
        raise argparse.ArgumentTypeError(f"must be a positive number of GiB, got {text!r}")
    return int(value * 2**30)


def duration(seconds: float | None) -> str:
    if seconds is None:
        return ""
    if seconds < 60:
        return f"{seconds:.1f} s"
    if seconds < 3600:
        return f"{int(seconds // 60)} min {int(seconds % 60):02d} s"
    return f"{int(seconds // 3600)} h {int(seconds % 3600 // 60):02d} min"


def ran_seconds(job: Job, now: float) -> float | None:
    if job.started is None:
        return None
    return (job.finished or now) - job.started


def public(job: Job) -> dict[str, Any]:
    """A job as ``list --json`` shows it."""
    s = job.summary or {}
    return {
        "id": job.id,
        "name": job.name,
        "state": job.state,
        "priority": job.priority,
        "attempts": job.attempts,
        "max_attempts": job.max_attempts,
        "batch": job.batch_id,
        "variant": job.variant,
        "output": job.output,
        "error": job.error,
        "submitted": stamp(job.submitted),
        "started": stamp(job.started) or None,
        "finished": stamp(job.finished) or None,
        "worker": job.worker,
        "time_limit": job.time_limit,
        "cells": job.cells,
        "method": s.get("method", job.method),
        "memory_bytes": job.memory_bytes,
        "iterations": s.get("iterations"),
        "final_relative_residual": s.get("final_relative_residual"),
        "seconds": (s.get("seconds") or {}).get("job"),
        "source": job.source,
    }


# The keys of :func:`public`, in order: the columns of ``list --csv``.
PUBLIC_FIELDS = ("id", "name", "state", "priority", "attempts", "max_attempts", "batch", "variant", "output",
                  "error", "submitted", "started", "finished", "worker", "time_limit", "cells", "method",
                  "memory_bytes", "iterations", "final_relative_residual", "seconds", "source")


def clean_stale(queue: Queue) -> None:
    from .files import remove_partials

    for r in queue.recover_stale():
        remove_partials(Path(r.output))


# ---------------------------------------------------------------- submit
def _submit(args: argparse.Namespace) -> int:
    from .submit import check_all, enqueue, snapshotted

    out, err = consoles()
    checked, errors = check_all(args.jobs)  # before the queue: a refused submit creates nothing
    if errors:
        for exc in errors:
            err.print(f"[red]error:[/red] {escape(str(exc))}", soft_wrap=True)
        err.print(f"nothing was submitted ({len(errors)} of {len(args.jobs)} job files refused)")
        return 2
    queue = queue_of(args, create=True)
    prepared = [snapshotted(p, queue.home) for p in checked]
    jobs = enqueue(queue, prepared, args.priority, args.time_limit, args.max_attempts)
    if args.json:
        print(json.dumps([{"id": j.id, "name": j.name, "batch": j.batch_id, "output": j.output} for j in jobs],
                         indent=2))
        return 0
    if args.quiet:
        print("\n".join(str(j.id) for j in jobs), flush=True)
        return 0
    by_batch: dict[str | None, list[Job]] = {}
    for j in jobs:
        by_batch.setdefault(j.batch_id, []).append(j)
    for batch, members in by_batch.items():
        if batch is not None:
            out.print(f"batch {batch}: {len(members)} jobs from {escape(members[0].source)}")
        for j in members:
            out.print(f"{'  ' if batch else ''}{j.id}  {escape(j.name)}", soft_wrap=True)
    return 0


# ---------------------------------------------------------------- cancel, retry
def _cancel(args: argparse.Namespace) -> int:
    out, _ = consoles()
    queue = queue_of(args)
    for job, what in queue.cancel(queue.resolve(args.ids)):
        out.print(f"{job.id}  {escape(job.name)}: {escape(what)}", soft_wrap=True)
    return 0


def _retry(args: argparse.Namespace) -> int:
    from .submit import changes_since_submit, prepare_again

    out, _ = consoles()
    queue = queue_of(args)
    ids = queue.resolve(args.ids)
    replace, notes = {}, {}
    for job_id in ids:
        job = queue.get(job_id)
        if job.state not in ("failed", "cancelled"):
            continue
        changed = changes_since_submit(job)
        if changed and args.from_file:
            replace[job_id] = prepare_again(job, queue.home)  # a refusal: one line, nothing retried
        elif changed:
            notes[job_id] = (f"; {', '.join(changed)} since submit: this runs the job as submitted "
                             f"(`sevenfold retry --from-file {job_id}` runs the file as it is now)")
    for job, what in queue.retry(ids, replace):
        was = f" (was {job.state}: {job.error})" if job.error and what.startswith("queued again") else ""
        note = notes.get(job.id, "") if what.startswith("queued again") else ""
        out.print(f"{job.id}  {escape(job.name)}: {escape(what + was + note)}", soft_wrap=True)
    return 0


# ---------------------------------------------------------------- forget
def _forget(args: argparse.Namespace) -> int:
    import shutil

    from .files import delete_result, not_written_by, remove_unused_inputs

    out, _ = consoles()
    queue = queue_of(args)
    if not args.ids and args.state is None:
        raise QueueError("name the jobs to forget: IDs, batch ids (b<number>) or --state done|failed|cancelled")
    ids = queue.resolve(args.ids) if args.ids else None
    if args.state is not None:
        ids = [j.id for j in queue.jobs(state=args.state, ids=ids)]
    results = queue.forget(ids or [])
    forgotten = [job for job, what in results if what == "forgotten"]
    for job in forgotten:  # the database no longer knows them: their files in the home go too
        shutil.rmtree(queue.home.job_dir(job.id), ignore_errors=True)
    remove_unused_inputs([i["snapshot"] for j in forgotten for i in j.inputs], queue.inputs_in_use(),
                         queue.home.inputs)
    in_use = queue.outputs_in_use(j.output for j in forgotten) if args.delete_results else {}
    for job, what in results:
        if what == "forgotten" and args.delete_results:
            output = Path(job.output)
            if job.output in in_use:
                what += f"; result kept (job {in_use[job.output]} writes it too)"
            elif not output.exists():
                what += "; it had no result"
            elif (why := not_written_by(output, job.id, job.run_id, queue.home.root)) is not None:
                what += f"; result kept ({why})"
            else:
                delete_result(output)
                what += "; result deleted"
        elif what == "forgotten":
            what += "; result kept" if Path(job.output).exists() else ""
        out.print(f"{job.id}  {escape(job.name)} ({job.state}): {escape(what)}", soft_wrap=True)
    if not results:
        out.print("no such jobs; nothing forgotten")
    return 0


# ---------------------------------------------------------------- worker
def _worker(args: argparse.Namespace) -> int:
    from .worker import Worker, WorkerOptions

    out, _ = consoles()
    say = lambda text: out.print(text, markup=False, highlight=False, soft_wrap=True)  # noqa: E731
    if args.cluster is not None:
        from .cluster import ClusterOptions, ClusterWorker

        home = _home(args, create=True)
        cluster = ClusterWorker(home, ClusterOptions(
            address=args.cluster, slots=args.slots, threads=args.threads or 1, drain=args.drain,
            memory_bytes=args.memory, time_limit=args.time_limit), say=say)
        return cluster.run(handle_signals=True)
    if args.threads is not None:
        raise QueueError("--threads goes with --cluster; a local worker splits the cores between its slots")
    home = _home(args, create=True)
    options = WorkerOptions(slots=args.slots or 1, drain=args.drain, memory_bytes=args.memory,
                            time_limit=args.time_limit)
    worker = Worker(home, options, say=say)
    return worker.run(handle_signals=True)


# ---------------------------------------------------------------- view
def _view(args: argparse.Namespace) -> int:
    from ..web.serve import serve

    return serve(args.home, args.host, args.port)


# ---------------------------------------------------------------- registration
def register(sub: argparse._SubParsersAction) -> None:
    """Add the queue's subcommands to the ``sevenfold`` parser."""
    from . import views
    home = argparse.ArgumentParser(add_help=False)
    home.add_argument("--home", metavar="DIR",
                      help="queue home (default $SEVENFOLD_HOME, else the user data directory)")

    s = sub.add_parser("submit", parents=[home], help="validate job files and queue them")
    s.add_argument("jobs", nargs="+", metavar="JOB", help="job files (TOML); a [sweep] table queues one job per combination")
    s.add_argument("--priority", type=int, default=0, help="higher runs first (default 0)")
    s.add_argument("--time-limit", type=seconds_arg, metavar="T", help="stop a run after T (90, 15m, 2h)")
    s.add_argument("--max-attempts", type=_positive_int, default=3, metavar="N",
                   help="runs to try when workers die mid-job, then fail (default 3)")
    s.add_argument("--json", action="store_true", help="print the queued jobs as JSON")
    s.add_argument("--quiet", "-q", action="store_true", help="print only the job ids, one a line")
    s.set_defaults(func=_submit)

    ls = sub.add_parser("list", parents=[home], help="the queue's jobs")
    ls.add_argument("--state", choices=STATES)
    ls.add_argument("--batch", metavar="B", help="only the jobs of batch B (b<number>)")
    ls.add_argument("--json", action="store_true", help="a JSON array of jobs")
    ls.add_argument("--csv", action="store_true", help="comma-separated, one row per job (the --json fields)")
    ls.set_defaults(func=views.list_command)

    sh = sub.add_parser("show", parents=[home], help="one job: spec, timings, solver summary, error, history")
    sh.add_argument("id", type=int)
    sh.set_defaults(func=views.show_command)

    w = sub.add_parser("watch", parents=[home], help="follow a job's residual until it ends")
    w.add_argument("id", type=int)
    w.add_argument("--interval", type=float, default=0.5, help="seconds between looks (default 0.5)")
    w.add_argument("--lines", action="store_true", help="print lines instead of a live view")
    w.set_defaults(func=views.watch_command)

    lg = sub.add_parser("log", parents=[home], help="a job's residual history")
    lg.add_argument("id", type=int)
    lg.add_argument("--csv", action="store_true", help="comma-separated: iteration,relative_residual,seconds")
    lg.set_defaults(func=views.log_command)

    c = sub.add_parser("cancel", parents=[home], help="cancel jobs or batches (IDs or b<number>)")
    c.add_argument("ids", nargs="+", metavar="ID")
    c.set_defaults(func=_cancel)

    r = sub.add_parser("retry", parents=[home], help="queue failed or cancelled jobs again (IDs or b<number>)")
    r.add_argument("ids", nargs="+", metavar="ID")
    r.add_argument("--from-file", action="store_true",
                   help="run the job file (and the files it names) as they are now, checked as submit "
                        "does, instead of the snapshot taken at submit")
    r.set_defaults(func=_retry)

    f = sub.add_parser("forget", parents=[home],
                       help="remove finished jobs (done, failed, cancelled) from the queue; results are kept")
    f.add_argument("ids", nargs="*", metavar="ID", help="job ids or batch ids (b<number>)")
    f.add_argument("--state", choices=FINISHED, help="the jobs in this state (of the IDs, when given)")
    f.add_argument("--delete-results", action="store_true",
                   help="delete the results these jobs wrote too (with the residual log, probe table "
                        "and run record); a result something else wrote is kept")
    f.set_defaults(func=_forget)

    t = sub.add_parser("table", parents=[home],
                       help="a sweep's parameters against its results' numbers (IDs or b<number>)")
    t.add_argument("ids", nargs="+", metavar="ID", help="batch ids (b<number>) or job ids")
    form = t.add_mutually_exclusive_group()
    form.add_argument("--csv", action="store_true", help="comma-separated, every number at full precision")
    form.add_argument("--json", action="store_true", help="a JSON array, one object per job")
    t.set_defaults(func=views.table_command)

    wk = sub.add_parser("worker", parents=[home], help="run queued jobs until stopped")
    wk.add_argument("--slots", type=_positive_int, default=None,
                    help="jobs at once (default 1; the cores are split between them); with --cluster: "
                         "jobs in flight (default: what the cluster's workers run at once)")
    wk.add_argument("--drain", action="store_true", help="stop once nothing is queued or running")
    wk.add_argument("--memory", type=_gib, metavar="GB",
                    help="GiB the running jobs may use together by estimate (default: available at start)")
    wk.add_argument("--time-limit", type=seconds_arg, metavar="T",
                    help="limit for jobs submitted without one (90, 15m, 2h)")
    wk.add_argument("--cluster", metavar="ADDRESS",
                    help="run the jobs as tasks on the Dask scheduler at ADDRESS (tcp://host:8786); "
                         "needs pip install 'sevenfold[cluster]'")
    wk.add_argument("--threads", type=_positive_int, default=None, metavar="N",
                    help="with --cluster: threads per job on the Dask worker (default 1)")
    wk.set_defaults(func=_worker)

    v = sub.add_parser("view", parents=[home], help="a live web page of the queue (read-only; cancel and retry with the printed link)")
    v.add_argument("--host", default="127.0.0.1",
                   help="interface to listen on (default 127.0.0.1, this machine only; anything else is "
                        "reachable from the network: prefer an SSH tunnel)")
    v.add_argument("--port", type=int, default=8765, help="TCP port (default 8765; 0 picks a free one)")
    v.set_defaults(func=_view)
