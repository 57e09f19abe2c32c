"""Submitting: validate a job file as the engine would, snapshot it, enter it in the queue.

A job is checked like ``sevenfold check`` does (spec, output path, regions, files, boundary
data), with two differences: the memory check only refuses jobs larger than the machine's
physical memory (whether one fits beside others is for the worker, ``worker --memory``), and a job of more than :data:`FULL_CHECK_CELLS` cells is checked as far
as its spec and the presence of the files it names, so a sweep of large jobs does not build
every problem at submit time; the rest is checked when it starts.

The snapshot is the job file's text and table as submitted, with the files it names
(``material.file``, ``source.file``, ``grid.edges.<axis>`` files) copied into ``<home>/inputs/<sha256>/`` and the table
pointing at the copies, so later edits of the file or its inputs do not change a queued job.
The output path is resolved against the job file's folder at submit time.
"""

from __future__ import annotations

import copy
import dataclasses
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Sequence

from ..errors import JobError
from .actions import one_writer_each
from .db import DEFAULT_MAX_ATTEMPTS, Queue
from .records import Job, NewBatch, NewJob
from .files import snapshot_input
from .home import Home
from .sweep import Variant, expand

FULL_CHECK_CELLS = 4_000_000
def file_references(table: dict[str, Any]) -> list[tuple[str, Any, Any]]:
    """Every input file a job table names, as (key, container, index): ``material.file`` and
    ``source.file`` (a path, or one per direction), and ``grid.edges.<axis>`` given as a path."""
    out: list[tuple[str, Any, Any]] = []
    for key in ("material", "source"):
        sub = table.get(key)
        if not isinstance(sub, dict):
            continue
        given = sub.get("file")
        if isinstance(given, str):
            out.append((f"{key}.file", sub, "file"))
        elif isinstance(given, list):
            out += [(f"{key}.file.{i}", given, i) for i, v in enumerate(given) if isinstance(v, str)]
    edges = table.get("grid", {}).get("edges") if isinstance(table.get("grid"), dict) else None
    if isinstance(edges, dict):
        out += [(f"grid.edges.{a}", edges, a) for a in "xyz" if isinstance(edges.get(a), str)]
    return out


@dataclass(frozen=True)
class Prepared:
    """The jobs one job file stands for, validated (:func:`check`) and, once
    :func:`snapshotted`, naming the copies of their inputs in the queue home."""

    job_file: Path
    jobs: list[NewJob]
    batch: NewBatch | None


def _read(job_file: Path) -> tuple[str, dict[str, Any]]:
    """The job file's text and its table, from one unchanging content (engine's messages)."""
    from ..spec import read_job_table

    for _ in range(3):
        try:
            before = job_file.read_bytes()
        except OSError:
            before = None
        table = read_job_table(job_file)  # refuses missing, unreadable and malformed files
        try:
            after = job_file.read_bytes()
        except OSError:
            continue
        if before == after:
            return after.decode("utf-8"), table
    raise JobError("the file keeps changing while it is read; submit it again", source=str(job_file))


def _check(variant: Variant, job_file: Path, source: str, output: str | Path | None = None,
           build: bool = True):
    """Validate one job table through the engine; returns its plan. ``build=False`` stops
    at the spec and plan (what the worker's run finds later fails the job there)."""
    from ..memory import total_bytes
    from ..runner import plan_job, prepare_problem, refuse_if_too_large
    from ..spec import parse_job

    spec = parse_job(variant.table, source)
    plan = plan_job(job_file, output, spec=spec)
    # Whether it fits now is the worker's question; one larger than the machine never will.
    refuse_if_too_large(dataclasses.replace(plan, available_bytes=total_bytes()))
    if build and plan.cells <= FULL_CHECK_CELLS:
        # The memory check belongs to the worker that will run the job, not to this machine now.
        settled, _ = prepare_problem(dataclasses.replace(plan, available_bytes=2**62))
        plan = dataclasses.replace(settled, available_bytes=plan.available_bytes)  # fft known now
    else:
        for key, container, index in file_references(variant.table):
            path = _resolve(container[index], job_file)
            if not path.exists():
                raise JobError(f"file {str(path)!r} does not exist", key, source)
    return plan


def _resolve(name: str, job_file: Path) -> Path:
    path = Path(name)
    return path if path.is_absolute() else job_file.parent / path


def _snapshot(table: dict[str, Any], job_file: Path, home: Home) -> tuple[dict[str, Any], list[dict[str, Any]]]:
    table = copy.deepcopy(table)
    inputs = []
    for key, container, index in file_references(table):
        original = _resolve(container[index], job_file).resolve()
        try:
            copy_path, digest = snapshot_input(original, home.inputs)
        except OSError as exc:
            raise JobError(f"cannot copy {str(original)!r} into the queue: {exc.strerror or exc}",
                           key, str(job_file)) from None
        container[index] = str(copy_path)
        inputs.append({"key": key, "original": str(original), "snapshot": str(copy_path), "sha256": digest})
    return table, inputs


def prepare(job_file: str | Path, home: Home, output: str | Path | None = None,
            build: bool = True) -> Prepared:
    """Validate and snapshot one job file (every combination of its sweep); JobError if bad.

    ``output`` overrides ``output.path`` as ``run --output`` does; ``build=False`` checks
    the spec and the plan but does not build the problem (see :func:`_check`).
    """
    return snapshotted(check(job_file, output, build), home)


