"""A fast start: each command imports only what its job's method needs, a first run says it
compiles the kernels (and a warm run does not), and no kernel is compiled twice for argument
types that differ only by accident. No timings here: speed is in benchmarks/start_bench.py."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest
from conftest import write_layer_job


JOB = """
name = "start"
physics = "heat"
[grid]
cells = [10, 8, 6]
size = [1.0, 0.8, 0.6]
[material]
value = {k}
[source]
value = 1.0
[boundary]
x_min = {{ type = "dirichlet", value = 0.0 }}
x_max = {{ type = "dirichlet", value = 0.0 }}
[solver]
method = "{method}"
[output]
path = "{name}.zarr"
"""

HEAVY = ("numba", "pyamg", "matplotlib", "zarr", "numcodecs", "scipy.sparse", "scipy.fft", "numexpr",
         "sevenfold.kernels.stencil", "sevenfold.kernels.assembly", "sevenfold.kernels.vector",
         "sevenfold.queue.db", "sevenfold.queue.handoff")

PROBE = """
import json, sys
from sevenfold.cli import main
code = main(sys.argv[1:])
print(json.dumps({"code": code, "loaded": [m for m in %r if m in sys.modules]}))
""" % (HEAVY,)


def job(folder: Path, method: str, k: str = "1.0", name: str | None = None) -> Path:
    name = name or method
    path = folder / f"{name}.toml"
    path.write_text(JOB.format(method=method, k=k, name=name))
    return path


def command(*args: str, environ: dict[str, str] | None = None) -> tuple[dict, str]:
    """``sevenfold ARGS`` in a fresh interpreter: its exit code, the heavy modules it loaded,
    and what it printed."""
    proc = subprocess.run([sys.executable, "-c", PROBE, *args], capture_output=True, text=True,
                          timeout=600, env=environ or dict(os.environ))
    assert proc.returncode == 0, proc.stderr
    lines = proc.stdout.strip().splitlines()
    return json.loads(lines[-1]), "\n".join(lines[:-1]) + proc.stderr


def test_check_loads_no_numba_scipy_sparse_pyamg_matplotlib_or_zarr(tmp_path: Path) -> None:
    info, text = command("check", str(job(tmp_path, "gmg")))
    assert info["code"] == 0 and "valid" in text
    assert info["loaded"] == []
    info, _ = command("check", str(job(tmp_path, "amg", name="amg-check")))  # not even for amg
    assert info["code"] == 0 and info["loaded"] == []


def test_an_expression_job_loads_numexpr_and_still_no_numba(tmp_path: Path) -> None:
    info, _ = command("check", str(job(tmp_path, "gmg", k='"1 + x"', name="expr")))
    assert info["code"] == 0 and info["loaded"] == ["numexpr"]


def test_a_gmg_run_loads_neither_pyamg_nor_matplotlib_nor_scipy_sparse_nor_zarr(tmp_path: Path) -> None:
    info, _ = command("run", "--quiet", "--home", str(tmp_path / "no-queue"),
                      str(job(tmp_path, "gmg", k='"1 + x"')))
    assert info["code"] == 0
    loaded = set(info["loaded"])
    assert not loaded & {"pyamg", "matplotlib", "scipy.fft", "scipy.sparse",
                         "sevenfold.kernels.assembly",  # (the coarsest level is banded)
                         "zarr",  # (store.py writes the result itself)
                         "sevenfold.queue.db", "sevenfold.queue.handoff"}  # (no queue home)
    assert {"numba", "numcodecs", "sevenfold.kernels.stencil"} <= loaded  # it does need these


def test_an_fft_run_loads_no_sparse_or_multigrid_code(tmp_path: Path) -> None:
    info, _ = command("run", "--quiet", str(job(tmp_path, "fft")))
    assert info["code"] == 0
    loaded = set(info["loaded"])
    assert not loaded & {"pyamg", "matplotlib", "scipy.sparse", "sevenfold.kernels.assembly",
                         "sevenfold.kernels.vector",
                         "sevenfold.kernels.stencil"}  # (no holds: its balance reads no conductances)
    assert "scipy.fft" in loaded


def test_the_compile_notice_shows_on_a_first_run_only(tmp_path: Path) -> None:
    """An empty numba cache (a fresh install) gets the notice before the run; the second run,
    and a run after it in another process, load the cached kernels and say nothing."""
    environ = {**os.environ, "NUMBA_CACHE_DIR": str(tmp_path / "cache")}
    path = job(tmp_path, "fft")  # fft compiles one kernel (for the balance): the cheapest first run
    first, text = command("run", "--no-progress", str(path), environ=environ)
    assert first["code"] == 0
    assert text.count("compiling the numerical kernels once") == 1, text
    assert text.index("compiling the numerical kernels") < text.index("converged")  # said before
    assert list((tmp_path / "cache").rglob("sevenfold-fft-*.warm"))
    for _ in range(2):
        again, text = command("run", "--quiet", str(path), environ=environ)
        assert again["code"] == 0 and "compiling" not in text, text


def test_a_quiet_first_run_says_the_notice_on_stderr_and_keeps_stdout_for_the_path(
        tmp_path: Path) -> None:
    """``run --quiet`` on an empty cache: stdout holds the result's path alone (scripts read
    it), the compile notice goes to stderr."""
    environ = {**os.environ, "NUMBA_CACHE_DIR": str(tmp_path / "cache")}
    path = job(tmp_path, "fft")
    proc = subprocess.run([sys.executable, "-c", "import sys; from sevenfold.cli import main; "
                           "sys.exit(main(sys.argv[1:]))", "run", "--here", "--quiet", str(path)],
                          capture_output=True, text=True, env=environ, timeout=600)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.splitlines() == [str(tmp_path / "fft.zarr")], proc.stdout
    assert "compiling the numerical kernels once" in proc.stderr


def test_a_first_gmg_run_counts_its_compile_among_the_jobs_seconds(tmp_path: Path, monkeypatch) -> None:
    """The seconds a cold gmg run spends compiling ahead of the solve are the job's
    ``compile`` entry and show in the run's last line, so that a queue job's parts add up to
    its whole (a worker's first aquifer-lens took 7.4 s of which the parts named 0.2 s); a
    warm run has no such entry."""
    import time as clock

    from sevenfold.console import run_summary
    from sevenfold.kernels import cache, warmup
    from sevenfold.runner import run_job

    path = write_layer_job(tmp_path / "layer.toml", 1e-3, 12)
    warm = run_job(path, tmp_path / "warm.zarr")
    assert "compile" not in warm.seconds
    monkeypatch.setattr(cache, "cold_notice", lambda method, needs: "first run of gmg here: ...")
    monkeypatch.setattr(warmup, "warm_up", lambda *a, **k: clock.sleep(0.3) or [])
    cold = run_job(path, tmp_path / "cold.zarr")
    assert 0.3 <= cold.seconds["compile"] < cold.seconds["job"]
    line = run_summary({**cold.solve.summary(), "seconds": cold.seconds})
    assert f"(compile {cold.seconds['compile']:.2f} s, assembly" in line, line
    assert "compile" not in run_summary({**warm.solve.summary(), "seconds": warm.seconds})


def test_the_marker_follows_the_kernels(tmp_path: Path, monkeypatch) -> None:
    """An edited kernel module (another stamp) makes the method cold again."""
    from sevenfold.kernels import cache

    monkeypatch.setattr(cache, "cache_dir", lambda: tmp_path)
    assert cache.is_cold("gmg") and not cache.is_cold("no-such-method")
    cache.mark_warm("gmg")
    assert not cache.is_cold("gmg") and cache.is_cold("amg")
    files = cache._kernel_files()
    monkeypatch.setattr(cache, "_kernel_files", lambda: files[:-1])  # as if one had changed
    assert cache.is_cold("gmg")


def test_a_first_run_at_another_size_is_cold_for_the_signatures_it_adds(tmp_path: Path,
                                                                           monkeypatch) -> None:
    """gmg compiles different signatures for a grid without smoothed levels (at most 4096
    cells), with them, and with threaded vector updates (100,000 cells and more): a run of a
    tiny job does not make a large one warm, and the large one's notice estimates only what
    it adds (the reference 128^3 run is the measured COMPILE_SECONDS)."""
    from sevenfold.kernels import cache, warmup
    from sevenfold.runner import kernel_signatures

    monkeypatch.setattr(cache, "cache_dir", lambda: tmp_path)
    tiny, large = kernel_signatures("gmg", (12, 12, 12)), kernel_signatures("gmg", (48, 48, 48))
    assert "line_gauss_seidel[float32]" in large - tiny and tiny - large == {"vectors_serial[float64]"}
    assert kernel_signatures("amg", (48, 48, 48)) == frozenset()
    # the measured reference is 32^3 (one smoothed level, serial vector updates); 48^3 adds
    # the threaded vector updates, 12^3 has no smoothed level
    reference = warmup.estimate(kernel_signatures("gmg", (32, 32, 32)))
    assert reference == pytest.approx(cache.COMPILE_SECONDS["gmg"])
    assert reference < warmup.estimate(large) < 1.2 * reference
    assert f"about {round(warmup.estimate(large))} s" in cache.cold_notice("gmg", large)
    assert warmup.estimate(tiny) < reference / 2
    cache.mark_warm("gmg", tiny)
    assert not cache.is_cold("gmg", tiny) and cache.is_cold("gmg", large)
    assert cache.missing("gmg", large) == large - tiny
    seconds = warmup.estimate(large - tiny)
    assert 0 < seconds < warmup.estimate(large)
    assert f"about {round(seconds)} s" in cache.cold_notice("gmg", large)
    cache.mark_warm("gmg", large)
    assert cache.cold_notice("gmg", large) is None


def test_a_workers_warm_up_compiles_what_the_shipped_examples_need(tmp_path: Path) -> None:
    """A new queue home's warm-up (queue/child.py) covers the gmg signatures of every shipped
    example, in the levels' float type its contrast gives it (aquifer-lens: clay in sand,
    float64 levels), so a worker that said it compiled the kernels does not compile again
    mid-job (it did for 7.2-7.8 s in aquifer-lens, the first job of `sevenfold demo`, before
    the warm-up had a float64 job)."""
    from sevenfold.demo import examples_dir
    from sevenfold.queue.child import _needs, warm_tables
    from sevenfold.runner import kernel_signatures, plan_job, prepare_problem

    covered = _needs(warm_tables())["gmg"]
    precisions = set()
    for path in sorted(examples_dir().glob("*.toml")):
        plan, problem = prepare_problem(plan_job(path, tmp_path / f"{path.stem}.zarr"))
        precisions.add(plan.gmg_levels)
        assert kernel_signatures("gmg", problem.grid.cells, plan.gmg_levels) <= covered, path.name
    assert precisions == {"float32", "float64"}  # both kinds of levels are exercised


def _normalised(sig) -> tuple:
    """A signature with the accidents removed: array layout, integer width, int vs float scalars."""
    from numba.core import types

    out = []
    for t in sig:
        if isinstance(t, types.Array):
            dtype = t.dtype
            if isinstance(dtype, types.Integer):
                dtype = types.int64
            out.append(("array", str(dtype), t.ndim))
        elif isinstance(t, (types.Integer, types.Float)):
            out.append(("number",))
        elif isinstance(t, types.BaseTuple):
            out.append(("tuple", _normalised(tuple(t))))
        else:
            out.append(str(t))
    return tuple(out)


def test_no_kernel_is_compiled_twice_for_accidental_type_differences(tmp_path: Path) -> None:
    """Every method, holds, every face type, a pure-Neumann job, graded and directional grids:
    each kernel keeps one specialisation per real type combination (float32 next to float64
    would be a real one; C vs non-contiguous, int32 vs int64 or 1 vs 1.0 are accidents)."""
    from sevenfold.kernels import assembly, finite_volume, stencil, vector
    from sevenfold.runner import run_job
    from sevenfold.spec import parse_job

    base = {"grid": {"cells": [9, 7, 6], "size": [1.0, 1.0, 1.0]}, "source": {"value": 1.0},
            "material": {"value": "1 + 10 * (x > 0.5)"}}
    faces = {"x_min": {"type": "dirichlet", "value": 0.0},
             "x_max": {"type": "robin", "coefficient": 2.0, "reference": 1.0},
             "y_min": {"type": "neumann", "flux": 0.5}}
    tables = [
        {**base, "name": f"sig-{m}", "boundary": faces, "solver": {"method": m},
         "hold": [{"box": {"min": [0.2, 0.2, 0.2], "max": [0.4, 0.5, 0.5]}, "value": 2.0}]}
        for m in ("gmg", "amg", "direct")
    ] + [
        {**base, "name": "sig-neumann", "boundary": {"x_min": {"type": "neumann", "flux": 1.0},
                                                      "x_max": {"type": "neumann", "flux": -1.0}},
         "source": {"value": 0.0}, "solver": {"method": "gmg"}},
        {**base, "name": "sig-fft", "material": {"value": 3.0},
         "boundary": {"x_min": {"type": "dirichlet", "value": 0.0}, "x_max": {"type": "dirichlet", "value": 1.0}},
         "solver": {"method": "fft"}},
        {**base, "name": "sig-big", "grid": {"cells": [48, 48, 48], "size": [1.0, 1.0, 1.0]},
         "boundary": faces, "solver": {"method": "gmg"}},  # above vector.PARALLEL_FROM: threaded CG
    ]
    for table in tables:
        spec = parse_job(table, "test")
        run_job(tmp_path / "job.toml", tmp_path / f"{spec.name}.zarr", spec=spec)
    compiled = 0
    for module in (assembly, finite_volume, stencil, vector):
        for name in dir(module):
            d = getattr(module, name)
            if not hasattr(d, "signatures") or not d.signatures:
                continue
            compiled += 1
            kinds = [_normalised(s) for s in d.signatures]
            assert len(kinds) == len(set(kinds)), f"{module.__name__}.{name}: {d.signatures}"
    assert compiled >= 10  # the test did compile the kernels it checks


def test_a_workers_first_start_announces_the_shared_kernels_once() -> None:
    """Every method compiled at once (a queue worker's first start) shares the operator, the
    vector updates and the assembly: the notice says the measured whole, less than the sum
    of the methods' separate first runs, and a single method keeps its own figure."""
    from sevenfold.kernels import cache

    every = tuple(cache.COMPILE_SECONDS)
    assert f"about {cache.ALL_METHODS_SECONDS} s" in cache.notice(every)
    assert cache.ALL_METHODS_SECONDS < sum(cache.COMPILE_SECONDS.values())
    assert f"about {cache.COMPILE_SECONDS['amg']} s" in cache.notice(("amg",))


def test_a_workers_first_start_after_a_gmg_run_announces_what_is_left(tmp_path: Path,
                                                                       monkeypatch) -> None:
    """After a first `sevenfold run` (gmg at 128^3, float32 levels) the cache holds the kernels
    every method shares: a worker's first start then compiles the other methods' own kernels,
    gmg's float64 levels and the serial vector updates of its warm-up jobs (10.5-11.3 s
    measured, estimated 13 s), about half of an empty cache's whole (20.9-24.4 s); with
    nothing of gmg's cached the measured whole stays."""
    from sevenfold.kernels import cache, warmup
    from sevenfold.queue.child import _needs, warm_tables
    from sevenfold.runner import kernel_signatures

    monkeypatch.setattr(cache, "cache_dir", lambda: tmp_path)
    needs = _needs(warm_tables())
    assert cache.warm_up_seconds(needs) is None  # an empty cache: notice() takes the whole
    assert f"about {cache.ALL_METHODS_SECONDS} s" in cache.notice(tuple(needs), cache.warm_up_seconds(needs))
    cache.mark_warm("gmg", kernel_signatures("gmg", (128, 128, 128)))
    left = cache.missing("gmg", needs["gmg"])
    float64_levels = {s for s in needs["gmg"] if s.endswith("[float64 levels]")}
    assert float64_levels and left == {"vectors_serial[float64]"} | float64_levels
    seconds = cache.warm_up_seconds(needs)
    assert seconds == pytest.approx(warmup.estimate(left) + max(cache.AFTER_GMG_SECONDS.values()))
    assert 3 < seconds < cache.ALL_METHODS_SECONDS / 2
    assert f"about {round(seconds)} s" in cache.notice(tuple(needs), seconds)
    for m in ("amg", "direct", "fft"):
        cache.mark_warm(m, needs.get(m, frozenset()))
    assert cache.warm_up_seconds(needs) == pytest.approx(warmup.estimate(left))  # gmg's own only


BLAS_PROBE = """
import ctypes, json
import sevenfold.cli  # what the `sevenfold` command imports first
import numpy, scipy.linalg  # both wheels carry an OpenBLAS
threads = {}
for path in sorted({line.split()[-1] for line in open("/proc/self/maps") if "openblas" in line.lower()}):
    lib = ctypes.CDLL(path)
    for name in ("scipy_openblas_get_num_threads64_", "scipy_openblas_get_num_threads",
                 "openblas_get_num_threads64_", "openblas_get_num_threads"):
        if hasattr(lib, name):
            threads[path] = getattr(lib, name)()
print(json.dumps(threads))
"""


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc/self/maps")
@pytest.mark.parametrize("given", [None, "2"])
def test_the_command_runs_blas_on_one_thread_unless_told(given) -> None:
    """Numba's threads own the cores; OpenBLAS's idle threads spinning beside them slowed gmg
    solves (benchmarks/RESULTS_BLAS_THREADS.md). A thread count the user set is kept."""
    environ = {k: v for k, v in os.environ.items() if k not in ("OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS",
                                                                   "OMP_NUM_THREADS")}
    if given is not None:
        environ["OPENBLAS_NUM_THREADS"] = given
    proc = subprocess.run([sys.executable, "-c", BLAS_PROBE], capture_output=True, text=True,
                          timeout=300, env=environ)
    assert proc.returncode == 0, proc.stderr
    threads = json.loads(proc.stdout.strip().splitlines()[-1])
    assert threads, "no OpenBLAS library found to ask"
    assert set(threads.values()) == {1 if given is None else int(given)}


PAGES_PROBE = """
import json, sys
from sevenfold import cli  # what the `sevenfold` command imports first
try:
    cli.main(sys.argv[1:])  # the command's own start (here one that stops at its arguments)
except SystemExit:
    pass
import numpy
print(json.dumps(numpy.core.multiarray._get_madvise_hugepage()))
"""


@pytest.mark.parametrize("command, given", [("run", None), ("run", "1"), ("run", "0"),
                                            ("worker", None)])
def test_the_command_asks_numpy_for_small_pages_where_free_memory_goes_back(command, given) -> None:
    """On a machine that reports its free pages to a hypervisor, a fresh process's first touch
    of huge pages faults in the host too (a 256^3 job 1.37 times as long), so the
    command asks numpy for small pages there; elsewhere, and for ``worker``, whose slots keep
    their memory from job to job, numpy's huge pages stay (benchmarks/RESULTS_PAGES.md,
    RESULTS_HUGEPAGES.md); a value the user set is kept."""
    from sevenfold import reports_free_pages

    environ = {k: v for k, v in os.environ.items() if k != "NUMPY_MADVISE_HUGEPAGE"}
    if given is not None:
        environ["NUMPY_MADVISE_HUGEPAGE"] = given
    proc = subprocess.run([sys.executable, "-c", PAGES_PROBE, command, "--help"], capture_output=True,
                          text=True, timeout=300, env=environ)
    assert proc.returncode == 0, proc.stderr
    huge = given == "1" if given is not None else (command == "worker" or not reports_free_pages())
    assert json.loads(proc.stdout.strip().splitlines()[-1]) is huge


def _virtio(folder, name: str, device: int, features: str, bound: bool = True) -> None:
    (folder / name).mkdir()
    (folder / name / "device").write_text(f"0x{device:04x}\n")
    (folder / name / "features").write_text(features + "0" * 58 + "\n")
    if bound:
        (folder / name / "driver").mkdir()


def test_free_page_reporting_is_read_from_the_balloons_negotiated_features(tmp_path, monkeypatch) -> None:
    """A virtio balloon (device 5) with feature bit 5 (free page reporting, Linux's
    virtio_balloon.h) bound to its driver reports; without the bit, unbound, another device
    with bit 5, or no virtio bus at all, it does not; small_pages follows it unless told."""
    import sevenfold

    assert not sevenfold.reports_free_pages(str(tmp_path / "none"))
    _virtio(tmp_path, "virtio0", 2, "001001")  # a block device with bit 5
    _virtio(tmp_path, "virtio1", 5, "011000")  # a balloon without reporting
    assert not sevenfold.reports_free_pages(str(tmp_path))
    _virtio(tmp_path, "virtio2", 5, "011001", bound=False)
    assert not sevenfold.reports_free_pages(str(tmp_path))
    _virtio(tmp_path, "virtio3", 5, "011001")
    assert sevenfold.reports_free_pages(str(tmp_path))

    monkeypatch.setenv("NUMPY_MADVISE_HUGEPAGE", "")  # (records the variable as it was, for the undo)
    for reports, given, expected in ((True, None, "0"), (False, None, None), (True, "1", "1")):
        monkeypatch.setattr(sevenfold, "reports_free_pages", lambda reports=reports: reports)
        if given is None:
            monkeypatch.delenv("NUMPY_MADVISE_HUGEPAGE", raising=False)
        else:
            monkeypatch.setenv("NUMPY_MADVISE_HUGEPAGE", given)
        sevenfold.small_pages()
        assert os.environ.get("NUMPY_MADVISE_HUGEPAGE") == expected, (reports, given)


PLAN_PROBE = """
import json, sys
from pathlib import Path
from sevenfold.kernels import assembly, band, finite_volume, lines, multigrid, stencil, vector, warmup
from sevenfold.runner import gmg_precision, plan_job, prepare_problem, run_job
job, out = Path(sys.argv[1]), Path(sys.argv[2])
plan, problem = prepare_problem(plan_job(job, out))
precision = gmg_precision(problem)
warmup.warm_up("gmg", problem.grid.cells, child=False, precision=precision)
def counts():
    return {f"{m.__name__}.{n}": len(getattr(m, n).signatures)
            for m in (assembly, band, finite_volume, lines, multigrid, stencil, vector) for n in dir(m)
            if hasattr(getattr(m, n), "signatures")}
before = counts()
run_job(job, out)
after = counts()
print(json.dumps({"precision": precision,
                  "added": sorted(k for k in after if after[k] != before[k])}))
"""


@pytest.mark.parametrize("k_weak, precision", [(1e-3, "float32"), (1e-8, "float64")])
def test_the_warm_up_plan_holds_every_signature_the_run_compiles(tmp_path: Path, k_weak: float,
                                                                 precision: str) -> None:
    """A gmg run whose kernels the warm-up compiled (kernels/warmup.py, the plan for the
    grid and for the levels' float type the coefficient's contrast picks) compiles nothing
    more, so its first-run notice covers the whole compile. With the float32 plan given to a
    1e8:1 job the run added eight kernels' signatures."""
    path = write_layer_job(tmp_path / "layer.toml", k_weak, 48)
    proc = subprocess.run([sys.executable, "-c", PLAN_PROBE, str(path), str(tmp_path / "out.zarr")],
                          capture_output=True, text=True, timeout=600)
    assert proc.returncode == 0, proc.stderr
    info = json.loads(proc.stdout.strip().splitlines()[-1])
    assert info == {"precision": precision, "added": []}


LOAD = """
import json, sys
import numpy as np
{patch}
from sevenfold.kernels.stencil import starts
from sevenfold.kernels.vector import dot, dot_serial
x = np.arange(200_000.0)
values = [dot_serial(x[:5], x[:5]), dot(x, x)]
import numba
print(json.dumps({{"values": values, "threads": numba.get_num_threads(), "layer": numba.threading_layer(),
                  "starts": starts(np.array([0, 0, 1, 1, 1, 2]), 3).tolist(),
                  "hits": sum(sum(k._cache_hits.values()) for k in (dot, dot_serial, starts)),
                  "compiler": "numba.np.linalg" in sys.modules,
                  "array_lowering": "numba.np.arrayobj" in sys.modules}}))
"""
# numba's runtime start fails once, as if numba's internals had moved: the lean load gives way
FAILING_RUNTIME = """
from numba.core.runtime import rtsys
real, calls = rtsys.initialize, []
def initialize(ctx):
    calls.append(ctx)
    if len(calls) == 1:
        raise RuntimeError("moved")
    return real(ctx)
rtsys.initialize = initialize
"""


def _load(cache: Path, patch: str = "") -> dict:
    proc = subprocess.run([sys.executable, "-c", LOAD.format(patch=patch)], capture_output=True, text=True,
                          env={**os.environ, "NUMBA_CACHE_DIR": str(cache)}, timeout=300)
    assert proc.returncode == 0, proc.stderr
    return json.loads(proc.stdout.splitlines()[-1])


def test_cached_kernels_load_without_numbas_compiler_registries(tmp_path: Path) -> None:
    """kernels/jit.py: a kernel found in the cache, serial or threaded, loads without the
    registries numba's compiler refreshes (numba.np.linalg stands for them), and without the
    array lowering that a threaded reduction's and an allocation's environments name, and
    computes what it computed when it was compiled. Expected sums: 0+1+4+9+16 and sum of i^2
    for i < 200,000 = (n-1) n (2n-1) / 6 (from memory); the starts of aggregates of 2, 3 and
    1 cells: 0, 2, 5, and 6 cells in all."""
    n = 200_000
    expected = [30.0, (n - 1) * n * (2 * n - 1) / 6]
    compiled = _load(tmp_path)
    assert compiled["hits"] == 0 and compiled["compiler"]  # compiling loads the registries
    loaded = _load(tmp_path)
    assert loaded["hits"] == 3
    assert not loaded["compiler"] and not loaded["array_lowering"]
    assert loaded["starts"] == compiled["starts"] == [0, 2, 5, 6]
    assert loaded["values"] == compiled["values"]
    assert loaded["values"] == pytest.approx(expected, rel=1e-12)
    assert loaded["threads"] == compiled["threads"] and loaded["layer"] == compiled["layer"]


def test_a_lean_load_that_fails_gives_way_to_numbas_own(tmp_path: Path) -> None:
    _load(tmp_path)
    loaded = _load(tmp_path, FAILING_RUNTIME)
    assert loaded["hits"] == 3  # still from the cache, not compiled again
    assert loaded["compiler"]  # numba's own load refreshed the context
    assert loaded["values"][0] == 30.0


def test_every_cached_kernel_loads_through_the_lean_cache() -> None:
    """A kernel decorated with numba's own njit would load the slow way; none is (every
    module of the kernels package is looked at)."""
    import importlib
    import pkgutil

    from numba.core.dispatcher import Dispatcher

    import sevenfold.kernels
    from sevenfold.kernels.jit import KernelCache

    kernels = [k for module in pkgutil.iter_modules(sevenfold.kernels.__path__)
               for k in vars(importlib.import_module(f"sevenfold.kernels.{module.name}")).values()
               if isinstance(k, Dispatcher)]
    assert len(kernels) >= 40
    assert all(isinstance(k._cache, KernelCache) for k in kernels), [
        k.py_func.__name__ for k in kernels if not isinstance(k._cache, KernelCache)]


def test_the_console_command_freezes_the_collector_before_it_exits(monkeypatch) -> None:
    """cli.program: the command's exit code, with every object frozen out of the collector so
    that the interpreter's shutdown does not walk them; the installed `sevenfold` runs it."""
    from importlib.metadata import entry_points

    from sevenfold import cli

    frozen: list[bool] = []
    monkeypatch.setattr(cli, "main", lambda: 2)
    monkeypatch.setattr(cli.gc, "freeze", lambda: frozen.append(True))
    with pytest.raises(SystemExit) as exit_:
        cli.program()
    assert exit_.value.code == 2 and frozen == [True]
    (command,) = [e for e in entry_points(group="console_scripts") if e.name == "sevenfold"]
    assert command.value == "sevenfold.cli:program"
