"""The process that runs jobs for one worker slot: ``python -m sevenfold.queue.child``.

It warms the compiled kernels once (under a file lock in numba's cache, which every worker
and every `sevenfold run` of this install share, so only one process compiles them first),
says ``{"ready": pid}``, then reads one JSON request per line on stdin and answers one JSON
line per request on the stdout it was started with;
whatever the libraries print goes to stderr (the slot's log). Memory its jobs free stays
with the process for the next job (the worker's environment,
:func:`.child_process.slot_environment`); it is given back when no request came for
:data:`IDLE_RELEASE` s, and before a job whose estimate is smaller than what is held, so a
slot holds about what its job is admitted for. It dies with its worker (PR_SET_PDEATHSIG
on Linux, and a parent check every iteration elsewhere). SIGUSR1 asks the running solve to
stop at its next iteration.

The worker sets ``NUMBA_NUM_THREADS`` in its environment before numba is imported; nothing
numerical is imported at module level here.
"""

from __future__ import annotations

import argparse
import contextlib
import json
import os
import select
import signal
import sys
import tempfile
import time
import traceback
from pathlib import Path
from typing import Any, Callable, Iterator, TextIO

from ..errors import Cancelled, JobError, OutputError, SevenfoldError, SolverError, writing
from .files import append_run
from .home import Home

IDLE_RELEASE = 0.5  # s without a request before a slot gives back the memory it holds free

# Tiny jobs that touch every compiled kernel: each solver method once (on a problem every
# method accepts), and the boundary and hold paths of the assembly once more.
_WARM_BASE = {
    "grid": {"cells": [12, 12, 12], "size": [1.0, 1.0, 1.0]},
    "material": {"value": 1.0}, "source": {"value": 1.0},
    "boundary": {"x_min": {"type": "dirichlet", "value": 0.0}, "x_max": {"type": "dirichlet", "value": 1.0}},
}
_WARM_FACES = {
    "name": "warm-faces", "grid": {"cells": [4, 3, 5], "size": [1.0, 1.0, 1.0]},
    "material": {"value": 1.0}, "source": {"value": 1.0},
    "boundary": {"x_min": {"type": "dirichlet", "value": 0.0},
                 "x_max": {"type": "robin", "coefficient": 1.0, "reference": 1.0},
                 "y_min": {"type": "neumann", "flux": 1.0}},
    "hold": [{"box": {"min": [0.3, 0.3, 0.3], "max": [0.7, 0.7, 0.7]}, "value": 2.0}],
    "solver": {"method": "direct"},
}


# gmg's kernels on grids with smoothed levels and a coefficient jump that the line smoother
# sees, what most real jobs run: for each float type of the levels (a contrast of 100: float32;
# 1e5, past solvers/precision.py's FLOAT32_CONTRAST: float64, as for clay in sand) on a grid
# whose CG updates are threaded (48^3, above kernels/vector.py's PARALLEL_FROM) and on one
# whose are not (40^3)
_WARM_LEVELS = [
    {**_WARM_BASE, "name": f"warm-gmg-{n}-{contrast:g}", "grid": {"cells": [n, n, n], "size": [1.0, 1.0, 1.0]},
     "material": {"value": f"1 + {contrast - 1:g} * (z > 0.5)"}, "solver": {"method": "gmg", "rtol": 1e-6}}
    for contrast in (100, 1e5) for n in (48, 40)]


def warm_tables() -> list[dict[str, Any]]:
    """The warm-up jobs: gmg on grids with smoothed levels, one per solver method the spec knows,
    and one with every face type. The most kernels first: compiled on two cores
    (kernels/warmup.py)."""
    from ..spec import METHODS

    tables = [{**_WARM_BASE, "name": f"warm-{m}", "solver": {"method": m, "rtol": 1e-6}}
              for m in METHODS if m != "auto"]
    return [*_WARM_LEVELS, *tables, _WARM_FACES]


def _needs(tables: list[dict[str, Any]]) -> dict[str, frozenset[str]]:
    """Each method's kernel signatures that the warm-up jobs compile (runner.kernel_signatures;
    gmg's depend on the levels' float type, which the job's contrast decides)."""
    from ..problem import build_problem
    from ..runner import gmg_precision, kernel_signatures
    from ..spec import parse_job

    needs: dict[str, frozenset[str]] = {}
    for t in tables:
        m = t["solver"]["method"]
        precision = gmg_precision(build_problem(parse_job(t, "warm-up"))) if m == "gmg" else "float32"
        needs[m] = needs.get(m, frozenset()) | kernel_signatures(m, tuple(t["grid"]["cells"]), precision)
    return needs


