"""Aggregates that follow walls: a prototype of the kept cycle whose pairs of cells are shifted
per level and axis so that coefficient jumps fall between aggregates, not inside them.

    python benchmarks/wall_bench.py [--sizes 128 256] [--cases column layered inclusions]
        [--designs kept walls ...] [--results FILE]

The kept hierarchy pairs cells (0, 1), (2, 3), ... along every coarsened axis. Issue 10's
1000:1 column has its walls where (i + 1/2) / n crosses 0.3 and 0.7: at 128^3 between cells 37
and 38 (between two pairs), at 256^3 between 76 and 77 (inside a pair), and the 256^3 solve
takes 9 iterations against 5 on layers (benchmarks/RESULTS_COLUMN.md, RESULTS_CYCLE_SWEEP.md).
Here each coarsened axis may instead pair (1, 2), (3, 4), ... (cell 0 alone, and the last cell
alone when the count is even): the offset that puts more of the level's walls (neighbouring
diagonals differing by more than WALL times) between pairs. An offset is one per axis and
level, so the partition stays a tensor product and every kernel keeps its structured loops; it
can follow planar walls (the column, layers across an axis), not the edges of boxes scattered
at random.

The coarse operator is the kept scaled Galerkin product with the scale taken per face from the
two aggregates' sizes (2 / (s1 + s2): 1/2 between pairs, as kept) and per aggregate for a cell's
boundary excess (1 / s); transfers piecewise constant; W(2,2) z-line Gauss-Seidel in float32.
Since db1aba3 the product's level kernels take the aggregates themselves (gmg arranges pairs
for contact planes it knows from the job), so this prototype only chooses the offsets from the
operator; before, it carried its own shifted kernels (RESULTS_WALLS*.md were measured on them).

Measured here against the kept hierarchy in the same process, one numba thread, CPU seconds
(as benchmarks/cycle_bench.py). Writes benchmarks/RESULTS_WALLS.md.
"""

from __future__ import annotations

import argparse
import datetime
import os
import shlex
import subprocess
import sys
from pathlib import Path

import numba
import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import cycle_bench as cb  # noqa: E402
import run as engine  # noqa: E402

from sevenfold.kernels import lines, multigrid  # noqa: E402
from sevenfold.solvers import gmg  # noqa: E402
from sevenfold.solvers.coarsest import CoarsestSolver  # noqa: E402
from sevenfold.solvers.levels import Level, coarsening_step, pairs  # noqa: E402

WALL = 10.0  # neighbouring diagonals this many times apart: a wall between them
COARSEST_ALLOWANCE = 1.2


def wall_offsets(lv: Level, step: np.ndarray) -> np.ndarray:
    """Per coarsened axis, 1 when more walls lie between cells i, i + 1 with i even than with
    i odd (pairs (1, 2), (3, 4), ... then keep them apart), else 0."""
    off = np.zeros(3, dtype=np.int64)
    d = lv.diag.astype(np.float64)
    for axis in range(3):
        if step[axis] == 1 or lv.shape[axis] < 4:
            continue
        lo = np.take(d, np.arange(lv.shape[axis] - 1), axis=axis)
        hi = np.take(d, np.arange(1, lv.shape[axis]), axis=axis)
        wall = np.maximum(lo / hi, hi / lo) > WALL
        per_face = wall.sum(axis=tuple(a for a in range(3) if a != axis))
        off[axis] = 1 if per_face[0::2].sum() > per_face[1::2].sum() else 0
    return off


def weak_face_offsets(lv: Level, step: np.ndarray) -> np.ndarray:
    """:func:`wall_offsets`, and on each coarsened axis where some face couples its cells more
    than WALL times more weakly than a neighbouring face along the axis (a contact
    resistance, which leaves the two cells' diagonals nearly equal), the offset that puts more
    of those faces between pairs."""
    off = wall_offsets(lv, step)
    for axis, t in enumerate((lv.tx, lv.ty, lv.tz)):
        n = lv.shape[axis]
        if step[axis] == 1 or n < 4:
            continue
        t = t.astype(np.float64)
        face = np.take(t, np.arange(1, n - 2), axis=axis)
        around = np.maximum(np.take(t, np.arange(0, n - 3), axis=axis), np.take(t, np.arange(2, n - 1), axis=axis))
        weak = (face * WALL < around).sum(axis=tuple(a for a in range(3) if a != axis))
        at = np.arange(1, n - 2)  # the face between cells i and i + 1
        even, odd = weak[at % 2 == 0].sum(), weak[at % 2 == 1].sum()
        if even + odd:
            off[axis] = 1 if even > odd else 0
    return off


