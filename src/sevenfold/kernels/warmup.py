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

# Compile seconds of one signature of each kernel, one after another in one process after
# numba's own start (the items of a gmg run on 64^3, medians of three fresh processes,
# benchmarks/RESULTS_COMPILE_ITEMS.md, 2026-12-05 14:08, Intel host, load 1.0; vectors_serial
# from the items of 32^3 the same way): for balancing the two halves and for the notice's
# estimate (scaled to the measured wall time, kernels/cache.py). An item that calls other
# kernels includes them (fronts_factor: the band factor's, and fronts_solve).
COST = {
    "transmissibility": 0.73, "fine_stencil": 2.45, "wall_counts": 0.39, "axis_weakness": 0.51,
    "galerkin_scaled": 3.44, "line_factor": 1.07, "line_gauss_seidel": 4.17,
    "residual_restrict": 2.96, "prolong_add": 1.22, "narrow": 0.18, "apply_dot": 1.55,
    "fronts_factor": 2.37, "vectors_threaded": 1.04, "vectors_serial": 0.26,
}
# What starting the child costs before it compiles, beyond what this process also pays
# (numba's own start): the interpreter and the imports of numpy, numba and the kernel modules
# (about 0.35 s on the host above)
CHILD_START = 0.4
# A child still running this long after its expected time is stopped (the run compiles the rest)
CHILD_GRACE = 60.0


@dataclass(frozen=True)
class GmgPlan:
    """What decides which kernels and argument types a gmg run compiles."""

    levels: tuple[int, ...]  # cells of each smoothed level, finest first (the coarsest is LU)
    cells: int  # the finest grid's cells
    finest: str  # "copy" (a copy of the finest level in the levels' type) or "operator" (float64 arrays)
    precision: str = "float32"  # the levels' float type (solvers.precision)

    def encode(self) -> str:
        return ",".join(map(str, (self.cells, self.finest, self.precision, *self.levels)))

    @classmethod
    def decode(cls, text: str) -> GmgPlan:
        cells, finest, precision, *levels = text.split(",")
        return cls(tuple(int(n) for n in levels), int(cells), finest, precision)


