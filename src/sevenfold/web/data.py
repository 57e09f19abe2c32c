"""What the web view reads: the queue database (read-only), residual logs and finished results.

Nothing here writes a file or the database: the database is opened with SQLite's
``mode=ro`` (in WAL mode a reader never blocks the queue's writers), residual logs are
followed by byte offset, and figures are drawn into memory. Caches are bounded, so a view
left running for weeks keeps a fixed footprint.
"""

from __future__ import annotations

import io
import json
import math
import os
import threading
import time
from collections import OrderedDict, deque
from pathlib import Path
from typing import Any

from ..queue.db import Queue
from ..queue.home import Home, Timing
from ..queue.records import Job
from ..queue.watch import RATE_WINDOW, Progress, describe, estimate
from ..residual_log import log_path

MAX_POINTS = 1000  # residual points kept per log and sent per plot; thinned by stride beyond
MAX_LOGS = 256  # residual logs followed at once (least recently used dropped)
MAX_RESULTS = 64  # finished results whose summaries are kept
MAX_FIGURES = 16  # PNGs kept in memory


class NoQueue(Exception):
    """The queue home or its database is not there (yet)."""


class NotFound(Exception):
    """No job or batch with that id."""


class Reader:
    """Read-only connections to one queue home, one per thread; reopened when the file is replaced.

    ``sevenfold demo`` replaces a queue's database; a connection to the old file would go on
    showing the old queue, so the file's inode is checked on each use.
    """

    def __init__(self, root: Path) -> None:
        self.home = Home(Path(root))
        self.timing = Timing.from_env()
        self._local = threading.local()

    def queue(self) -> Queue:
        try:
            inode = os.stat(self.home.db).st_ino
        except FileNotFoundError:
            if not self.home.root.is_dir():
                raise NoQueue(f"there is no queue home at {str(self.home.root)!r}: the folder does not exist. "
                              "Start the view with --home naming the folder the jobs were submitted to") from None
            raise NoQueue(f"the queue home {str(self.home.root)!r} has no queue yet (no queue.db); "
                          "the page fills in once a job is submitted there") from None
        local = self._local
        if getattr(local, "queue", None) is not None and local.inode == inode:
            return local.queue
        if getattr(local, "queue", None) is not None:
            local.queue.close()
            local.queue = None
        from ..errors import QueueError

        try:
            local.queue = Queue(self.home, self.timing, readonly=True)
        except QueueError as exc:
            raise NoQueue(str(exc)) from None
        local.inode = inode
        return local.queue

    def job(self, job_id: int) -> Job:
        found = self.queue().jobs(ids=[job_id])
        if not found:
            raise NotFound(f"there is no job {job_id} in the queue at {str(self.home.root)!r}")
        return self.queue().get(job_id)


