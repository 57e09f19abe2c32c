"""The process's one helper thread, and whole-grid passes split between it and the caller.

numpy's loops over large arrays, BLAS and our compiled kernels release the GIL, so a pass
over two halves of an array runs on two cores: the calling thread takes the first half, the
helper thread the second. The passes outside the solve (filling and checking the fields,
their range, integrals, the extremes of the solution) were one thread's each.

A split pass depends only on the array's shape, never on the number of cores: a large array
is always cut in the same two halves, run one after the other when only one core is there,
so a sum over halves is the same number, bit for bit, on every machine.
"""

from __future__ import annotations

import os
import threading
from typing import TYPE_CHECKING, Any, Callable

import numpy as np

if TYPE_CHECKING:
    from concurrent.futures import ThreadPoolExecutor

# Arrays of at least this many elements are split in halves; a hand-over to the helper
# costs tens of microseconds, a pass over 2^21 float64 values (16 MiB) a millisecond or more
HALVES_FROM = 1 << 21


def threads() -> int:
    """Threads the process may keep busy: numba's thread count (a slot's limit when one is
    set). numba is not imported for this: when it is not loaded yet, its rule is followed
    (``NUMBA_NUM_THREADS``, else the CPUs this process may use)."""
    import sys

    numba = sys.modules.get("numba")
    if numba is not None:
        try:
            return max(1, int(numba.get_num_threads()))
        except Exception:  # pragma: no cover - a partly imported numba; fall through
            pass
    try:
        return max(1, int(os.environ["NUMBA_NUM_THREADS"]))
    except (KeyError, ValueError):
        pass
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):  # pragma: no cover - not Linux
        return os.cpu_count() or 1


_pool: ThreadPoolExecutor | None = None
_pool_lock = threading.Lock()


def helper() -> ThreadPoolExecutor:
    """The process's one helper thread, started on first use. Idle between tasks; the
    executor ends and joins it at interpreter exit. A forked child starts its own."""
    from concurrent.futures import ThreadPoolExecutor  # (imported by the runs that use it)

    global _pool
    with _pool_lock:
        if _pool is None:
            _pool = ThreadPoolExecutor(1, thread_name_prefix="sevenfold-helper")
        return _pool


def _forget_helper() -> None:
    """After a fork: the child has no helper thread, whatever the parent had."""
    global _pool, _pool_lock
    _pool, _pool_lock = None, threading.Lock()


if hasattr(os, "register_at_fork"):
    os.register_at_fork(after_in_child=_forget_helper)


def both(first: Callable[[], Any], second: Callable[[], Any]) -> list[Any]:
    """``[first(), second()]``, ``second`` on the helper thread when two cores are there.
    Neither may depend on the other's result."""
    if threads() < 2:
        return [first(), second()]
    try:
        later = helper().submit(second)
    except RuntimeError:  # no thread to be had (exiting, or no more threads)
        return [first(), second()]
    try:
        mine = first()
    finally:
        theirs = later.result()  # (waited for in any case: it may write into the caller's arrays)
    return [mine, theirs]


def halves(fn: Callable[..., Any], *arrays: np.ndarray) -> list[Any]:
    """``[fn(*first halves), fn(*second halves)]`` of ``arrays`` cut along their first axis
    (all of the same length there), on two cores (:func:`both`); ``[fn(*arrays)]`` when the
    first array has fewer than HALVES_FROM elements or one row."""
    a = arrays[0]
    if a.size < HALVES_FROM or a.shape[0] < 2:
        return [fn(*arrays)]
    h = a.shape[0] // 2
    return both(lambda: fn(*(x[:h] for x in arrays)), lambda: fn(*(x[h:] for x in arrays)))


def fill(a: np.ndarray, value: float) -> None:
    """``a[...] = value``, the halves on two cores (np.zeros or np.full on memory that malloc
    kept is one thread's write)."""
    halves(lambda part: part.fill(value), a)