class WallHierarchy(gmg.Hierarchy):
    """The kept hierarchy (W(2,2), z-lines, scaled aggregation, float32 levels, finest level
    on a float32 copy) with shifted pairs (``follow=True``) or the kept ones (False: the
    same code with every offset 0, a check of the prototype against the product)."""

    def __init__(self, fine: Level, follow: bool = True, out: np.ndarray | None = None,
                 offsets=wall_offsets) -> None:
        self.dtype = np.dtype(np.float32)
        self.transfer, self.smoother, self.overcorrection = "scaled", "line", 1.0
        self.gamma, self.sweeps = 2, (2, 2)
        self.offsets = []
        self._whole_z: list[int] = []  # (the prototype coarsens z wherever the rule says)
        top = fine.astype(self.dtype)
        top.boost = np.ones(3)
        self.levels = [top]
        # a shifted axis has one aggregate more (a cell alone at each end); without the
        # allowance a 16 x 16 x 17 level would be aggregated once more than the kept 16^3,
        # and a coarser coarsest level slows layered media (gmg.COARSEST_CELLS)
        while int(np.prod(self.levels[-1].shape)) > COARSEST_ALLOWANCE * gmg.COARSEST_CELLS:
            lv = self.levels[-1]
            lv.lines = True
            step = coarsening_step(lv, True)
            if not (step > 1).any():
                break
            off = offsets(lv, step) if follow else np.zeros(3, dtype=np.int64)
            lv.step, lv.agg = step, pairs(lv.shape, step, off)
            cshape = tuple(int(a[-1]) + 1 for a in lv.agg)
            arrays = [np.empty(cshape, dtype=self.dtype) for _ in range(4)]
            freec = np.empty(cshape, dtype=np.bool_)
            multigrid.galerkin_scaled(lv.tx, lv.ty, lv.tz, lv.diag, lv.free, lv.agg, *arrays,
                                      freec)
            coarse = Level(*arrays, freec, np.ones(3, dtype=np.int64), boost=lv.boost)
            coarse.e, coarse.b = (np.empty(cshape, dtype=self.dtype) for _ in range(2))
            self.levels.append(coarse)
            self.offsets.append(tuple(int(o) for o in off))
        self._out = out.reshape(fine.shape) if out is not None else np.empty(fine.shape)
        halves = self._out.reshape(-1).view(np.float32)
        n = top.diag.size
        top.e = halves[n:].reshape(top.shape)
        top.b = halves[:n].reshape(top.shape)
        self._refactor = False
        self.notes = " ".join("".join(map(str, o)) for o in self.offsets)
        for lv in self.levels[:-1]:
            lv.inv_w = np.empty(lv.shape, dtype=self.dtype)
            lines.line_factor(lv.tz, lv.diag, lv.inv_w)
        self.coarsest = CoarsestSolver(self.levels[-1])


def solve(fine, b, design: str):
    """gmg-CG with the kept Hierarchy ("kept"), the prototype unshifted ("prototype, pairs as
    kept") or shifted ("walls"; "walls and weak faces" with :func:`weak_face_offsets`)."""
    kept = gmg.Hierarchy
    if design != "kept":
        follow = design != "prototype, pairs as kept"
        offsets = weak_face_offsets if design == "walls and weak faces" else wall_offsets
        gmg.Hierarchy = lambda fine, out=None, **_: WallHierarchy(fine, follow, out, offsets)
    try:
        return gmg.solve_levels(fine, b, cb.RTOL, cb.MAX_ITERATIONS, finest="copy")
    finally:
        gmg.Hierarchy = kept


DESIGNS = ("kept", "prototype, pairs as kept", "walls", "walls and weak faces")
TITLE = "Aggregates that follow walls (a prototype)"
INTRO = ("*kept* = `sevenfold.solvers.gmg`'s hierarchy; *prototype, pairs as kept* = this file's "
         "hierarchy with every offset 0 (it must match *kept*'s iterations: the check that the "
         "prototype's set-up is the kept one); *walls* = pairs shifted per level and axis so "
         "that walls fall between aggregates (*offsets*: x, y, z per level, 1 = shifted); *walls "
         "and weak faces* = the same, also counting faces WALL times weaker than a neighbouring "
         "face along their axis (a contact resistance, `weak_face_offsets`). See "
         "the docstring of `benchmarks/wall_bench.py` for the design.")


