"""A residual log: one JSON object per line, flushed as it is written, so another process
can follow a running solve.

Lines: ``{"event": "start", "method": m, ...}``, then ``{"iteration": i, "relative_residual": r,
"seconds": t, "method": m}`` per iteration, then ``{"event": "end", "converged": bool, ...}``.
When ``auto`` leaves one method for another mid-solve, a ``{"event": "switch", "from": "gmg",
"to": "amg", "after_iterations": n, "rate": q, "reason": ...}`` line marks the place; the
iterations after it are the new method's, counted from 0 again.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any, Iterator

from .errors import OutputError, writing


def log_path(output: Path) -> Path:
    """The residual log beside an output: ``results/a.zarr`` -> ``results/a.residuals.jsonl``."""
    return output.with_name(output.stem + ".residuals.jsonl")


class ResidualLog:
    """An open log; a failed write raises OutputError once, later writes are skipped (so
    recording a failure does not hide the first one)."""

    def __init__(self, path: Path) -> None:
        self.path = path
        self._failed = False
        with writing(path, "the residual log"):
            path.parent.mkdir(parents=True, exist_ok=True)
            self._fh = open(path, "w", encoding="utf-8")

    def _write(self, record: dict[str, Any]) -> None:
        if self._failed:
            return
        try:
            with writing(self.path, "the residual log"):
                self._fh.write(json.dumps(record) + "\n")
                self._fh.flush()
        except BaseException:
            self._failed = True
            raise

    def start(self, **info: Any) -> None:
        self._write({"event": "start", **info})

    def iteration(self, iteration: int, relative_residual: float, seconds: float, method: str | None = None) -> None:
        record: dict[str, Any] = {"iteration": iteration, "relative_residual": relative_residual, "seconds": seconds}
        if method is not None:
            record["method"] = method
        self._write(record)

    def switch(self, **info: Any) -> None:
        self._write({"event": "switch", **info})

    def end(self, **info: Any) -> None:
        self._write({"event": "end", **info})

    def close(self) -> None:
        try:
            with writing(self.path, "the residual log"):
                self._fh.close()
        except OutputError:
            if not self._failed:  # after a failed write, its error is the one that counts
                self._failed = True
                raise


def read_log(path: Path) -> Iterator[dict[str, Any]]:
    """The log's records; a last line still being written is skipped."""
    with open(path, encoding="utf-8") as fh:
        for line in fh:
            if not line.endswith("\n"):
                break
            try:
                yield json.loads(line)
            except json.JSONDecodeError:
                break
