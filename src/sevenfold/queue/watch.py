"""Following a solve: convergence rate, iterations left to rtol, a terminal residual plot.

The rate is the geometric mean reduction of the relative residual per iteration over the
last :data:`RATE_WINDOW` iterations, ``(r_n / r_{n-w})^(1/w)``; the iterations left to reach
``rtol`` at that rate are ``log(rtol / r_n) / log(rate)``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Sequence

from ..residual_log import log_path, read_log

RATE_WINDOW = 5  # iterations


def rate(history: Sequence[float], window: int = RATE_WINDOW) -> float | None:
    """Mean reduction factor per iteration over the last ``window`` iterations (None if unknown)."""
    w = min(window, len(history) - 1)
    if w < 1:
        return None
    new, old = history[-1], history[-1 - w]
    if not (new > 0 and old > 0 and math.isfinite(new) and math.isfinite(old)):
        return None
    return (new / old) ** (1.0 / w)


def remaining(residual: float, rtol: float, factor: float | None) -> int | None:
    """Iterations still needed at ``factor`` per iteration to bring ``residual`` to ``rtol``."""
    if residual <= rtol:
        return 0
    if factor is None or not 0 < factor < 1:
        return None
    return math.ceil(math.log(rtol / residual) / math.log(factor))


def plot(history: Sequence[float], width: int = 60, height: int = 8) -> list[str]:
    """An ASCII plot of log10(relative residual) against iteration, ``height`` rows tall."""
    values = [(i, math.log10(r)) for i, r in enumerate(history) if r > 0 and math.isfinite(r)]
    if not values:
        return []
    n = len(history)
    cols = min(width, n)
    # each column shows the last iteration that falls in it
    column_value: dict[int, float] = {}
    for i, v in values:
        column_value[min(cols - 1, i * cols // n)] = v
    top = math.ceil(max(v for _, v in values))
    bottom = math.floor(min(v for _, v in values))
    if top == bottom:
        top += 1
    rows = [[" "] * cols for _ in range(height)]
    for c, v in column_value.items():
        r = round((top - v) / (top - bottom) * (height - 1))
        rows[min(height - 1, max(0, r))][c] = "*"
    lines = []
    for r, row in enumerate(rows):
        level = top - (top - bottom) * r / (height - 1)
        label = f"1e{level:+.0f}" if r in (0, height - 1) or r == (height - 1) // 2 else ""
        lines.append(f"{label:>6} |" + "".join(row))
    lines.append(" " * 7 + "+" + "-" * cols)
    lines.append(" " * 8 + f"iteration 0 .. {n - 1}")
    return lines


@dataclass(frozen=True)
class Progress:
    """What a residual log says about a solve so far.

    ``history`` and ``seconds`` are those of the method now solving: after a switch of
    ``auto`` (gmg to amg) they start again at iteration 0, as the solver summary counts them.
    ``switches`` holds the switch records, ``rows`` every iteration record (with its method)
    and switch record since the start, in order.
    """

    started: dict[str, Any] | None
    history: list[float]
    seconds: list[float]
    ended: dict[str, Any] | None
    first: int = 0  # the iteration of history[0]: a viewer may keep only the last few
    switches: tuple[dict[str, Any], ...] = ()
    rows: tuple[dict[str, Any], ...] = ()

    @property
    def iteration(self) -> int | None:
        return self.first + len(self.history) - 1 if self.history else None

    @property
    def method(self) -> str | None:
        """The method now solving (the last switch's target, else the one the log started with)."""
        if self.switches:
            return self.switches[-1].get("to")
        return None if self.started is None else self.started.get("method")

    @property
    def rtol(self) -> float | None:
        return None if self.started is None else self.started.get("rtol")


def read_progress(output: str | Path, since: float | None = None) -> Progress:
    """The residual log beside ``output``; a log older than ``since`` (Unix s) is ignored."""
    path = log_path(Path(output))
    try:
        if since is not None and path.stat().st_mtime < since - 1.0:
            return Progress(None, [], [], None)
        records = list(read_log(path))
    except FileNotFoundError:
        return Progress(None, [], [], None)
    started = ended = None
    history: list[float] = []
    seconds: list[float] = []
    switches: list[dict[str, Any]] = []
    rows: list[dict[str, Any]] = []
    for rec in records:
        if rec.get("event") == "start":
            started, history, seconds, ended, switches, rows = rec, [], [], None, [], []
        elif rec.get("event") == "end":
            ended = rec
        elif rec.get("event") == "switch":
            switches.append(rec)
            rows.append(rec)
            history, seconds = [], []
        elif "iteration" in rec:
            history.append(float(rec["relative_residual"]))
            seconds.append(float(rec.get("seconds", 0.0)))
            rows.append(rec)
    return Progress(started, history, seconds, ended, switches=tuple(switches), rows=tuple(rows))


def switch_text(switch: dict[str, Any]) -> str:
    """One line saying where and why ``auto`` changed method."""
    return (f"auto switched from {switch.get('from')} to {switch.get('to')} after "
            f"{switch.get('after_iterations')} {switch.get('from')} iterations: {switch.get('reason', '')}").rstrip(": ")


def log_lines(p: Progress, csv: bool = False) -> list[str]:
    """The residual history as ``log`` prints it: one row per iteration (numbered per method,
    with the method), and in the text form a marked row at each switch of method (the CSV form
    keeps uniform rows: its method column changes there)."""
    method = None if p.started is None else p.started.get("method")
    out = ["iteration,relative_residual,seconds,method"] if csv else [
        f"{'iteration':>9}  {'relative residual':>17}  {'seconds':>9}  method"]
    for rec in p.rows:
        if rec.get("event") == "switch":
            method = rec.get("to")
            if not csv:
                out.append(f"{'-' * 9}  {switch_text(rec)}")
            continue
        m = rec.get("method", method) or ""
        r, s = float(rec["relative_residual"]), float(rec.get("seconds", 0.0))
        out.append(f"{rec['iteration']},{r!r},{s!r},{m}" if csv else f"{rec['iteration']:9d}  {r:17.6e}  {s:9.3f}  {m}")
    return out


def describe(p: Progress) -> str:
    """One line: iteration, residual, rate and what is left."""
    if not p.history:
        if p.switches:
            return f"{switch_text(p.switches[-1])}; now {p.method}: setting up"
        return "building the problem and the preconditioner" if p.started is None else "solving"
    r = p.history[-1]
    parts = [f"iteration {p.iteration}", f"relative residual {r:.3e}"]
    if p.switches:
        parts.insert(0, f"{switch_text(p.switches[-1])}; now {p.method}")
    f = rate(p.history)
    if f is not None:
        parts.append(f"rate {f:.3f} per iteration")
    if p.rtol is not None:
        left = remaining(r, p.rtol, f)
        if left is None and f is not None:
            parts.append(f"not approaching rtol {p.rtol:.0e} at this rate")
        elif left is not None and left > 0:
            per = seconds_per_iteration(p)
            eta = f", about {left * per:.0f} s" if per is not None else ""
            parts.append(f"about {left} more to rtol {p.rtol:.0e}{eta}")
    return ", ".join(parts)


def seconds_per_iteration(p: Progress) -> float | None:
    """Mean seconds per iteration over the last :data:`RATE_WINDOW` iterations."""
    w = min(RATE_WINDOW, len(p.seconds) - 1)
    if w < 1:
        return None
    return (p.seconds[-1] - p.seconds[-1 - w]) / w