# ---------------------------------------------------------------- residual logs
class LogFollower:
    """One residual log read incrementally: new complete lines only, corrupt lines skipped.

    Keeps the start record, the end record, the last :data:`RATE_WINDOW` + 1 residuals (for
    the rate) and at most :data:`MAX_POINTS` points of the whole history: iterations that are
    multiples of ``stride``, which doubles whenever the points would exceed the cap.
    """

    def __init__(self, path: Path) -> None:
        self.path = path
        self.lock = threading.Lock()
        self._reset(None)

    def _reset(self, inode: int | None) -> None:
        self.inode = inode
        self.offset = 0
        self.mtime = 0.0
        self.starts = 0
        self.skipped = 0
        self._clear_run()

    def _clear_run(self) -> None:
        self.started: dict[str, Any] | None = None
        self.ended: dict[str, Any] | None = None
        self.stride = 1
        self.points: list[tuple[int, float]] = []
        self.tail: deque[tuple[int, float, float]] = deque(maxlen=RATE_WINDOW + 1)
        self.switches: list[dict[str, Any]] = []  # auto's switches of method (residual_log.py)

    def update(self) -> None:
        """Read what was appended since the last look (the log may be replaced by a new run)."""
        try:
            st = os.stat(self.path)
        except FileNotFoundError:
            self._reset(None)
            return
        if st.st_ino != self.inode or st.st_size < self.offset:
            self._reset(st.st_ino)
        self.mtime = st.st_mtime
        if st.st_size == self.offset:
            return
        with open(self.path, "rb") as fh:
            fh.seek(self.offset)
            chunk = fh.read(st.st_size - self.offset)
        end = chunk.rfind(b"\n")
        if end < 0:
            return  # a line still being written
        self.offset += end + 1
        for line in chunk[:end].split(b"\n"):
            self._record(line)

    def _record(self, line: bytes) -> None:
        try:
            rec = json.loads(line)
            if not isinstance(rec, dict):
                raise ValueError
            if rec.get("event") == "start":
                self._clear_run()
                self.started = rec
                self.starts += 1
            elif rec.get("event") == "end":
                self.ended = rec
            elif rec.get("event") == "switch":  # the new method counts its iterations from 0
                self.switches.append(rec)
                self.tail.clear()
            elif "iteration" in rec:
                it, r, s = int(rec["iteration"]), float(rec["relative_residual"]), float(rec.get("seconds", 0.0))
                self.tail.append((it, r, s))
                if it % self.stride == 0:
                    self.points.append((it, r))
                    if len(self.points) > MAX_POINTS:
                        self.stride *= 2
                        self.points = [p for p in self.points if p[0] % self.stride == 0]
            else:
                raise ValueError
        except (ValueError, TypeError, KeyError, json.JSONDecodeError):
            self.skipped += 1

    def progress(self) -> Progress:
        """What :mod:`sevenfold.queue.watch` reads from a log, for the last few iterations."""
        tail = list(self.tail)
        first = tail[0][0] if tail else 0
        return Progress(self.started, [t[1] for t in tail], [t[2] for t in tail], self.ended, first,
                        switches=tuple(self.switches))


class Logs:
    """The followers of the logs the pages look at, least recently used dropped past a cap."""

    def __init__(self) -> None:
        self._lock = threading.Lock()
        self._followers: OrderedDict[Path, LogFollower] = OrderedDict()

    def follower(self, output: str | Path) -> LogFollower:
        path = log_path(Path(output))
        with self._lock:
            f = self._followers.get(path)
            if f is None:
                f = self._followers[path] = LogFollower(path)
            self._followers.move_to_end(path)
            while len(self._followers) > MAX_LOGS:
                self._followers.popitem(last=False)
        return f

    def snapshot(self, job: Job, after: int = -1, run: str | None = None,
                 points: bool = True) -> dict[str, Any]:
        """A job's solve so far: last iteration and residual, rate, iterations and seconds left,
        and (``points``) the plot's points after iteration ``after`` of run ``run``.

        A log written before the job's current run started belongs to an earlier run and is
        ignored (as ``show`` and ``watch`` do). When ``run`` is not the current run, every
        point is sent and the page starts its plot again.
        """
        empty = {"run": None, "iteration": None, "residual": None, "rate": None, "left": None,
                 "eta_seconds": None, "rtol": None, "text": None, "ended": None, "skipped": 0,
                 "stride": 1, "reset": True, "points": [], "last": None}
        if job.state == "queued":
            return empty
        f = self.follower(job.output)
        with f.lock:
            f.update()
            if f.inode is None or (job.started is not None and f.mtime < job.started - 1.0):
                return empty
            p = f.progress()
            key = f"{f.inode}-{f.starts}"
            reset = run != key
            out = dict(empty, run=key, reset=reset, skipped=f.skipped, stride=f.stride, rtol=p.rtol,
                       ended=f.ended)
            if p.history:
                r = p.history[-1]
                e = estimate(p)
                out.update(iteration=p.iteration, residual=r, rate=e.factor, left=e.left,
                           eta_seconds=e.seconds, last=[p.iteration, r])
            out["text"] = describe(p)
            if points:
                since = -1 if reset else after
                out["points"] = [[i, r] for i, r in f.points if i > since and math.isfinite(r)]
        return out


