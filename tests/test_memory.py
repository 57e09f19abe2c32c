"""The memory estimate `sevenfold check` shows, against the measured peak of a real run."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

from sevenfold.runner import plan_job, prepare_problem

JOB = """
name = "memory-{method}"
[grid]
cells = [{n}, {n}, {n}]
size = [1.0, 1.0, 1.0]
[material]
value = 1.0
{region}
[source]
value = 1.0
[boundary]
x_min = {{ type = "dirichlet", value = 0.0 }}
x_max = {{ type = "dirichlet", value = 1.0 }}
[solver]
method = "{method}"
"""
LAYER = '[[material.region]]\nbox = {{ min = [0.0, 0.0, 0.3], max = [1.0, 1.0, 0.63] }}\nvalue = {k}'


# Linux carries a process's peak resident set across exec, and a child started with vfork
# would inherit this (large) test process's peak; a small go-between python process makes
# the job's own peak the one that is read.
MEASURE = """
import os, subprocess, sys
child = subprocess.Popen([sys.executable, "-m", "sevenfold.cli", "run", "--no-progress", sys.argv[1]],
                         stdout=subprocess.DEVNULL)
_, status, usage = os.wait4(child.pid, 0)
print(status, usage.ru_maxrss * 1024)  # ru_maxrss is in kilobytes on Linux
"""


def peak_of_run(job: Path) -> int:
    """Peak resident set (bytes) of one whole `python -m sevenfold.cli run` process."""
    out = subprocess.run([sys.executable, "-c", MEASURE, str(job)], capture_output=True, text=True,
                         check=True).stdout.split()
    assert out[0] == "0"
    return int(out[1])


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="ru_maxrss units differ off Linux")
# grids large enough that the per-cell part dominates the ~50 MiB by which the base varies
# (the 1e-8 layer runs gmg's levels in float64: no float32 copy, float64 pivots)
@pytest.mark.parametrize("method, n, k", [("gmg", 160, 1000.0), ("gmg", 160, 1e-8), ("amg", 96, 1000.0),
                                          ("fft", 192, None)])
def test_estimate_within_a_quarter_of_the_peak(tmp_path: Path, method: str, n: int, k) -> None:
    job = tmp_path / "job.toml"
    job.write_text(JOB.format(method=method, n=n, region="" if k is None else LAYER.format(k=k)))
    plan = plan_job(job)
    plan, _ = prepare_problem(plan)
    assert plan.method == method
    peak = peak_of_run(job)
    assert abs(plan.memory_bytes / peak - 1.0) <= 0.25, (plan.memory_bytes / 2**20, peak / 2**20)


def test_the_lease_drops_the_fields_during_the_solve_and_the_answer_is_unchanged(tmp_path: Path,
                                                                                monkeypatch) -> None:
    """FieldLease: k, f, the held values and the hold index are gone while CG iterates, back
    (rebuilt, equal) afterwards, and the solution is bit for bit the one without the lease."""
    import numpy as np

    from sevenfold.problem import build_problem
    from sevenfold.solvers.select import FieldLease, solve_problem
    from sevenfold.spec import load_job

    job = tmp_path / "job.toml"
    text = JOB.format(method="gmg", n=20, region=LAYER.format(k=1000.0))  # above gmg's 16^3 coarsest level: it iterates
    job.write_text(text.replace("[solver]", "[[hold]]\nbox = { min = [0.4, 0.4, 0.4], max = [0.6, 0.6, 0.6] }\n"
                                "value = 3.0\n[solver]"))
    spec = load_job(job)
    plain = build_problem(spec)
    u_plain, _ = solve_problem(plain, spec.solver, "gmg")
    for method in ("gmg", "amg", "direct"):
        leased = build_problem(spec)
        lease = FieldLease(leased, lambda: build_problem(spec))
        seen = []

        class Watch:
            def iteration(self, iteration, relative_residual, elapsed):
                seen.append(all(getattr(leased, f) is None for f in FieldLease.FIELDS))

            def stop_requested(self):
                return False

        u, _ = solve_problem(leased, spec.solver, method, Watch(), lease)
        assert seen and all(seen), method  # released from the first report on
        for name in FieldLease.FIELDS:  # restored, equal to a fresh build
            a, b = getattr(leased, name), getattr(plain, name)
            assert all(np.array_equal(x, y) for x, y in zip(a, b)) if isinstance(a, tuple) else np.array_equal(a, b)
        if method == "gmg":
            assert np.array_equal(u, u_plain)
        else:  # another solver: the same solution to its tolerance
            assert np.abs(u - u_plain).max() <= 1e-6 * np.abs(u_plain).max()
    # auto's fallback from gmg to amg after the fields were released: rebuilt for the assembly
    from sevenfold.solvers import select

    monkeypatch.setattr(select, "GUARD_ITERATIONS", 2)
    monkeypatch.setattr(select, "GUARD_RATE", 0.0)
    leased = build_problem(spec)
    auto = spec.solver.model_copy(update={"method": "auto"})
    u, result = solve_problem(leased, auto, "gmg", None, FieldLease(leased, lambda: build_problem(spec)))
    assert result.method.startswith("amg") and "solved with amg instead" in result.notes
    assert np.abs(u - u_plain).max() <= 1e-6 * np.abs(u_plain).max()


def test_gmg_goes_lean_when_the_copy_does_not_fit(tmp_path: Path, monkeypatch) -> None:
    """With too little memory for the float32 copy of the finest level, gmg smooths on the
    float64 face arrays instead: it says so in its notes, the estimate drops to the lean
    figure, and the answer is the usual one to the solver's tolerance (the preconditioner
    differs only in rounding)."""
    import numpy as np

    from sevenfold import memory
    from sevenfold.problem import build_problem
    from sevenfold.solvers.select import solve_problem
    from sevenfold.spec import load_job

    job = tmp_path / "job.toml"
    job.write_text(JOB.format(method="gmg", n=24, region=LAYER.format(k=1000.0)))
    spec = load_job(job)
    cells = 24**3
    u_copy, copy = solve_problem(build_problem(spec), spec.solver, "gmg")
    assert memory.gmg_finest(cells) == "copy" and "save memory" not in copy.notes
    usual = memory.estimate_bytes(cells, cells, "gmg")
    short = int(memory.GMG_SOLVE_BYTES_PER_CELL * cells)  # less than the solve needs with a tenth spare
    monkeypatch.setattr(memory, "available_bytes", lambda: short)
    assert memory.gmg_finest(cells) == "operator"
    lean = memory.estimate_bytes(cells, cells, "gmg")
    assert usual - lean == memory.COPY_BYTES_PER_CELL * cells
    u_lean, result = solve_problem(build_problem(spec), spec.solver, "gmg")
    assert "finest level smoothed on the float64 arrays to save memory" in result.notes
    assert result.converged
    assert np.abs(u_lean - u_copy).max() <= 1e-6 * np.abs(u_copy).max()


def test_gmg_goes_lean_on_large_grids(monkeypatch) -> None:
    """From memory.LEAN_FROM_CELLS up gmg smooths on the float64 arrays whatever the memory
    (the float32 copy measured no faster there, benchmarks/RESULTS_FINEST.md), and the
    estimate `check` shows follows; just below, with memory to spare, it keeps the copy."""
    from sevenfold import memory

    monkeypatch.setattr(memory, "available_bytes", lambda: 2**50)
    big, below = memory.LEAN_FROM_CELLS, memory.LEAN_FROM_CELLS - 1
    assert memory.gmg_finest(big) == "operator" and memory.gmg_finest(below) == "copy"
    assert memory.estimate_bytes(big, big, "gmg") == memory.BASE_BYTES + memory.LEAN_GMG_BYTES_PER_CELL * big
    assert memory.estimate_bytes(below, below, "gmg") == memory.BASE_BYTES + memory.BYTES_PER_CELL["gmg"] * below


KEEPS = """
import sys
import numpy as np
from sevenfold.memory import held_free_bytes, keep_freed_memory
if sys.argv[1] == "keep":
    assert keep_freed_memory()
a = np.ones(2**23)  # 64 MiB, above glibc's largest mmap threshold
del a
print(held_free_bytes())
"""


def test_a_run_keeps_the_memory_it_frees() -> None:
    """After keep_freed_memory a freed 64 MiB array stays with malloc for the next one (glibc's
    mallinfo2); with glibc's defaults it goes back to the system (an mmap of its own)."""
    held = {arm: int(subprocess.run([sys.executable, "-c", KEEPS, arm], capture_output=True,
                                    text=True, check=True).stdout)
            for arm in ("keep", "default")}
    assert held["keep"] >= 2**26 > held["default"], held


def test_only_jobs_below_the_lean_size_keep_freed_memory() -> None:
    """Jobs big enough to be run lean keep glibc's defaults (a heap's fragments would add to
    the peak that limits them), and so does a user who set malloc's variables."""
    from sevenfold.memory import LEAN_FROM_CELLS, keeps_freed_memory

    assert keeps_freed_memory(256**3, {})
    assert not keeps_freed_memory(LEAN_FROM_CELLS, {})
    assert not keeps_freed_memory(128**3, {"MALLOC_MMAP_MAX_": "65536"})
    assert not keeps_freed_memory(128**3, {"MALLOC_ARENA_MAX": "4"})
