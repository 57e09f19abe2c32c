"""The queue's commands that only look: list, show, watch, log and table (registered by
:func:`sevenfold.queue.commands.register`), and :func:`show_rows`, which the web view shares."""

from __future__ import annotations

import argparse
import csv
import io
import json
import sys
import time
from pathlib import Path
from typing import Any, Sequence

from rich.markup import escape
from rich.table import Table

from ..errors import QueueError
from .commands import PUBLIC_FIELDS, STATE_STYLE, clean_stale, consoles, duration, public, queue_of, ran_seconds
from .records import STATES, Job, stamp


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


def list_command(args: argparse.Namespace) -> int:
    out, _ = consoles()
    queue = queue_of(args)
    clean_stale(queue)
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
                     time.strftime("%m-%d %H:%M", time.localtime(j.submitted)), duration(ran_seconds(j, now)), result])
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


def show_command(args: argparse.Namespace) -> int:
    from ..store import is_complete
    from .tomlwrite import dumps
    from .watch import describe, read_progress

    out, _ = consoles()
    queue = queue_of(args)
    clean_stale(queue)
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
def watch_command(args: argparse.Namespace) -> int:
    from .watch import describe, plot, queue_position, read_progress, switch_text

    out, _ = consoles()
    queue = queue_of(args)
    job = queue.get(args.id)
    live_view = out.is_terminal and not args.lines

    def position(j: Job) -> str:
        ahead = [q for q in queue.jobs(state="queued") if (q.priority, -q.id) > (j.priority, -j.id)]
        return queue_position(len(ahead))

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
                clean_stale(queue)
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
def log_command(args: argparse.Namespace) -> int:
    from .watch import read_progress

    queue = queue_of(args)
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


# ---------------------------------------------------------------- table
def table_command(args: argparse.Namespace) -> int:
    from .results import sweep_table

    out, _ = consoles()
    queue = queue_of(args)
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
