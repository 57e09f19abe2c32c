"""A cold first run compiles its method's kernels on two cores at once.

Compiling is single-threaded, and a gmg run compiles about a dozen kernels one after another
(most of them ``parallel=True``, 1-5 s each). When the cache is cold (:mod:`.cache`), before
the solve starts, :func:`warm_up` splits the kernels the run will need into two halves of about
equal measured compile time: a child process (``python -m sevenfold.kernels.warmup``) compiles
one half into numba's on-disk cache while this process compiles the other by calling each kernel
on tiny arrays of exactly the types the real run passes. The run then finds every kernel
compiled: its own half in memory, the child's in the cache. All signatures of one kernel go to
the same process (numba keeps one index file per function; two writers of it could lose one).

Anything that goes wrong (no child process, a read-only cache, a child that fails or hangs)
only means the run compiles the missing kernels itself, as it always did; nothing is raised.
tests/test_warmup.py checks that after the warm-up a real run compiles nothing more and that
the warm-up compiles nothing the run does not use.
"""

from __future__ import annotations

import os
import subprocess
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np

# Compile seconds of each item on the reference machine (numba's compile events, 2 cores,
# benchmarks/RESULTS_START.md): only for balancing the two halves. A kernel's item compiles
# each of its signatures the run needs (galerkin_scaled: one per source type).
COST = {
    "transmissibility": 2.0, "fine_stencil": 5.0, "axis_weakness": 1.5, "galerkin_scaled": 4.3,
    "line_factor": 1.2, "line_gauss_seidel": 7.3, "line_gauss_seidel_coarse": 4.0,
    "residual_restrict": 3.4, "residual_restrict_coarse": 3.5, "prolong_add": 1.6,
    "apply_dot": 3.3, "widen_dot": 0.9, "vectors_threaded": 1.3, "vectors_serial": 0.4,
}
# What starting the child costs before it compiles (the interpreter, numba, the kernel modules)
CHILD_START = 1.5
# A child still running this long after its expected time is stopped (the run compiles the rest)
CHILD_GRACE = 60.0


@dataclass(frozen=True)
class GmgPlan:
    """What decides which kernels and argument types a gmg run compiles."""

    levels: tuple[int, ...]  # cells of each smoothed level, finest first (the coarsest is LU)
    cells: int  # the finest grid's cells
    finest: str  # "copy" (float32 copy of the finest level) or "operator" (float64 arrays)

    def encode(self) -> str:
        return ",".join(map(str, (self.cells, self.finest, *self.levels)))

    @classmethod
    def decode(cls, text: str) -> GmgPlan:
        cells, finest, *levels = text.split(",")
        return cls(tuple(int(n) for n in levels), int(cells), finest)