def run_case(n: int, case: str, repeats: int, designs=DESIGNS, solver=None) -> list[dict]:
    """Each design's gmg-CG on one problem: iterations, CPU seconds (best of ``repeats``) and
    the unit; ``solver(fine, b, design)`` (default :func:`solve`) returns solve_levels's pair,
    and the hierarchy's ``notes`` (if any) go to the table."""
    fine, b = cb.problem_level(n, case)
    rows = []
    for design in designs:
        seconds = np.inf
        for _ in range(repeats):
            unit = cb.unit_seconds(fine)
            t = cb.CLOCK()
            result, hierarchy = (solver or solve)(fine, b, design)
            seconds = min(seconds, cb.CLOCK() - t)
        unit = float(np.median([unit, cb.unit_seconds(fine)]))
        rows.append(dict(case=case, n=n, design=design, iterations=result.iterations,
                         converged=result.converged, seconds=seconds, unit=unit,
                         levels=" > ".join("x".join(map(str, s)) for s in hierarchy.shapes),
                         notes=getattr(hierarchy, "notes", "")))
        print(f"{case:10s} {n:4d} {design:26s} it {result.iterations:3d} wu {seconds / unit:6.1f} "
              f"t {seconds:6.2f} {rows[-1]['notes']}", flush=True)
    return rows


def report(rows: list[dict], info: dict, command: str, title: str = TITLE, intro: str = INTRO,
           notes: str = "offsets per level") -> str:
    """The results as markdown: ``intro`` says what the designs are, ``notes`` heads the
    column of the hierarchies' notes."""
    out = [f"# {title}", "",
           f"Written by `{command}` on {info['date']}; every number below comes from that run. "
           "Do not edit by hand: run the command again.", "",
           "gmg-CG to rtol 1e-8 (true residual), one numba thread, CPU seconds of this process "
           "(best of the repeats). *work units* = (setup + solve) / one float64 application of "
           "the finest operator (median around the solves); *time ratio* = seconds / *kept*'s "
           "on the same problem. " + intro, "",
           f"| case | cells | design | iterations | work units | seconds | time ratio | {notes} | levels |",
           "|---|---|---|---|---|---|---|---|---|"]
    for r in rows:
        base = next(x["seconds"] for x in rows if x["case"] == r["case"] and x["n"] == r["n"]
                    and x["design"] == "kept")
        out.append(f"| {r['case']} | {r['n']}^3 | {r['design']} | {r['iterations']}"
                   f"{'' if r['converged'] else ' (not converged)'} | {r['seconds'] / r['unit']:.1f} | "
                   f"{r['seconds']:.2f} | {r['seconds'] / base:.2f} | {r['notes'] or '-'} | {r['levels']} |")
    out += [""] + machine_table(info)
    return "\n".join(out) + "\n"


def run_info() -> dict:
    """The machine, the revision and the load at the start of a prototype benchmark's run."""
    info = engine.machine()
    info["load average before"] = " ".join(f"{x:.2f}" for x in os.getloadavg())
    info["sevenfold revision"] = subprocess.run(
        ["git", "rev-parse", "--short", "HEAD"], capture_output=True, text=True, cwd=HERE).stdout.strip()
    return info


def module_at(revision: str, name: str, edit=None):
    """Module ``name`` of sevenfold (e.g. "sevenfold.store") as it was at git ``revision``,
    loaded beside the current one for an A/B in one process; its relative imports resolve in
    the installed package, except those of sibling modules already loaded at ``revision``
    (load the ones it needs first). ``edit`` (source -> source), when given, changes the text
    first."""
    import importlib.util
    import types

    path = "src/" + name.replace(".", "/") + ".py"
    source = subprocess.run(["git", "show", f"{revision}:{path}"], cwd=HERE, check=True,
                            capture_output=True, text=True).stdout
    if edit is not None:
        source = edit(source)
    package, _, leaf = name.rpartition(".")
    for loaded in [m for m in sys.modules if m.startswith(f"{package}._") and m.endswith(f"_at_{revision}")]:
        sibling = loaded[len(package) + 2:-len(f"_at_{revision}")]
        source = source.replace(f"from .{sibling} import", f"from ._{sibling}_at_{revision} import")
    qualified = f"{package}._{leaf}_at_{revision}"
    module = types.ModuleType(qualified)
    module.__package__ = package
    module.__spec__ = importlib.util.spec_from_loader(qualified, loader=None)
    sys.modules[qualified] = module
    exec(compile(source, f"{revision}:{path}", "exec"), module.__dict__)
    return module


# level kernels that take each cell's aggregate per axis (``agg``) since a2d7a83's successor,
# a shift of the pairs (``off``) from db1aba3 on, plain pairs before
AGGREGATE_KERNELS = ("residual_restrict", "restrict", "prolong_add", "galerkin", "galerkin_scaled")


