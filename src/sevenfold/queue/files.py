"""Files the queue keeps beside results and in its home: run records, snapshots, partials.

The run record ``<stem>.runs.jsonl`` beside a result gets one line when a queued run of it
starts and one when that run's result is complete (``{"event": "start" | "done", "job",
"run", "attempt", ...}``; ``"not converged"`` when the run failed but kept its unconverged
result), so how many times a result was made can be counted from the result's own folder,
whatever the database says.
"""

from __future__ import annotations

import glob
import hashlib
import json
import os
import shutil
import time
import uuid
from pathlib import Path
from typing import Any


def runs_path(output: Path) -> Path:
    """The run record beside an output: ``results/a.zarr`` -> ``results/a.runs.jsonl``."""
    return output.with_name(output.stem + ".runs.jsonl")


def append_run(output: Path, record: dict[str, Any]) -> None:
    """Append one line to the output's run record and flush it to disk (OutputError if not)."""
    from ..errors import writing

    path = runs_path(output)
    with writing(path, "the run record"):
        path.parent.mkdir(parents=True, exist_ok=True)
        with open(path, "a", encoding="utf-8") as fh:
            fh.write(json.dumps(record) + "\n")
            fh.flush()
            os.fsync(fh.fileno())


def read_runs(output: Path) -> list[dict[str, Any]]:
    """The run record's complete lines (none when there is no record)."""
    try:
        text = runs_path(output).read_text(encoding="utf-8")
    except FileNotFoundError:
        return []
    return [json.loads(line) for line in text.splitlines(keepends=True) if line.endswith("\n")]


def write_text_atomic(path: Path, text: str) -> None:
    """Write ``text`` to ``path`` through a synced temporary sibling and a rename."""
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.tmp-{uuid.uuid4().hex[:8]}")
    try:
        with open(tmp, "w", encoding="utf-8") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


def pid_alive(pid: int) -> bool:
    """True when a process ``pid`` runs on this machine (a zombie, dead but not reaped, does not)."""
    if pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    try:
        with open(f"/proc/{pid}/stat", encoding="ascii", errors="replace") as fh:
            state = fh.read().rsplit(")", 1)[1].split()[0]
        return state not in ("Z", "X")
    except (OSError, IndexError):
        return True


def remove_partials(output: Path) -> list[Path]:
    """Remove the hidden half-written siblings of ``output`` whose writing process is gone.

    ``store.partial_path`` names them ``.<name>.partial-<pid>-<hex>``; one whose process
    still lives may belong to another run writing the same output and is left alone.
    """
    prefix = f".{output.name}.partial-"
    removed = []
    for p in output.parent.glob(glob.escape(prefix) + "*"):
        owner = p.name[len(prefix):].split("-", 1)[0]
        if not owner.isdecimal() or pid_alive(int(owner)):
            continue
        if p.is_dir():
            shutil.rmtree(p, ignore_errors=True)
        else:
            p.unlink(missing_ok=True)
        removed.append(p)
    return removed


def content_hash(path: Path) -> str:
    """SHA-256 of a file, or of a folder's relative paths and file contents (zarr arrays)."""
    h = hashlib.sha256()

    def feed(f: Path) -> None:
        with open(f, "rb") as fh:
            for block in iter(lambda: fh.read(1 << 20), b""):
                h.update(block)

    if path.is_dir():
        for root, dirs, files in os.walk(path):
            dirs.sort()
            for name in sorted(files):
                f = Path(root) / name
                h.update(f.relative_to(path).as_posix().encode() + b"\0")
                feed(f)
                h.update(b"\0")
    else:
        feed(path)
    return h.hexdigest()