def gmg_plan(cells: tuple[int, int, int]) -> GmgPlan:
    """The plan of a gmg run on ``cells``, as the solver will decide it. Level sizes assume
    every axis is coarsened (the usual case); where the operator keeps an axis fine the real
    run may compile a signature or build of the coarse levels itself."""
    from ..memory import gmg_finest
    from ..solvers.gmg import COARSEST_CELLS

    shape, levels = tuple(int(c) for c in cells), []
    while int(np.prod(shape)) > COARSEST_CELLS and max(shape) > 1:
        levels.append(int(np.prod(shape)))
        shape = tuple((c + 1) // 2 for c in shape)
    n = int(np.prod(cells))
    return GmgPlan(tuple(levels), n, gmg_finest(n))


def _arrays(dtype, shape=(4, 4, 4), count=1):
    """Arrays of 1, except the last of several, which is 10 (a diagonally dominant diag)."""
    a = [np.full(shape, 10.0 if i == count - 1 > 0 else 1.0, dtype=dtype) for i in range(count)]
    return a if count > 1 else a[0]


def _build(kernel, *args) -> None:
    """Compile ``kernel`` for the types of ``args`` as a call would (numba.typeof is what the
    dispatcher types each argument with), without running it."""
    import numba

    kernel.compile(tuple(numba.typeof(a) for a in args))


def _steps() -> np.ndarray:
    return np.array([2, 2, 2], dtype=np.int64)


def _items(plan: GmgPlan) -> tuple[dict[str, Callable[[], None]], dict[str, int]]:
    """Each item compiles kernels for tiny arrays of the argument types of the real
    run (solvers/gmg.py, solvers/levels.py, solvers/cg.py, operator.py); and how many
    signatures each item compiles."""
    from . import multigrid, stencil, vector

    f64, f32 = np.float64, np.float32
    top = f32 if plan.finest == "copy" else f64  # the finest level's smoothing arrays
    free = np.ones((4, 4, 4), dtype=np.bool_)
    freec = np.ones((2, 2, 2), dtype=np.bool_)
    widths = [np.ones(4) for _ in range(3)]
    coarse = len(plan.levels) > 1
    items: dict[str, Callable[[], None]] = {}
    signatures: dict[str, set] = {}

    def setup(kernel, call: Callable[[object], None], types: tuple = ()) -> None:
        """Add ``call(kernel)`` to ``kernel``'s item, unless it already gets the argument ``types``."""
        key = kernel.py_func.__name__
        if types in signatures.setdefault(key, set()):
            return
        signatures[key].add(types)
        before = items.get(key)
        items[key] = (lambda: (before(), call(kernel))) if before else (lambda: call(kernel))

    setup(stencil.transmissibility,
          lambda k: _build(k, *_arrays(f64, count=3), *widths, *_arrays(f64, count=3)))
    faces = tuple(np.ones((4, 4)) for _ in range(6))
    setup(stencil.fine_stencil,
          lambda k: _build(k, *_arrays(f64, count=3), ~free, _arrays(f64), _arrays(f64), *widths,
                           faces, faces, *_arrays(f64, count=2)))
    small = (2, 2, 2)
    if plan.levels:
        def axis_weakness():
            for dt in [top] + ([f32] if coarse and top != f32 else []):
                _build(multigrid.axis_weakness, *_arrays(dt, count=3), free, np.ones(3), 2.25, 1,
                       True)

        items["axis_weakness"] = axis_weakness
        for i in range(len(plan.levels)):
            source, level = (f64, top) if i == 0 else (f32, f32)  # the finest builds from float64
            setup(multigrid.galerkin_scaled,
                  lambda k, s=source: _build(k, *_arrays(s, count=4), free, _steps(),
                                             *_arrays(f32, small, 4), freec.copy()), (source,))
            setup(multigrid.line_factor,
                  lambda k, t=level: _build(k, *_arrays(t, count=2), _arrays(f32)), (level,))
        # the finest level's right-hand side is CG's float64 residual
        items["line_gauss_seidel"] = lambda: _build(
            multigrid.line_gauss_seidel, *_arrays(top, count=3), _arrays(f32), _arrays(f64),
            _arrays(f32), 0, 1)
        items["residual_restrict"] = lambda: _build(
            stencil.residual_restrict, *_arrays(top, count=4), _arrays(f64), _arrays(f32),
            _steps(), _arrays(f32, small))
        if coarse:
            items["line_gauss_seidel_coarse"] = lambda: _build(
                multigrid.line_gauss_seidel, *_arrays(f32, count=6), 0, 1)
            items["residual_restrict_coarse"] = lambda: _build(
                stencil.residual_restrict, *_arrays(f32, count=6), _steps(), _arrays(f32, small))
        items["prolong_add"] = lambda: _build(stencil.prolong_add, _arrays(f32, small), free,
                                              _steps(), 1.0, _arrays(f32))
    items["apply_dot"] = lambda: _build(stencil.apply_dot, *_arrays(f64, count=6))
    items["widen_dot"] = lambda: _build(multigrid.widen_dot, np.ones(8, dtype=f32), np.ones(8),
                                        np.ones(8))
    ops, key = ((vector.THREADED, "vectors_threaded") if plan.cells >= vector.PARALLEL_FROM
                else (vector.SERIAL, "vectors_serial"))

    def vectors():
        _build(ops.update_solution_and_residual, *(np.ones(8) for _ in range(4)), 0.5)
        _build(ops.update_direction, np.ones(8), np.ones(8), 0.5)

    items[key] = vectors
    return items, {k: len(v) for k, v in signatures.items()}


def _cost(name: str, signatures: dict[str, int]) -> float:
    return COST.get(name, 2.0) * signatures.get(name, 1)


def split(names: list[str], signatures: dict[str, int]) -> tuple[list[str], list[str]]:
    """(this process's, the child's) items: the longest first to whichever half ends sooner,
    the child's half starting CHILD_START later. Each half in the order the run uses them."""
    mine, theirs, t_mine, t_theirs = [], [], 0.0, CHILD_START
    for name in sorted(names, key=lambda n: -_cost(n, signatures)):
        if t_mine <= t_theirs:
            mine.append(name)
            t_mine += _cost(name, signatures)
        else:
            theirs.append(name)
            t_theirs += _cost(name, signatures)
    order = {n: i for i, n in enumerate(names)}
    return sorted(mine, key=order.get), sorted(theirs, key=order.get)


def _spawn(names: list[str], plan: GmgPlan) -> subprocess.Popen | None:
    """The child compiling ``names`` into the on-disk cache, or None when it cannot help."""
    from .cache import cache_dir

    folder = cache_dir()
    folder.mkdir(parents=True, exist_ok=True)
    if not os.access(folder, os.W_OK):  # the child's work would not reach this process
        return None
    package_root = str(Path(__file__).resolve().parents[2])  # the sevenfold this process runs
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(
        [package_root] + [p for p in os.environ.get("PYTHONPATH", "").split(os.pathsep) if p])}
    return subprocess.Popen([sys.executable, "-m", "sevenfold.kernels.warmup", plan.encode(), *names],
                            stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL,
                            stderr=subprocess.DEVNULL, env=env, close_fds=True)