class ChildState:
    """What the signal handler and the monitor share inside one child process."""

    def __init__(self, parent: int) -> None:
        self.parent = parent
        self.interrupted = False

    def interrupt(self, signum: int, frame: object) -> None:
        self.interrupted = True

    def parent_gone(self) -> bool:
        return os.getppid() != self.parent


class QueueMonitor:
    """Stops the solve when the job's cancel flag appears, on SIGUSR1, or when the worker dies."""

    def __init__(self, flag: Path, state: ChildState) -> None:
        self.flag, self.state = flag, state

    def iteration(self, iteration: int, relative_residual: float, elapsed: float) -> None:
        pass  # the runner writes the residual log

    def stop_requested(self) -> bool:
        return self.state.interrupted or self.flag.exists() or self.state.parent_gone()


def die_with_parent(parent: int) -> None:
    """Ask Linux to SIGKILL this process when the worker dies; exit if it already has."""
    try:
        import ctypes

        libc = ctypes.CDLL(None, use_errno=True)
        PR_SET_PDEATHSIG = 1
        libc.prctl(PR_SET_PDEATHSIG, signal.SIGKILL, 0, 0, 0)
    except (OSError, AttributeError):
        pass  # elsewhere the monitor's parent check and EOF on stdin do the job
    if os.getppid() != parent:
        os._exit(0)


@contextlib.contextmanager
def _warm_up_lock() -> Iterator[None]:
    """An exclusive lock in numba's cache folder for the warm-up; none (compile unserialised)
    when that folder cannot be found or written: numba then compiles without caching, and
    the worker must still start."""
    import fcntl

    from ..kernels.cache import cache_dir

    try:
        folder = cache_dir()
        folder.mkdir(parents=True, exist_ok=True)
        lock = open(folder / "sevenfold-warm-up.lock", "a+")
    except Exception as exc:  # no cache locator, a read-only folder
        print(f"warm-up without a lock: {exc}", file=sys.stderr)
        yield
        return
    with lock:
        fcntl.flock(lock, fcntl.LOCK_EX)
        try:
            yield
        finally:
            fcntl.flock(lock, fcntl.LOCK_UN)


def warm_up(say: Any = None) -> float:
    """Compile or load the kernels once, serialised across processes; returns seconds.

    When a method's kernels are not compiled yet (a new install, a new numba), ``say`` gets
    the notice of what is compiled and about how long it takes, before it starts; the
    process holding the lock says it, those waiting for the lock (other slots, other
    homes' workers) then find them compiled. The cache is numba's own choice (beside the
    package when its folder is writable, else the user's cache folder, or
    ``NUMBA_CACHE_DIR``), the one `sevenfold run` uses: compiled once per install.
    """
    from ..kernels.cache import is_cold, notice, warm_up_seconds
    from ..runner import run_job
    from ..spec import parse_job

    t0 = time.perf_counter()
    with _warm_up_lock():
        needs = _needs(warm_tables())
        cold = [m for m, signatures in needs.items() if is_cold(m, signatures)]
        if cold and say is not None:
            say(notice(cold, warm_up_seconds(needs)))
        with tempfile.TemporaryDirectory(prefix="sevenfold-warm-") as tmp:
            for table in warm_tables():
                try:
                    spec = parse_job(table, "warm-up")
                    run_job(Path(tmp) / "warm.toml", Path(tmp) / f"{spec.name}.zarr", spec=spec)
                except SevenfoldError as exc:  # a method that cannot take this job compiles later
                    print(f"warm-up {table['name']}: {exc}", file=sys.stderr)
    return time.perf_counter() - t0


def _os_error(exc: BaseException) -> OSError | None:
    seen = set()
    while exc is not None and id(exc) not in seen:
        if isinstance(exc, OSError):
            return exc
        seen.add(id(exc))
        exc = exc.__cause__ or exc.__context__  # type: ignore[assignment]
    return None


def execute(request: dict[str, Any], home: Home, state: ChildState) -> dict[str, Any]:
    """Run the job a request names; the reply says done (with a summary), failed or cancelled."""
    job_id, run_id, attempt = request["job"], request["run"], request["attempt"]
    record = {"job": job_id, "run": run_id, "attempt": attempt, "worker": request.get("worker"),
              "pid": os.getpid(), "queue": str(home.root)}
    return run_recorded(home.job_file(job_id), Path(request["output"]),
                        QueueMonitor(home.cancel_flag(job_id), state), record)