def snapshot_input(src: Path, inputs: Path) -> tuple[Path, str]:
    """Copy a file or folder into ``inputs/<sha256>/<name>`` once; returns (copy, sha256).

    The copy is made under a temporary name and renamed into place, so a copy that exists
    is complete; identical contents under the same name are stored once.
    """
    digest = content_hash(src)
    folder = inputs / digest[:32]
    final = folder / src.name
    if final.exists():
        _touch(final)
        return final, digest
    folder.mkdir(parents=True, exist_ok=True)
    tmp = folder / f".tmp-{uuid.uuid4().hex[:8]}-{src.name}"
    try:
        if src.is_dir():
            shutil.copytree(src, tmp)
        else:
            shutil.copy2(src, tmp)
        try:
            os.rename(tmp, final)
        except OSError:
            if not final.exists():  # another submit may have stored the same content first
                raise
        _touch(final)
    finally:
        if tmp.is_dir():
            shutil.rmtree(tmp, ignore_errors=True)
        else:
            tmp.unlink(missing_ok=True)
    return final, digest


# A snapshot used this recently may belong to a submit still validating its other files
# (snapshots are made before the jobs enter the database), so forget leaves it alone.
INPUT_GRACE = 600.0  # s


def _touch(path: Path) -> None:
    """Mark a snapshot as just used (its mtime; copy2 keeps the original's)."""
    try:
        os.utime(path)
    except OSError:
        pass


def remove_unused_inputs(snapshots: list[str], in_use: set[str], inputs: Path) -> list[Path]:
    """Remove the folders (``inputs/<sha256>/``) of the input snapshots among ``snapshots``
    that no job refers to (``in_use``) and that were not used in the last
    :data:`INPUT_GRACE` seconds; returns the folders removed."""
    removed = []
    for folder in dict.fromkeys(Path(s).parent for s in snapshots):
        if folder.parent != inputs or not folder.is_dir():
            continue
        try:
            copies = list(folder.iterdir())
            recent = any(time.time() - p.stat().st_mtime < INPUT_GRACE for p in copies)
        except OSError:
            continue
        if recent or any(str(p) in in_use for p in copies):
            continue
        shutil.rmtree(folder, ignore_errors=True)
        removed.append(folder)
    return removed


def beside(output: Path) -> list[Path]:
    """The files sevenfold writes beside a result: residual log, probe table, run record
    (names as in ``residual_log.log_path``, ``runner.probes_csv_path`` and :func:`runs_path`)."""
    from ..residual_log import log_path

    return [log_path(output), output.with_name(output.stem + ".probes.csv"), runs_path(output)]


def not_written_by(output: Path, job_id: int, run_id: str | None, queue_root: Path) -> str | None:
    """Why the result at ``output`` is not the one queue job ``job_id`` wrote in its last run
    ``run_id``, or None when it is. The result's ``queue`` attribute (set by
    :func:`.child.run_recorded`: job, run, ...) must name both; a result without one
    (``sevenfold run --here``, another program) is never taken for the job's."""
    from ..store import read_attrs

    record = read_attrs(output).get("queue")
    if not isinstance(record, dict):
        return "not written by this job: written outside the queue"
    where = record.get("queue")
    if isinstance(where, str) and Path(where) != queue_root:
        return f"not written by this job: written by job {record.get('job')} of the queue in {where}"
    if record.get("job") != job_id:
        return f"not written by this job: written by job {record.get('job')}"
    if run_id is None or record.get("run") != run_id:
        return "not written by this job's last run"
    return None


def delete_result(output: Path) -> list[Path]:
    """Delete a result and the files beside it; returns what existed and was removed.

    The result is first renamed to a hidden sibling, so a deletion cut short never leaves
    something that looks like a finished result at ``output``.
    """
    removed = []
    if output.exists():
        gone = output.with_name(f".{output.name}.deleted-{uuid.uuid4().hex[:8]}")
        os.rename(output, gone)
        if gone.is_dir():
            shutil.rmtree(gone, ignore_errors=True)
        else:
            gone.unlink(missing_ok=True)
        removed.append(output)
    for p in beside(output):
        if p.exists():
            p.unlink()
            removed.append(p)
    return removed