def check(job_file: str | Path, output: str | Path | None = None, build: bool = True) -> Prepared:
    """Validate one job file as :func:`prepare` does, without a queue home: its jobs' tables
    still name the original input files (:func:`snapshotted` copies them)."""
    job_file = Path(job_file)
    source = str(job_file)
    text, table = _read(job_file)
    variants, info = expand(table, source)
    jobs: list[NewJob] = []
    outputs: dict[str, int | None] = {}
    for v in variants:
        job = _check_variant(v, job_file, text, output, build)
        if job.output in outputs:
            raise JobError(
                f"sweep combinations {outputs[job.output]} and {v.index} would both write {job.output!r}; "
                "put {name} in output.path so each combination gets its own result",
                "output.path", source)
        outputs[job.output] = v.index
        jobs.append(job)
    batch = None if info is None else NewBatch(os.path.abspath(job_file), info.mode, info.keys, info.size)
    return Prepared(job_file, jobs, batch)


def snapshotted(prepared: Prepared, home: Home) -> Prepared:
    """``prepared`` with the files its jobs name copied into ``home``'s input snapshots."""
    return dataclasses.replace(prepared, jobs=[_snapshot_job(j, home) for j in prepared.jobs])


def _snapshot_job(job: NewJob, home: Home) -> NewJob:
    table, inputs = _snapshot(job.job_table, Path(job.source), home)
    return dataclasses.replace(job, job_table=table, inputs=inputs)


def _check_variant(v: Variant, job_file: Path, text: str, output: str | Path | None = None,
                   build: bool = True) -> NewJob:
    """One combination validated; its table as it runs, before the snapshot of its inputs."""
    source = str(job_file)
    try:
        plan = _check(v, job_file, source, output, build)
    except JobError as exc:
        if v.index is None:
            raise
        raise JobError(f"{exc.reason} (sweep combination {v.index}: {v.label})",
                       exc.where, exc.source or source) from None
    run_table = copy.deepcopy(v.table)
    if output is not None:  # the table says where the result goes, as the run will write it
        run_table.setdefault("output", {})["path"] = str(plan.output)
    return NewJob(
        name=plan.spec.name, output=str(plan.output), source=os.path.abspath(job_file), job_text=text,
        job_table=run_table, inputs=[], cells=plan.cells, method=plan.method,
        memory_bytes=plan.memory_bytes, variant=v.values,
    )


def changes_since_submit(job: Job) -> list[str]:
    """What differs between a job's snapshot and its files on disk now ([] when nothing):
    the job file's text, and the content of each file it named (``material.file``, ...)."""
    from .files import content_hash

    source = Path(job.source)
    try:
        text = source.read_bytes().decode("utf-8", errors="replace")
    except OSError as exc:
        return [f"the job file {job.source} cannot be read now ({exc.strerror or exc})"]
    changed = []
    if job.job_text is not None and text != job.job_text:
        changed.append(f"the job file {job.source} changed")
    for i in job.inputs:
        try:
            same = content_hash(Path(i["original"])) == i["sha256"]
        except OSError:
            same = False
        if not same:
            changed.append(f"{i['key']} {i['original']} changed")
    return changed


def prepare_again(job: Job, home: Home) -> NewJob:
    """The job made afresh from its job file as it is now, validated like submit; a sweep
    job keeps its combination (the swept values it was queued with). JobError if refused."""
    job_file = Path(job.source)
    text, table = _read(job_file)
    variants, _ = expand(table, str(job_file))
    if job.variant is not None:
        chosen = [v for v in variants if v.values == job.variant]
        if not chosen:
            label = ", ".join(f"{k}={v!r}" for k, v in job.variant.items())
            raise JobError(f"the [sweep] no longer makes job {job.id}'s combination ({label}); "
                           "submit the file again for its new combinations", "sweep", str(job_file))
        return _snapshot_job(_check_variant(chosen[0], job_file, text), home)
    if len(variants) != 1 or variants[0].values is not None:
        raise JobError(f"the file now has a [sweep]; job {job.id} was a single job: submit the file again",
                       "sweep", str(job_file))
    return _snapshot_job(_check_variant(variants[0], job_file, text), home)


def check_all(job_files: Sequence[str | Path]) -> tuple[list[Prepared], list[JobError]]:
    """Every file checked (:func:`check`), and the refusals of the bad ones, among them two
    files that write one output; nothing is written anywhere."""
    done, errors = [], []
    for f in job_files:
        try:
            done.append(check(f))
        except JobError as exc:
            errors.append(exc)
    if not errors:
        try:
            one_writer_each(job for p in done for job in p.jobs)
        except JobError as exc:
            errors.append(exc)
    return done, errors


def enqueue(queue: Queue, prepared: Sequence[Prepared], priority: int = 0,
            time_limit: float | None = None, max_attempts: int = DEFAULT_MAX_ATTEMPTS) -> list[Job]:
    """Enter prepared jobs in one transaction; returns them with their ids."""
    rows = [(job, p.batch, i) for i, p in enumerate(prepared) for job in p.jobs]
    return queue.add(rows, priority, time_limit, max_attempts)


def submit(queue: Queue, job_files: Sequence[str | Path], priority: int = 0,
           time_limit: float | None = None, max_attempts: int = DEFAULT_MAX_ATTEMPTS) -> list[Job]:
    """Validate every file, then queue them all; a bad file raises its JobError, queuing nothing."""
    checked, errors = check_all(job_files)
    if errors:
        raise errors[0]
    return enqueue(queue, [snapshotted(p, queue.home) for p in checked], priority, time_limit, max_attempts)
