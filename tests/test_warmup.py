"""The cold-start warm-up (kernels/warmup.py) compiles exactly what a real gmg run then uses:
after it, the run compiles nothing more, and a run in a fresh process needs no kernel that the
warm-up did not compile. A warm-up whose child cannot start still leaves a working run. No timings here (start_bench.py)."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path


# In a fresh interpreter: optionally warm up (two processes), then run the job, and report each
# sevenfold kernel's signatures after the warm-up and after the run, and what the run compiled.
PROBE = r"""
import json, sys
from numba.core import event
from numba.core.registry import CPUDispatcher

compiled = []
class Listen(event.Listener):
    def on_start(self, ev): pass
    def on_end(self, ev):
        f = ev.data["dispatcher"].py_func
        if f.__module__.startswith("sevenfold"):
            compiled.append(f.__qualname__)

from sevenfold.kernels import band, finite_volume, lines, multigrid, stencil, vector, warmup
from sevenfold.runner import run_job

def signatures():
    # kernels only: a private helper (lines._line_plane) gets signatures when its caller
    # compiles, none when the caller comes from the cache
    found = {}
    for module in (finite_volume, stencil, lines, multigrid, vector, band):
        for name, d in vars(module).items():
            if isinstance(d, CPUDispatcher) and d.signatures and not name.startswith("_"):
                found[name] = sorted(map(str, d.signatures))
    return found

job, out, mode = sys.argv[1:4]
cells = tuple(json.loads(sys.argv[4]))
mine = warmup.warm_up("gmg", cells, child=(mode == "two")) if mode != "none" else []
after_warmup = signatures()
listener = Listen()
event.register("numba:compile", listener)
run_job(job, out)
print(json.dumps({"mine": mine, "warm": after_warmup, "run": signatures(), "compiled": compiled}))
"""

JOB = """
name = "warm"
physics = "heat"
[grid]
cells = {cells}
size = [1.0, 1.0, 1.0]
[material]
value = "1 + 100 * (x > 0.5)"
[source]
value = 1.0
[boundary]
x_min = {{ type = "dirichlet", value = 0.0 }}
x_max = {{ type = "robin", coefficient = 2.0, reference = 1.0 }}
[[hold]]
box = {{ min = [0.2, 0.2, 0.2], max = [0.4, 0.5, 0.5] }}
value = 2.0
[solver]
method = "gmg"
[output]
path = "warm.zarr"
"""


def probe(folder: Path, cells: list[int], mode: str, cache: Path | None) -> dict:
    path = folder / f"warm{'x'.join(map(str, cells))}.toml"
    path.write_text(JOB.format(cells=json.dumps(cells)))
    env = {**os.environ, **({"NUMBA_CACHE_DIR": str(cache)} if cache else {})}
    proc = subprocess.run([sys.executable, "-c", PROBE, str(path), str(folder / "out.zarr"), mode,
                           json.dumps(cells)], capture_output=True, text=True, env=env, timeout=900,
                          check=False)
    assert proc.returncode == 0, proc.stderr
    return json.loads(proc.stdout.strip().splitlines()[-1])


def test_after_a_two_process_warm_up_the_run_compiles_nothing(tmp_path: Path) -> None:
    """From an empty cache, 30^3: this process compiles its half, the child the other half into
    the cache; the run then finds every kernel with its exact types and compiles nothing."""
    two = probe(tmp_path, [30, 30, 30], "two", tmp_path / "cache")
    assert two["mine"], "this process compiled no half"
    assert two["compiled"] == [], f"the run compiled {two['compiled']} after the warm-up"
    assert "line_gauss_seidel" in two["run"] and "fine_stencil" in two["run"]


def test_the_warm_up_compiles_exactly_what_the_run_uses(tmp_path: Path) -> None:
    """48^3 (threaded vector updates, two smoothed levels) and 12x10x8 (serial vector updates,
    the coarsest level alone), in the usual cache: after the whole warm-up in one process the
    run adds no signature, and a process that only runs the job ends with exactly the
    warm-up's signatures (nothing more, nothing other). (One smoothed level needs the same
    level signatures as two; the two-process test above runs 30^3.)"""
    cache = Path(os.environ["NUMBA_CACHE_DIR"]) if "NUMBA_CACHE_DIR" in os.environ else None
    runs = {}
    for cells in ([48, 48, 48], [12, 10, 8]):
        one = probe(tmp_path, cells, "one", cache)
        assert one["run"] == one["warm"], f"{cells}: the run needed more than the warm-up"
        alone = probe(tmp_path, cells, "none", cache)
        assert alone["run"] == one["warm"], f"{cells}: the warm-up compiled more or other builds"
        runs[cells[-1]] = alone["run"]
    assert "fine_stencil" in runs[48] and "fine_stencil" in runs[8]
    assert "line_gauss_seidel" in runs[48] and "narrow" in runs[48]
    assert "line_gauss_seidel" not in runs[8]  # 960 cells: the coarsest level alone


def test_a_child_that_cannot_start_leaves_a_working_run(tmp_path: Path, monkeypatch) -> None:
    """The warm-up never raises: without a child it compiles everything here (or leaves it to
    the run), and the solve is the same."""
    from sevenfold.kernels import warmup
    from sevenfold.runner import run_job

    def refuse(*args, **kwargs):
        raise OSError("no processes left")

    monkeypatch.setattr(warmup.subprocess, "Popen", refuse)
    assert warmup.warm_up("gmg", (12, 10, 8)) == []
    monkeypatch.setattr(warmup, "_spawn", lambda names, plan: None)  # e.g. a read-only cache
    mine = warmup.warm_up("gmg", (12, 10, 8))
    assert set(mine) == set(warmup._items(warmup.gmg_plan((12, 10, 8)))[0])
    assert warmup.warm_up("fft", (12, 10, 8)) == []  # only gmg has a plan
    path = tmp_path / "job.toml"
    path.write_text(JOB.format(cells="[12, 10, 8]"))
    result = run_job(path, tmp_path / "out.zarr")
    assert result.solve.converged


def test_the_split_balances_and_keeps_every_item_once() -> None:
    from sevenfold.kernels import warmup

    for cells in ((12, 10, 8), (32, 32, 32), (64, 64, 64), (128, 128, 128)):
        items, signatures = warmup._items(warmup.gmg_plan(cells))
        mine, theirs = warmup.split(list(items), signatures)
        assert sorted(mine + theirs) == sorted(items)
        a = sum(warmup._cost(n, signatures) for n in mine)
        b = sum(warmup._cost(n, signatures) for n in theirs) + warmup.CHILD_START
        largest = max(warmup._cost(n, signatures) for n in items)
        assert abs(a - b) <= largest, (cells, mine, theirs)
    plan = warmup.gmg_plan((128, 128, 128))
    assert plan.levels == (128**3, 64**3, 32**3) and warmup.GmgPlan.decode(plan.encode()) == plan


def test_every_item_has_a_measured_cost() -> None:
    """The split balances by warmup.COST (benchmarks/compile_items.py measures it): an item
    without an entry would be split on a guess."""
    from sevenfold.kernels import warmup

    seen = set()
    for cells in ((12, 10, 8), (32, 32, 32), (128, 128, 128)):
        for precision in ("float32", "float64"):
            seen |= set(warmup._items(warmup.gmg_plan(cells, precision))[0])
    assert seen == set(warmup.COST), seen ^ set(warmup.COST)
