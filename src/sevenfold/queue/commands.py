"""The queue's subcommands: submit, list, show, watch, log, cancel, retry, forget, table, worker, view.

Registered on the ``sevenfold`` parser by :func:`register`; each one is a thin shell over
:mod:`sevenfold.queue.db`, :mod:`.submit`, :mod:`.results` and :mod:`.worker`. Every
command takes ``--home DIR`` (else ``$SEVENFOLD_HOME``, else the user data directory); only
``submit`` and ``worker`` start a queue where there is none.
"""

from __future__ import annotations

import argparse
import csv
import io
import json
import math
import sys
import time
from pathlib import Path
from typing import Any, Sequence

from rich.markup import escape
from rich.table import Table

from ..errors import QueueError
from .db import FINISHED, STATES, Job, Queue, stamp
from .home import Home, locate

STATE_STYLE = {"queued": "cyan", "running": "yellow", "done": "green", "failed": "red", "cancelled": "magenta"}


def _consoles():
    from ..console import err, out

    return out, err


def _queue(args: argparse.Namespace, create: bool = False) -> Queue:
    """The queue of ``--home``; only ``create`` (submit, worker) starts one, saying so on stderr."""
    home = _home(args, create)
    return Queue(home)


def _home(args: argparse.Namespace, create: bool = False) -> Home:
    home = locate(args.home, create=create)
    if create and not home.db.exists():
        _consoles()[1].print(f"new queue in {escape(str(home.root))}", soft_wrap=True)
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


def _ran(job: Job, now: float) -> float | None:
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


def _clean_stale(queue: Queue) -> None:
    from .files import remove_partials

    for r in queue.recover_stale():
        remove_partials(Path(r.output))


# ---------------------------------------------------------------- submit
def _submit(args: argparse.Namespace) -> int:
    from .submit import enqueue, prepare_all

    out, err = _consoles()
    queue = _queue(args, create=True)
    prepared, errors = prepare_all(args.jobs, queue.home)
    if errors:
        for exc in errors:
            err.print(f"[red]error:[/red] {escape(str(exc))}", soft_wrap=True)
        err.print(f"nothing was submitted ({len(errors)} of {len(args.jobs)} job files refused)")
        return 2
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


# ---------------------------------------------------------------- list
def _batch_arg(text: str | None) -> int | None:
    if text is None:
        return None
    t = text.strip()
    if t[:1] in ("b", "B"):
        t = t[1:]
    if not t.isdecimal():
        raise QueueError(f"{text!r} is not a batch id (b<number>)")
    return int(t)


LIST_COLUMNS = ("id", "name", "state", "prio", "tries", "submitted", "ran", "result")
GAP = 2  # characters between the columns of a rich table without box (padding 1 + 1)


def fit(text: str, width: int) -> str:
    """``text`` cut to ``width`` characters, an ellipsis marking the cut."""
    return text if len(text) <= width else text[: max(width - 1, 0)] + "\u2026"