def _called_as_now(then, now, revision: str):
    """``then``, a revision's kernel, called with ``now``'s arguments: matched by name, with
    the aggregate sizes (``step``) or the pairs' shift (``off``) it took derived from ``agg``."""
    import inspect

    old = list(inspect.signature(then.py_func).parameters)
    new = list(inspect.signature(now.py_func).parameters)
    if old == new:
        return then

    def called(*args):
        given = dict(zip(new, args))
        if "agg" in given:
            step = np.array([1 if a[-1] + 1 == a.size else 2 for a in given["agg"]], dtype=np.int64)
            off = np.zeros(3, dtype=np.int64)
            for axis, (a, s) in enumerate(zip(given["agg"], step)):
                if s == 2:
                    off[axis] = int(a.size > 1 and a[1] != a[0])
                    if not np.array_equal(a, (np.arange(a.size) + off[axis]) // 2):
                        raise ValueError(f"revision {revision} knows no cells alone inside an axis")
            if "off" not in old and off.any():
                raise ValueError(f"revision {revision} knows no shifted pairs")
            given.setdefault("step", step)
            given["off"] = off
        return then(*(given[name] for name in old))

    return called


def exists_at(revision: str, name: str) -> bool:
    """Whether sevenfold's module ``name`` existed at git ``revision``."""
    return subprocess.run(["git", "cat-file", "-e", f"{revision}:src/{name.replace('.', '/')}.py"],
                          cwd=HERE, capture_output=True).returncode == 0


# kernel modules split off a module: their kernels' home at a revision before the split
SPLIT_FROM = {"sevenfold.kernels.lines": "sevenfold.kernels.multigrid",
              "sevenfold.kernels.finite_volume": "sevenfold.kernels.stencil"}


def kernels_at(revision: str, name: str):
    """Kernel module ``name`` (e.g. "sevenfold.kernels.stencil") as it was at ``revision`` (at a
    revision before ``name`` was split off, the module its kernels lived in then), uncached (numba caches only functions that live in a file), callable as gmg calls the
    current one: a level kernel from before the aggregates per axis takes them and passes on
    what it took instead (plain or shifted pairs), so revisions on either side of the change
    compare on the jobs they both can run."""
    import importlib
    import types

    def uncached(source: str) -> str:
        return source.replace("cache=True", "cache=False")

    home = name
    if name in SPLIT_FROM and not exists_at(revision, name):
        home = SPLIT_FROM[name]  # a revision from before the split
    if home == "sevenfold.kernels.multigrid":  # (it imports from stencil)
        module_at(revision, "sevenfold.kernels.stencil", edit=uncached)
    old = module_at(revision, home, edit=uncached)
    current = importlib.import_module(name)
    out = types.SimpleNamespace(**{k: v for k, v in vars(old).items() if not k.startswith("__")})
    for kernel in AGGREGATE_KERNELS:
        then, now = getattr(old, kernel, None), getattr(current, kernel, None)
        if then is not None and now is not None:
            setattr(out, kernel, _called_as_now(then, now, revision))
    return out


def machine_table(info: dict) -> list[str]:
    """The report's closing section: ``info`` as a two-column markdown table."""
    return ["## Machine", "", "| | |", "|---|---|"] + [f"| {k} | {v} |" for k, v in info.items()]


def finish_info(info: dict, script: str, argv) -> str:
    """Add the load at the end and the date to ``info``; returns the command that ran."""
    info["load average after"] = " ".join(f"{x:.2f}" for x in os.getloadavg())
    info["date"] = datetime.datetime.now(datetime.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    return (f"python benchmarks/{script} " + shlex.join(sys.argv[1:] if argv is None else argv)).strip()


def main(argv=None, script: str = "wall_bench.py", results: str = "RESULTS_WALLS.md",
         designs=DESIGNS, solver=None, **text) -> int:
    """Run ``designs`` on the chosen sizes and cases and write ``results`` (``text``: report's
    title, intro and notes)."""
    parser = argparse.ArgumentParser(description=f"benchmarks/{script}: prototype designs against the kept hierarchy")
    parser.add_argument("--sizes", type=int, nargs="+", default=[128, 256])
    parser.add_argument("--cases", nargs="+", default=["column", "layered", "inclusions", "constant"])
    parser.add_argument("--repeats", type=int, default=1)
    parser.add_argument("--designs", nargs="+", default=list(designs), choices=list(designs))
    parser.add_argument("--results", default=str(HERE / results))
    args = parser.parse_args(argv)
    numba.set_num_threads(1)
    info = run_info()
    run_case(24, "column", 1, args.designs, solver)  # compile every kernel before timing
    print("timed runs", flush=True)
    rows = []
    for n in args.sizes:
        for case in args.cases:
            rows += run_case(n, case, args.repeats, args.designs, solver)
    command = finish_info(info, script, argv)
    Path(args.results).write_text(report(rows, info, command, **text))
    print("wrote", args.results)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
