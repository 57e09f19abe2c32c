"""Following a solve: convergence rate, iterations left to rtol, a terminal residual plot.

CG's residual is not monotone: one iteration may rise above the ones before it. So progress
is measured on the best residual so far within the last :data:`RATE_WINDOW` iterations:
the rate is its mean reduction per iteration over the window, ``(best_n / r_{n-w})^(1/w)``,
and the iterations left to reach ``rtol`` are ``log(rtol / best_n) / log(rate)``. An estimate
is given only while progress is steady: the window's two halves both reduce the best residual,
at log-rates within a factor :data:`STEADY_SPREAD` of each other, and by more than
:data:`STALL_RATE` per iteration (a stall, a crawl, a jump or a burst after a plateau gives
none, rather than a wild number).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Sequence

from ..residual_log import log_path, read_log

RATE_WINDOW = 10  # iterations
STEADY_SPREAD = 4.0  # largest ratio of the log-rates of the window's two halves
MIN_WINDOW = 4  # fewer iterations give no estimate
STALL_RATE = 0.99  # a slower reduction per iteration counts as a stall


def _best_so_far(history: Sequence[float], window: int) -> list[float] | None:
    """The running minimum over the last ``window`` + 1 residuals (None if any is unusable)."""
    w = min(window, len(history) - 1)
    if w < 1:
        return None
    tail = history[-1 - w:]
    if not all(r > 0 and math.isfinite(r) for r in tail):
        return None
    best, out = math.inf, []
    for r in tail:
        best = min(best, r)
        out.append(best)
    return out


def rate(history: Sequence[float], window: int = RATE_WINDOW) -> float | None:
    """Mean reduction factor per iteration of the best residual over the last ``window``
    iterations (None if unknown)."""
    best = _best_so_far(history, window)
    if best is None:
        return None
    return (best[-1] / best[0]) ** (1.0 / (len(best) - 1))


def steady(history: Sequence[float], window: int = RATE_WINDOW) -> bool:
    """True when both halves of the last ``window`` iterations reduce the best residual, at
    log-rates within :data:`STEADY_SPREAD` of each other and faster than :data:`STALL_RATE`."""
    best = _best_so_far(history, window)
    if best is None or len(best) - 1 < MIN_WINDOW:
        return False
    w = len(best) - 1
    k = w // 2
    first = math.log(best[k] / best[0]) / k
    second = math.log(best[w] / best[k]) / (w - k)
    if not (first < math.log(STALL_RATE) and second < math.log(STALL_RATE)):
        return False
    return min(first, second) / max(first, second) <= STEADY_SPREAD  # both < 0: |faster| / |slower|


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


@dataclass(frozen=True)
class Estimate:
    """What is left of a solve: the rate per iteration over the window, the iterations and
    seconds to rtol (None when unknown, or when progress is not steady)."""

    factor: float | None
    left: int | None
    seconds: float | None


def estimate(p: Progress) -> Estimate:
    """The rate and what is left to rtol, from the last :data:`RATE_WINDOW` iterations."""
    factor = rate(p.history)
    if p.rtol is None or not p.history:
        return Estimate(factor, None, None)
    best = min(p.history[-1 - RATE_WINDOW:])
    left = 0 if best <= p.rtol else remaining(best, p.rtol, factor) if steady(p.history) else None
    per = seconds_per_iteration(p)
    return Estimate(factor, left, None if left is None or per is None else left * per)


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
    e = estimate(p)
    if e.factor is not None:
        parts.append(f"rate {e.factor:.3f} per iteration")
    if p.rtol is not None:
        w = min(RATE_WINDOW, len(p.history) - 1)
        if e.left is None and w >= MIN_WINDOW:
            parts.append(f"no steady progress over the last {w} iterations: no estimate to rtol {p.rtol:.0e}")
        elif e.left:
            eta = f", about {e.seconds:.0f} s" if e.seconds is not None else ""
            parts.append(f"about {e.left} more to rtol {p.rtol:.0e}{eta}")
    return ", ".join(parts)


def seconds_per_iteration(p: Progress) -> float | None:
    """Mean seconds per iteration over the last :data:`RATE_WINDOW` iterations."""
    w = min(RATE_WINDOW, len(p.seconds) - 1)
    if w < 1:
        return None
    return (p.seconds[-1] - p.seconds[-1 - w]) / w


def queue_position(ahead: int) -> str:
    """Where a queued job stands: ``next to run`` or ``2 jobs ahead``."""
    return "next to run" if ahead == 0 else f"{ahead} job{'s' if ahead != 1 else ''} ahead"