def fit_widths(rows: list[list[str]], columns: Sequence[str], flexible: Sequence[str], width: int) -> dict[str, int]:
    """Widths of the ``flexible`` columns so that the table fits ``width`` characters: the
    other columns keep their full width; what is left is shared, each flexible column
    getting no more than it needs (at least 8, so a narrow terminal still shows a start)."""
    need = {c: max([len(c)] + [len(r[i]) for r in rows]) for i, c in enumerate(columns)}
    left = width - sum(need[c] for c in columns if c not in flexible) - GAP * (len(columns) - 1)
    out: dict[str, int] = {}
    pending = sorted(flexible, key=lambda c: need[c])
    while pending:
        share = max(left // len(pending), 8)
        c = pending.pop(0)
        out[c] = min(need[c], share)
        left -= out[c]
    return out


def _list(args: argparse.Namespace) -> int:
    out, _ = _consoles()
    queue = _queue(args)
    _clean_stale(queue)
    jobs = queue.jobs(state=args.state, batch=_batch_arg(args.batch))
    if args.json:
        print(json.dumps([public(j) for j in jobs], indent=2))
        return 0
    if args.csv:
        rows = [public(j) for j in jobs]
        w = csv.DictWriter(sys.stdout, fieldnames=list(PUBLIC_FIELDS), lineterminator="\n")
        w.writeheader()
        for r in rows:
            w.writerow({k: json.dumps(v, separators=(",", ":")) if isinstance(v, dict) else v for k, v in r.items()})
        return 0
    from .watch import read_progress

    now = time.time()
    rows = []
    for j in jobs:
        if j.state == "done" and j.summary:
            result = f"{j.summary.get('iterations')} it, {j.summary.get('final_relative_residual', 0):.1e}"
        elif j.state == "running":
            p = read_progress(j.output, since=j.started)
            result = (f"iteration {p.iteration}, {p.history[-1]:.1e}" if p.history else "building")
            if j.cancel_requested:
                result += ", cancelling"
        else:
            result = " ".join((j.error or "").split())  # one line, whatever the error held
        rows.append([str(j.id), j.name, j.state, str(j.priority), str(j.attempts),
                     time.strftime("%m-%d %H:%M", time.localtime(j.submitted)), duration(_ran(j, now)), result])
    columns = list(LIST_COLUMNS)
    for spare in ("submitted", "prio", "tries", "ran"):  # a narrow terminal drops these first
        need = sum(max([len(c)] + [len(r[LIST_COLUMNS.index(c)]) for r in rows]) for c in columns
                   if c not in ("name", "result"))
        if need + 2 * 12 + GAP * (len(columns) - 1) <= out.width:
            break
        columns.remove(spare)
    keep = [LIST_COLUMNS.index(c) for c in columns]
    rows = [[r[i] for i in keep] for r in rows]
    widths = fit_widths(rows, columns, ("name", "result"), out.width)
    name, state, result = columns.index("name"), columns.index("state"), columns.index("result")
    table = Table(box=None, pad_edge=False)
    for col in columns:
        table.add_column(col, no_wrap=True, overflow="ellipsis", min_width=widths.get(col))
    for r in rows:
        r[name], r[result] = fit(r[name], widths["name"]), fit(r[result], widths["result"])
        table.add_row(*(f"[{STATE_STYLE[c]}]{c}[/]" if i == state else escape(c) for i, c in enumerate(r)))
    out.print(table)
    counts = queue.counts()
    workers = queue.workers()
    summary = ", ".join(f"{counts[s]} {s}" for s in STATES if counts[s])
    cut = "; cut to fit: `show ID` has the full text" if any("\u2026" in r[name] + r[result] for r in rows) else ""
    out.print(f"{summary or 'no jobs'}; {len(workers)} worker(s) running"
              + (": " + ", ".join(f"{escape(w['id'])} ({w['slots']} slot(s))" for w in workers) if workers else "")
              + cut)
    return 0


# ---------------------------------------------------------------- show
def show_rows(job: Job, now: float, last_residual: str | None = None) -> list[tuple[str, str]]:
    """``show``'s summary of a job as (key, text) rows, plain text; also what the web view shows.

    ``last_residual``: the one-line progress (:func:`.watch.describe`) when the job has residuals.
    """
    from ..memory import human
    from ..store import is_complete

    rows: list[tuple[str, str]] = [("job", f"{job.id}  {job.name}")]
    rows.append(("state", job.state + (" (cancel requested)" if job.cancel_requested and job.state == "running" else "")))
    if job.batch is not None:
        rows.append(("batch", f"{job.batch_id}: " + ", ".join(f"{k} = {v!r}" for k, v in (job.variant or {}).items())))
    rows.append(("priority", str(job.priority)))
    rows.append(("attempts", f"{job.attempts} (at most {job.max_attempts} when a worker dies)"))
    if job.time_limit:
        rows.append(("time limit", duration(job.time_limit)))
    rows.append(("submitted", stamp(job.submitted)))
    if job.started:
        rows.append(("started", f"{stamp(job.started)} (waited {duration(job.started - job.submitted)})"))
    if job.finished:
        rows.append(("finished", f"{stamp(job.finished)}" + (f" (ran {duration(job.finished - job.started)})" if job.started else "")))
    elif job.started:
        rows.append(("running for", duration(now - job.started)))
    if job.worker:
        beat = f", last heartbeat {duration(now - job.heartbeat)} ago" if job.heartbeat and job.state == "running" else ""
        rows.append(("worker", f"{job.worker}{beat}"))
    out = Path(job.output)
    kept = ("not written" if not is_complete(out) else "complete"
            if _result_attrs(out).get("converged", True) else "complete, NOT converged")
    rows.append(("output", f"{job.output} ({kept})"))
    rows.append(("source", job.source))
    for i in job.inputs:
        rows.append((i["key"], f"{i['original']} (snapshot {i['snapshot']}, sha256 {i['sha256'][:16]})"))
    rows.append(("plan", f"{job.cells:,} cells, method {job.method}, about {human(job.memory_bytes)}"))
    s = job.summary
    if s and "method" in s:  # a failed run's summary holds only its kind of failure
        rows.append(("solver", f"{s.get('method')}, {s.get('iterations')} iterations, "
                               f"{'converged' if s.get('converged') else 'not converged'}, final relative residual "
                               f"{s.get('final_relative_residual', float('nan')):.3e}"))
        if s.get("switch"):
            from .watch import switch_text

            rows.append(("switched", switch_text(s["switch"])))
        secs = s.get("seconds") or {}
        rows.append(("seconds", ", ".join(f"{k} {v:.2f}" for k, v in secs.items())))
    if last_residual:
        rows.append(("last residual", last_residual))
    if job.error:
        rows.append(("error", job.error))
    return rows


def _show(args: argparse.Namespace) -> int:
    from ..store import is_complete
    from .tomlwrite import dumps
    from .watch import describe, read_progress

    out, _ = _consoles()
    queue = _queue(args)
    _clean_stale(queue)
    job = queue.get(args.id)
    now = time.time()
    t = Table(show_header=False, box=None, pad_edge=False)
    t.add_column(style="bold", no_wrap=True)
    t.add_column(overflow="fold")
    from .submit import changes_since_submit

    p = read_progress(job.output, since=job.started) if job.started else read_progress(job.output)
    changed = changes_since_submit(job)
    hint = f"; `sevenfold retry --from-file {job.id}` runs it as it is now" if job.state in ("failed", "cancelled") else ""
    for key, text in show_rows(job, now, describe(p) if p.history else None):
        if key == "source" and changed:
            text += f" ({'; '.join(changed)} since submit{hint})"
        if key == "state":
            t.add_row(key, f"[{STATE_STYLE[job.state]}]{job.state}[/]" + escape(text[len(job.state):]))
        elif key == "error":
            t.add_row(key, f"[red]{escape(text)}[/red]")
        else:
            t.add_row(key, escape(text))
    out_path = Path(job.output)
    attrs = _result_attrs(out_path) if is_complete(out_path) else None
    out.print(t)
    if attrs is not None:
        from ..console import balance_table, headline_table, warn
        from ..store import not_converged_warning

        warning = not_converged_warning(attrs)
        if warning:
            out.print(f"[yellow]warning:[/yellow] {escape(warning)}")
        balance = attrs.get("balance")
        if balance:
            out.print(balance_table(balance))
        if attrs.get("headline"):
            out.print(headline_table(attrs["headline"]))
        for w in attrs.get("warnings") or []:
            warn(w)
    ev = Table(title="history", title_justify="left", box=None, pad_edge=False)
    for col in ("time", "event", "detail"):
        ev.add_column(col, overflow="fold")
    for e in queue.events(job.id):
        ev.add_row(stamp(e.time), e.event, escape(e.detail))
    out.print(ev)
    out.print("[bold]job as it runs[/bold] (snapshot; the job file may have changed since)")
    out.print(escape(dumps(job.job_table or {})), soft_wrap=True)
    return 0


def _result_attrs(path: Path) -> dict:
    import zarr

    return dict(zarr.open_group(str(path), mode="r").attrs)


# ---------------------------------------------------------------- watch
def _watch(args: argparse.Namespace) -> int:
    from .watch import describe, plot, read_progress, switch_text

    out, _ = _consoles()
    queue = _queue(args)
    job = queue.get(args.id)
    live_view = out.is_terminal and not args.lines

    def position(j: Job) -> str:
        ahead = [q for q in queue.jobs(state="queued") if (q.priority, -q.id) > (j.priority, -j.id)]
        return f"queued, {len(ahead)} job(s) ahead"

    def panel(j: Job, text: str, history: list[float]):
        from rich.console import Group
        from rich.text import Text

        head = Text.assemble((f"job {j.id} {j.name}  ", "bold"), (j.state, STATE_STYLE[j.state]))
        return Group(head, Text(text), Text("\n".join(plot(history))))

    last_shown: tuple | None = None
    switches_shown = 0
    last_clean = 0.0
    try:
        if live_view:
            from rich.live import Live

            live = Live(console=out, refresh_per_second=4, transient=False)
            live.start()
        while True:
            if time.monotonic() - last_clean > 5.0:  # s; a silent worker's job comes back meanwhile
                _clean_stale(queue)
                last_clean = time.monotonic()
            job = queue.get(args.id)
            if job.state == "queued":
                text, history = position(job), []
            else:
                p = read_progress(job.output, since=job.started)
                text, history = describe(p), p.history
                for sw in p.switches[switches_shown:]:  # a marked row at each switch of method
                    line = f"{time.strftime('%H:%M:%S')}  *** {switch_text(sw)}"
                    (live.console.print(line, markup=False) if live_view else print(line, flush=True))
                switches_shown = len(p.switches)
            key = (job.state, len(history), text if not history else None)
            if live_view:
                live.update(panel(job, text, history))
            elif key != last_shown:
                print(f"{time.strftime('%H:%M:%S')}  {job.state}: {text}", flush=True)
            last_shown = key
            if job.state in ("done", "failed", "cancelled"):
                break
            time.sleep(args.interval)
        if live_view:
            live.stop()
        else:
            for line in plot(history):
                print(line)
    except KeyboardInterrupt:
        if live_view:
            live.stop()
        print("stopped watching; the job goes on", file=sys.stderr)
        return 130
    if job.state == "done":
        s = job.summary or {}
        switched = f" ({switch_text(s['switch'])})" if s.get("switch") else ""
        out.print(f"job {job.id} done: {s.get('method', '')} {s.get('iterations')} iterations{escape(switched)}, "
                  f"relative residual {s.get('final_relative_residual', float('nan')):.2e}; result "
                  f"{escape(job.output)}", soft_wrap=True)
        return 0
    out.print(f"job {job.id} {job.state}: {escape(job.error or '')}", soft_wrap=True)
    return 1


# ---------------------------------------------------------------- log
def _log(args: argparse.Namespace) -> int:
    from .watch import read_progress

    queue = _queue(args)
    job = queue.get(args.id)
    p = read_progress(job.output, since=job.started) if job.started else read_progress(job.output)
    if p.rows:
        from .watch import log_lines

        sys.stdout.write("\n".join(log_lines(p, args.csv)) + "\n")
        return 0
    history, seconds = p.history, p.seconds
    if not history and job.state == "done":
        history, seconds = _history_from_result(Path(job.output))
    if not history:
        raise QueueError(f"job {job.id} has no residuals yet ({job.state})")
    buf = io.StringIO()
    if args.csv:
        w = csv.writer(buf, lineterminator="\n")
        w.writerow(["iteration", "relative_residual", "seconds", "method"])
        for i, (r, s) in enumerate(zip(history, seconds)):
            w.writerow([i, repr(r), repr(s), ""])
    else:
        buf.write(f"{'iteration':>9}  {'relative residual':>17}  {'seconds':>9}  method\n")
        for i, (r, s) in enumerate(zip(history, seconds)):
            buf.write(f"{i:9d}  {r:17.6e}  {s:9.3f}\n")
    sys.stdout.write(buf.getvalue())
    return 0


def _history_from_result(output: Path) -> tuple[list[float], list[float]]:
    try:
        import zarr

        g = zarr.open_group(str(output), mode="r")
        return [float(x) for x in g["residual_history"][:]], [float(x) for x in g["residual_seconds"][:]]
    except Exception:
        return [], []


# ---------------------------------------------------------------- cancel, retry
def _cancel(args: argparse.Namespace) -> int:
    out, _ = _consoles()
    queue = _queue(args)
    for job, what in queue.cancel(queue.resolve(args.ids)):
        out.print(f"{job.id}  {escape(job.name)}: {escape(what)}", soft_wrap=True)
    return 0


def _retry(args: argparse.Namespace) -> int:
    from .submit import changes_since_submit, prepare_again

    out, _ = _consoles()
    queue = _queue(args)
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

    from .files import delete_result, remove_unused_inputs

    out, _ = _consoles()
    queue = _queue(args)
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
            if job.output in in_use:
                what += f"; result kept (job {in_use[job.output]} writes it too)"
            else:
                what += "; result deleted" if delete_result(Path(job.output)) else "; it had no result"
        elif what == "forgotten":
            what += "; result kept" if Path(job.output).exists() else ""
        out.print(f"{job.id}  {escape(job.name)} ({job.state}): {escape(what)}", soft_wrap=True)
    if not results:
        out.print("no such jobs; nothing forgotten")
    return 0


# ---------------------------------------------------------------- table
def _table(args: argparse.Namespace) -> int:
    from .results import sweep_table

    out, _ = _consoles()
    queue = _queue(args)
    columns, rows = sweep_table(queue.jobs(ids=queue.resolve(args.ids)))
    if args.json:
        print(json.dumps([{c: r.get(c) for c in columns} for r in rows], indent=2))
        return 0
    if args.csv:
        w = csv.writer(sys.stdout, lineterminator="\n")
        w.writerow(columns)
        for r in rows:
            w.writerow(["" if r.get(c) is None else _cell(r.get(c), exact=True) for c in columns])
        return 0
    # On screen: the columns that differ between the jobs (the name is in `list`); the ones
    # every job shares on one line below; turned on its side when too wide for the terminal.
    shown = [c for c in columns if c == "id" or (c != "name" and len({_cell(r.get(c)) for r in rows}) > 1)]
    same = [c for c in columns if c not in shown and c != "name"]
    cells = [[_cell(r.get(c)) for c in shown] for r in rows]
    wide = sum(max([len(c)] + [len(x[i]) for x in cells]) for i, c in enumerate(shown)) + GAP * (len(shown) - 1)
    table = Table(box=None, pad_edge=False)
    if wide <= out.width or len(rows) > 12:
        for c in shown:
            table.add_column(escape(c), justify="left" if c == "state" else "right", no_wrap=True)
        for x in cells:
            table.add_row(*map(escape, x))
    else:
        table.add_column("job", no_wrap=True)
        for x in cells:
            table.add_column(escape(x[0]), justify="right", no_wrap=True)
        for i, c in enumerate(shown[1:], start=1):
            table.add_row(escape(c), *(escape(x[i]) for x in cells))
    out.print(table)
    if same and rows:
        out.print("the same in every job: " + ", ".join(f"{escape(c)} {escape(_cell(rows[0].get(c)))}" for c in same),
                  soft_wrap=False)
    done = sum(r["state"] == "done" for r in rows)
    out.print(f"{done} of {len(rows)} jobs done; every column at full precision: --csv")
    return 0


def _cell(value: Any, exact: bool = False) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return repr(value) if exact else f"{value:.6g}"
    if isinstance(value, (dict, list)):
        return json.dumps(value, separators=(",", ":"))
    return str(value)


# ---------------------------------------------------------------- worker
def _worker(args: argparse.Namespace) -> int:
    from .worker import Worker, WorkerOptions

    out, _ = _consoles()
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
    ls.set_defaults(func=_list)

    sh = sub.add_parser("show", parents=[home], help="one job: spec, timings, solver summary, error, history")
    sh.add_argument("id", type=int)
    sh.set_defaults(func=_show)

    w = sub.add_parser("watch", parents=[home], help="follow a job's residual until it ends")
    w.add_argument("id", type=int)
    w.add_argument("--interval", type=float, default=0.5, help="seconds between looks (default 0.5)")
    w.add_argument("--lines", action="store_true", help="print lines instead of a live view")
    w.set_defaults(func=_watch)

    lg = sub.add_parser("log", parents=[home], help="a job's residual history")
    lg.add_argument("id", type=int)
    lg.add_argument("--csv", action="store_true", help="comma-separated: iteration,relative_residual,seconds")
    lg.set_defaults(func=_log)

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
                   help="delete their results too (with the residual log, probe table and run record)")
    f.set_defaults(func=_forget)

    t = sub.add_parser("table", parents=[home],
                       help="a sweep's parameters against its results' numbers (IDs or b<number>)")
    t.add_argument("ids", nargs="+", metavar="ID", help="batch ids (b<number>) or job ids")
    form = t.add_mutually_exclusive_group()
    form.add_argument("--csv", action="store_true", help="comma-separated, every number at full precision")
    form.add_argument("--json", action="store_true", help="a JSON array, one object per job")
    t.set_defaults(func=_table)

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