def warm_up(method: str, cells: tuple[int, int, int], child: bool = True) -> list[str]:
    """Compile ``method``'s kernels for a run on ``cells`` over two processes (only gmg has a
    plan; other methods compile as they run). With ``child`` False everything is compiled in
    this process. Returns the items this process compiled; never raises."""
    try:
        if method != "gmg":
            return []
        plan = gmg_plan(cells)
        items, signatures = _items(plan)
        names = list(items)
        mine, theirs = split(names, signatures) if child else (names, [])
        proc = _spawn(theirs, plan) if theirs else None
    except Exception:  # noqa: BLE001  (the run compiles whatever is missing itself)
        return []
    if proc is None:
        mine = names
    t0 = time.perf_counter()
    try:
        mine = _compile(items, mine)
    except BaseException:  # interrupted: the child stops too
        if proc is not None:
            proc.kill()
            proc.wait()
        raise
    if proc is not None:
        expected = sum(_cost(n, signatures) for n in theirs) + CHILD_START
        try:
            proc.wait(timeout=max(expected - (time.perf_counter() - t0), 0.0) + CHILD_GRACE)
        except BaseException:  # too slow (the run compiles the rest) or interrupted
            proc.kill()
            proc.wait()
            if not isinstance(sys.exc_info()[1], subprocess.TimeoutExpired):
                raise
    return mine


def _compile(items: dict[str, Callable[[], None]], names: list[str]) -> list[str]:
    """Run the items ``names``; returns those that ran (one that fails is left to the run)."""
    done = []
    for name in names:
        try:
            items[name]()
            done.append(name)
        except Exception:  # noqa: BLE001, S112
            continue
    return done


def _child(argv: list[str]) -> int:
    items, _ = _items(GmgPlan.decode(argv[0]))
    return 0 if len(_compile(items, argv[1:])) == len(argv) - 1 else 1


if __name__ == "__main__":
    sys.exit(_child(sys.argv[1:]))