def gmg_plan(cells: tuple[int, int, int], precision: str = "float32") -> GmgPlan:
    """The plan of a gmg run on ``cells`` with levels in ``precision``, as the solver will
    decide it. Level sizes assume every axis is coarsened (the usual case); where the operator
    keeps an axis fine the real run may compile a signature or build of the coarse levels
    itself."""
    from ..memory import gmg_finest
    from ..solvers.hierarchy import COARSEST_CELLS

    shape, levels = tuple(int(c) for c in cells), []
    while int(np.prod(shape)) > COARSEST_CELLS and max(shape) > 1:
        levels.append(int(np.prod(shape)))
        shape = tuple((c + 1) // 2 for c in shape)
    n = int(np.prod(cells))
    return GmgPlan(tuple(levels), n, gmg_finest(n), precision)


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


def _aggregates(n: int = 4) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    return tuple(np.arange(n, dtype=np.int64) // 2 for _ in range(3))  # type: ignore[return-value]


Items = dict[str, Callable[[], None]]


def _items(plan: GmgPlan) -> tuple[Items, dict[str, frozenset[str]]]:
    """Each item compiles one kernel for tiny arrays of the argument types of the real run
    (solvers/gmg.py, solvers/hierarchy.py, solvers/levels.py, solvers/cg.py, operator.py),
    one signature per tag; and each item's tags (``item[tag]`` names one compiled signature in
    the cache's markers)."""
    from . import finite_volume, fronts, lines, multigrid, stencil, vector

    f64 = np.float64
    f32 = np.dtype(plan.precision).type  # the levels' type: float32 unless the contrast is high
    top = f32 if plan.finest == "copy" else f64  # the finest level's smoothing arrays
    high = f32 == f64  # float64 levels: tags of their own (a float32 hierarchy's finest level
    # on the float64 operator is tagged "float64" and compiles other argument types)

    def tagged(t) -> str:
        return "float64 levels" if high else np.dtype(t).name

    free = np.ones((4, 4, 4), dtype=np.bool_)
    freec = np.ones((2, 2, 2), dtype=np.bool_)
    widths = [np.ones(4) for _ in range(3)]
    small = (2, 2, 2)
    items: Items = {}
    tags: dict[str, set[str]] = {}

    def add(name: str, tag: str, call: Callable[[], None]) -> None:
        """Add ``call`` (one signature, named ``tag``) to item ``name``, unless it has it."""
        if tag in tags.setdefault(name, set()):
            return
        tags[name].add(tag)
        before = items.get(name)
        items[name] = (lambda: (before(), call())) if before else call

    add("transmissibility", "float64", lambda: _build(
        finite_volume.transmissibility, *_arrays(f64, count=3), *widths, *_arrays(f64, count=3)))
    faces = tuple(np.ones((4, 4)) for _ in range(6))
    add("fine_stencil", "float64", lambda: _build(
        finite_volume.fine_stencil, *_arrays(f64, count=3), ~free, _arrays(f64), _arrays(f64), *widths,
        faces, faces, *_arrays(f64, count=2)))
    if plan.levels:  # the walls in the conductivity, read from the float64 operator
        add("wall_counts", "float64", lambda: _build(multigrid.wall_counts, _arrays(f64), free, 10.0, 0, 4))
    for i in range(len(plan.levels)):
        # every level's arrays and right-hand side are in the levels' type (the finest smooths
        # a copy of CG's residual), except a finest level smoothed on the float64 operator
        level = top if i == 0 else f32
        tag = tagged(level)
        add("axis_weakness", tag, lambda t=level: _build(
            multigrid.axis_weakness, *_arrays(t, count=3), free, np.ones(3), 2.25, 1, True))
        add("galerkin_scaled", tag, lambda t=level: _build(
            multigrid.galerkin_scaled, *_arrays(t, count=4), free, _aggregates(),
            *_arrays(f32, small, 4), freec.copy()))
        add("line_factor", tag, lambda t=level: _build(
            lines.line_factor, *_arrays(t, count=2), _arrays(f32)))
        add("line_gauss_seidel", tag, lambda t=level: _build(
            lines.line_gauss_seidel, *_arrays(t, count=3), _arrays(f32), _arrays(t),
            _arrays(f32), 0, 2, 1, False))
        add("residual_restrict", tag, lambda t=level: _build(
            stencil.residual_restrict, *_arrays(t, count=4), _arrays(t), _arrays(f32),
            _steps(), _aggregates(), _arrays(f32, small)))
        add("prolong_add", tagged(f32), lambda: _build(
            stencil.prolong_add, _arrays(f32, small), free, _steps(), _aggregates(), 1.0,
            _arrays(f32)))
    narrowed = bool(plan.levels) and top != f64  # CG's residual copied to float32 for the finest level
    if narrowed:
        add("narrow", "float32", lambda: _build(multigrid.narrow, np.ones(8), np.ones(8, dtype=f32)))
    add("apply_dot", "float64", lambda: _build(stencil.apply_dot, *_arrays(f64, count=6)))

    def coarsest():  # every gmg run factors its coarsest level (solvers/coarsest.py)
        from ..solvers.dissection import fronts as tree_of

        tree = tree_of((2, 1, 1))
        ints = (tree.index, tree.start, tree.own)
        factor = np.empty(int(tree.factor_start[-1]))
        _build(fronts.fronts_factor, *_arrays(f64, (2, 1, 1), 4), *ints, tree.first,
               tree.factor_start, factor, np.empty(max(tree.stack, 1)), np.empty_like(tree.own),
               0, 1, 0)  # (fronts 0 .. 0, the first update at 0)
        _build(fronts.fronts_solve, *ints, tree.factor_start, factor, np.ones(2))

    add("fronts_factor", "float64", coarsest)
    ops, name = ((vector.THREADED, "vectors_threaded") if plan.cells >= vector.PARALLEL_FROM
                 else (vector.SERIAL, "vectors_serial"))

    def vectors():  # CG's updates; z, the preconditioner's output, is in the levels' type
        _build(ops.update_residual, np.ones(8), np.ones(8), 0.5,
               np.ones(8, dtype=f32 if narrowed else f64))
        _build(ops.update_solution_and_direction, np.ones(8), np.ones(8), np.ones(8, dtype=f32),
               0.5, 0.5)
        _build(ops.dot, np.ones(8), np.ones(8, dtype=f32))
        _build(ops.distance_squared, np.ones(8), np.ones(8))  # the true residual's norm

    add(name, tagged(f64), vectors)  # (tagged by CG's float64 vectors)
    return items, {k: frozenset(v) for k, v in tags.items()}


def signatures(cells: tuple[int, int, int], precision: str = "float32") -> frozenset[str]:
    """Every compiled signature a gmg run on ``cells`` with levels in ``precision`` needs, as
    ``item[tag]`` names."""
    return frozenset(f"{name}[{tag}]" for name, tags in _items(gmg_plan(cells, precision))[1].items()
                     for tag in tags)


# The grid of the run whose first-run compile kernels/cache.py states (COMPILE_SECONDS["gmg"],
# measured on start_bench.py's column32)
REFERENCE_CELLS = (32, 32, 32)


def estimate(missing: frozenset[str]) -> float:
    """Seconds of compiling the gmg signatures ``missing``, scaled to the measured whole."""
    from .cache import COMPILE_SECONDS

    whole = compile_seconds(signatures(REFERENCE_CELLS))
    return COMPILE_SECONDS["gmg"] * compile_seconds(missing) / whole


def compile_seconds(missing: frozenset[str] | set[str]) -> float:
    """The longer half of compiling the signatures ``missing`` on two processes (COST units)."""
    counts: dict[str, int] = {}
    for sig in missing:
        name = sig.split("[", 1)[0]
        counts[name] = counts.get(name, 0) + 1
    mine, theirs = split(list(counts), counts)
    return max(sum(_cost(n, counts) for n in mine),
               sum(_cost(n, counts) for n in theirs) + (CHILD_START if theirs else 0.0))


def _cost(name: str, signatures: dict[str, int] | dict[str, frozenset[str]]) -> float:
    count = signatures.get(name, 1)
    return COST.get(name, 1.0) * (count if isinstance(count, int) else len(count))


def split(names: list[str], signatures: dict[str, int] | dict[str, frozenset[str]]
          ) -> tuple[list[str], list[str]]:
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


def warm_up(method: str, cells: tuple[int, int, int], child: bool = True,
            compiled: frozenset[str] = frozenset(), precision: str = "float32") -> list[str]:
    """Compile ``method``'s kernels for a run on ``cells`` (gmg: levels in ``precision``)
    over two processes (only gmg has a plan; other methods compile as they run), leaving out
    the items whose signatures are all in ``compiled`` (``item[tag]`` names,
    :func:`signatures`). With ``child`` False everything is compiled in this process. Returns
    the items this process compiled; never raises."""
    try:
        if method != "gmg":
            return []
        plan = gmg_plan(cells, precision)
        items, signatures = _items(plan)
        names = [n for n in items if any(f"{n}[{t}]" not in compiled for t in signatures[n])]
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