def run_recorded(job_file: Path, output: Path, monitor: Any, record: dict[str, Any],
                 spec: Any = None) -> dict[str, Any]:
    """Run a job with its run record beside the output; a reply: done, failed or cancelled.

    Shared by the slot children and the cluster tasks (:mod:`sevenfold.queue.cluster`).
    """
    from ..runner import run_job

    try:
        with writing(output, "the result"):  # the folder first, failing as `sevenfold run` does
            output.parent.mkdir(parents=True, exist_ok=True)
        append_run(output, {"event": "start", **record, "time": time.time()})
        result = run_job(job_file, output, monitor, spec=spec, extra_attrs={"queue": record})
        append_run(output, {"event": "done", **record, "time": time.time()})
    except Cancelled as exc:
        return {"status": "cancelled", "error": str(exc)}
    except OutputError as exc:  # the same line `sevenfold run` prints
        return {"status": "failed", "kind": "os", "error": str(exc)}
    except JobError as exc:
        return {"status": "failed", "kind": "input", "error": str(exc)}
    except SolverError as exc:
        if exc.output is not None:  # stopped short: its last iterate is written, marked
            append_run(output, {"event": "not converged", **record, "time": time.time()})
            return {"status": "failed", "kind": "solver", "result": str(exc.output),
                    "error": f"solver failed: {exc}; result kept, not converged "
                             f"(converged = false): {exc.output}"}
        return {"status": "failed", "kind": "solver", "error": f"solver failed: {exc}"}
    except MemoryError:
        return {"status": "failed", "kind": "memory", "error": "ran out of memory"}
    except Exception as exc:
        os_exc = _os_error(exc)
        if os_exc is not None:
            return {"status": "failed", "kind": "os", "error": f"OS error: {os_exc}"}
        traceback.print_exc(file=sys.stderr)
        return {"status": "failed", "kind": "internal",
                "error": f"internal error {type(exc).__name__}: {exc} (traceback in the worker's slot log)"}
    s = result.solve
    return {
        "status": "done",
        "summary": {
            **s.summary(),
            "unknowns": int(result.solve.x.shape[0]),
            "cells": result.plan.cells,
            "seconds": result.seconds,
            "output": str(result.output),
        },
    }


def _send(channel: TextIO, message: dict[str, Any]) -> None:
    channel.write(json.dumps(message) + "\n")
    channel.flush()


def requests(fd: int, idle: float, on_idle: Callable[[], None]) -> Iterator[dict[str, Any]]:
    """The JSON requests arriving on ``fd``, one per line, until it closes. While waiting for
    the next one (from the start, and from when the caller asks for it after a job), call
    ``on_idle`` once if ``idle`` s pass first."""
    buffer = b""
    while True:
        waiting = True  # on_idle not yet called for this wait
        while b"\n" not in buffer:
            ready, _, _ = select.select([fd], [], [], idle if waiting else None)
            if not ready:
                on_idle()
                waiting = False
                continue
            chunk = os.read(fd, 1 << 16)
            if not chunk:
                return
            buffer += chunk
        line, buffer = buffer.split(b"\n", 1)
        if line.strip():
            yield json.loads(line)


def hold_at_most(estimate: int) -> None:
    """Before a job admitted for ``estimate`` bytes: give back the memory malloc holds free
    when that is more (a smaller job after a larger one), so the slot holds about what the
    worker's memory admission counts for it."""
    from ..memory import held_free_bytes, release_freed_memory

    if held_free_bytes() > estimate:
        release_freed_memory()


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(prog="python -m sevenfold.queue.child")
    p.add_argument("--home", required=True)
    p.add_argument("--parent", type=int, required=True)
    args = p.parse_args(argv)
    # The protocol keeps the stdout we were given; fd 1 itself now points at stderr.
    channel = os.fdopen(os.dup(1), "w", encoding="utf-8")
    os.dup2(2, 1)
    sys.stdout = sys.stderr
    die_with_parent(args.parent)
    state = ChildState(args.parent)
    signal.signal(signal.SIGUSR1, state.interrupt)
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # the worker decides what Ctrl-C means
    home = Home(Path(args.home))
    try:
        seconds = warm_up(lambda text: _send(channel, {"compiling": text}))
    except Exception as exc:
        traceback.print_exc(file=sys.stderr)
        _send(channel, {"fatal": f"warm-up failed: {type(exc).__name__}: {exc}"})
        return 1
    _send(channel, {"ready": os.getpid(), "warm_seconds": seconds})
    from ..memory import release_freed_memory

    for request in requests(sys.stdin.fileno(), IDLE_RELEASE, release_freed_memory):
        hold_at_most(request.get("memory_bytes", 0))
        reply = execute(request, home, state)
        state.interrupted = False
        _send(channel, {"job": request["job"], "run": request["run"], **reply})
    return 0


if __name__ == "__main__":
    sys.exit(main())