# ---------------------------------------------------------------- finished results
def _result_key(output: str) -> tuple[str, float] | None:
    try:
        return output, os.stat(Path(output) / "zarr.json").st_mtime
    except OSError:
        return None


class Results:
    """Summaries of finished results (balance, probes) and their figures, cached by file time."""

    def __init__(self) -> None:
        self._lock = threading.Lock()
        self._draw = threading.Lock()  # pyplot is not thread-safe
        self._info: OrderedDict[tuple[str, float], dict[str, Any]] = OrderedDict()
        self._figures: OrderedDict[tuple[str, float, str], bytes] = OrderedDict()
        self._extrema: OrderedDict[tuple[str, float], tuple[float, float]] = OrderedDict()

    @staticmethod
    def _remember(cache: OrderedDict, key: Any, value: Any, cap: int) -> Any:
        cache[key] = value
        cache.move_to_end(key)
        while len(cache) > cap:
            cache.popitem(last=False)
        return value

    def info(self, output: str) -> dict[str, Any] | None:
        """Balance rows, probe values, line probes and the solution's name; None if incomplete."""
        key = _result_key(output)
        if key is None:
            return None
        with self._lock:
            if key in self._info:
                self._info.move_to_end(key)
                return self._info[key]
        from ..balance import balance_rows
        from ..errors import JobError
        from ..export import open_result

        try:
            result = open_result(output)
        except JobError:
            return None
        balance = result.attrs.get("balance")
        solution = result.solution
        points, lines = [], []
        for p in result.spec.probe:
            if p.point is not None:
                points.append({"name": p.name, "at": list(p.point),
                               "value": float(result.group[f"probe_{p.name}"][0])})
            elif p.line is not None:
                lines.append(p.name)
        info = {
            "solution": solution,
            "units": result.units(solution),
            "balance": None if not balance else {
                "units": balance.get("units", ""),
                "rows": [[label, value] for label, value in balance_rows(balance)],
                "relative_imbalance": balance.get("relative_imbalance"),
            },
            "probe_points": points,
            "probe_lines": lines,
            "line_maxima": {p["name"]: p["max"] for p in result.attrs.get("probes", []) if p.get("kind") == "line"},
            "figures": ["slices"] + (["probes"] if lines else []),
        }
        with self._lock:
            return self._remember(self._info, key, info, MAX_RESULTS)

    def extrema(self, output: str) -> tuple[float, float] | None:
        """(min, max) of the solution, read slab by slab (never the whole field at once)."""
        key = _result_key(output)
        info = self.info(output)
        if key is None or info is None:
            return None
        with self._lock:
            if key in self._extrema:
                return self._extrema[key]
        import numpy as np
        import zarr

        arr = zarr.open_group(store=output, mode="r")[info["solution"]]
        step = max(1, arr.chunks[0])
        lo, hi = math.inf, -math.inf
        for i in range(0, arr.shape[0], step):
            slab = np.asarray(arr[i:i + step])
            lo, hi = min(lo, float(slab.min())), max(hi, float(slab.max()))
        with self._lock:
            return self._remember(self._extrema, key, (lo, hi), MAX_RESULTS)

    def figure(self, output: str, kind: str) -> bytes | None:
        """A PNG of the result: ``slices`` (mid-planes) or ``probes`` (line probes), by report.py."""
        key = _result_key(output)
        info = self.info(output)
        if key is None or info is None or kind not in info["figures"]:
            return None
        fkey = (*key, kind)
        with self._lock:
            if fkey in self._figures:
                return self._figures[fkey]
        from ..export import open_result
        from ..report import probe_figure, slice_figure

        draw = {"slices": slice_figure, "probes": probe_figure}[kind]
        buf = io.BytesIO()
        with self._draw:
            draw(open_result(output), buf)
        with self._lock:
            return self._remember(self._figures, fkey, buf.getvalue(), MAX_FIGURES)


def now() -> float:
    return time.time()
