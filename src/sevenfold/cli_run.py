"""``sevenfold run``: a job solved in this process, or handed to an idle queue worker on this
machine (:mod:`sevenfold.queue.handoff`) and shown as a run here would be."""

from __future__ import annotations

import argparse
import math
from pathlib import Path

from rich.markup import escape

from .console import ProgressMonitor, err, out, print_run_end, quiet_result, run_progress
from .errors import EXIT_INPUT, EXIT_INTERRUPTED, EXIT_OK, EXIT_SOLVER


def run(args: argparse.Namespace) -> int:
    """``run``: by an idle worker when there is one (not with ``--here``), else in this process."""
    if not args.here:
        code = run_on_worker(args)
        if code is not None:
            return code
    from .memory import keep_freed_memory, keeps_freed_memory
    from .runner import plan_job, run_job

    plan = plan_job(args.job, args.output)
    if keeps_freed_memory(plan.cells):
        keep_freed_memory()
    with run_progress(disable=args.quiet or args.no_progress) as progress:
        task = progress.add_task(plan.spec.name, total=-math.log10(plan.spec.solver.rtol), info="building")
        monitor = ProgressMonitor(progress, task, plan.spec.solver.rtol, quiet=args.quiet)
        result = run_job(args.job, args.output, monitor, plan.spec,
                         on_warning=lambda text: (err if args.quiet else progress.console).print(
                             f"[yellow]warning:[/yellow] {escape(text)}", soft_wrap=True))
    if args.quiet:
        return quiet_result(result.output)
    print_run_end({**result.solve.summary(), "seconds": result.seconds},
                  None if result.balance is None else result.balance.to_dict(), result.headline,
                  result.output, result.probes_csv)
    return EXIT_OK


def run_on_worker(args: argparse.Namespace) -> int | None:
    """``run`` by an idle queue worker on this machine (:mod:`sevenfold.queue.handoff`), shown
    as a run in this process would be; None when there is no such worker."""
    from .queue.home import has_queue

    if not has_queue(args.home):  # no queue, no worker: the queue's modules stay unloaded
        return None
    from .queue.handoff import follow, hand_off
    from .runner import probes_csv_path
    from .store import read_attrs

    handed = hand_off(args.job, args.output, args.home)
    if handed is None:
        return None
    job = handed.job
    say = err if args.quiet else out
    with run_progress(disable=args.quiet or args.no_progress) as progress:
        task = progress.add_task(job.name, total=None, info=f"job {job.id} on worker {handed.worker}")
        monitor: ProgressMonitor | None = None
        switches = 0

        def on_progress(j, p) -> None:  # the residual log grew
            nonlocal monitor, switches
            if monitor is None and p.rtol:  # the solve's start record gives rtol
                monitor = ProgressMonitor(progress, task, p.rtol, quiet=args.quiet)
                progress.update(task, total=monitor.goal)
            if monitor is None:
                return
            if p.history:
                monitor.iteration(p.iteration, p.history[-1], 0.0)
            for sw in p.switches[switches:]:
                monitor.switched(sw)
            switches = len(p.switches)

        try:
            job = follow(handed, on_progress)
        except KeyboardInterrupt:
            handed.queue.cancel([job.id])
            err.print(f"interrupted; queue job {job.id} is cancelled (its worker stops it at the next "
                      "iteration); no result was written")
            return EXIT_INTERRUPTED
    if job is None:  # the worker went away before taking it
        say.print("the worker stopped before taking the job; running it here")
        return None
    attrs = read_attrs(Path(job.output)) if job.state != "cancelled" else {}
    for text in attrs.get("warnings") or []:
        say.print(f"[yellow]warning:[/yellow] {escape(text)}", soft_wrap=True)
    if job.state == "done":
        if args.quiet:
            return quiet_result(job.output)
        out.print(f"run by worker {escape(job.worker or handed.worker)} as queue job {job.id} "
                  "(--here runs it in this process)")
        print_run_end(job.summary or {}, attrs.get("balance"), attrs.get("headline"), Path(job.output),
                      probes_csv_path(Path(job.output)) if attrs.get("probes") else None)
        return EXIT_OK
    if job.state == "cancelled":
        err.print(f"cancelled: queue job {job.id}: {escape(job.error or '')}", soft_wrap=True)
        return EXIT_SOLVER
    kind = (job.summary or {}).get("failure")
    err.print(f"[red]error:[/red] {escape(job.error or 'failed')} (queue job {job.id})", soft_wrap=True)
    return EXIT_INPUT if kind in ("input", "os") else EXIT_SOLVER
