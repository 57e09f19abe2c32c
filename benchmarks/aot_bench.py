"""Kernels compiled ahead of time (numba.pycc) for a warm 32^3 gmg run: a prototype, measured.

    python benchmarks/aot_bench.py                  # build, check, measure; writes RESULTS_AOT.md
    python benchmarks/aot_bench.py --cpus generic   # only the portable build (no host-CPU build)

Steps, all in one invocation so that every figure comes from the same run:

1. a fresh process runs start_bench.py's 32^3 column job (gmg) in-process on the jit kernels
   (loaded from numba's cache), recording each kernel's numba signatures and a copy of the
   arguments of its first call; then compiles, with ``numba.pycc``, a serial copy of every
   kernel the run called (the kernel's own Python function under plain ``njit``, its fastmath
   flags kept; ``prange`` runs as ``range``) for exactly those signatures, into an extension
   module in a temporary folder (once per target CPU: ``generic`` is what a portable wheel
   ships, ``host`` this machine's CPU). Build seconds are measured there;
2. another process replays each recorded call on the jit kernel (2 threads and 1 thread) and on
   the AOT build: same arrays in, results compared with ``np.array_equal``; then times them,
   alternating;
3. whole processes, alternating round by round: baselines, ``import numba``, numba plus the
   kernel modules with every recorded signature loaded from the cache (``dispatcher.compile``
   with the recorded types, as kernels/warmup.py does) and one threaded launch, the AOT module
   alone, ``import zarr``, the whole ``sevenfold run -q`` of the job, and the same run on the AOT
   kernels with numba replaced by a stand-in (aot_launch.py; the run fails if the real numba
   loads); the two runs' results are compared;
4. writes benchmarks/RESULTS_AOT.md (replacing all but the hand-written reading below its
   marker) and prints it.
"""

from __future__ import annotations

import argparse
import copy
import inspect
import os
import pickle
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))
from start_bench import import_profile, load_average, revision, timed, write_job  # noqa: E402  (also sets SEVENFOLD_HOME)

KERNEL_MODULES = ("sevenfold.kernels.finite_volume", "sevenfold.kernels.stencil", "sevenfold.kernels.lines",
                  "sevenfold.kernels.multigrid", "sevenfold.kernels.vector", "sevenfold.kernels.fronts")
TARGET = 1.2  # seconds, a warm 32^3 `sevenfold run` as a whole process (issue 10)
MODULE = "sevenfold_aot"  # the extension's name (one folder per target CPU)
PY = sys.executable


def type_tag(t) -> str:
    """aot_launch.tag's key for a numba type."""
    from numba.core import types
    from numba.np.numpy_support import as_dtype

    if isinstance(t, types.Array):
        return f"{as_dtype(t.dtype).str}{t.ndim}{t.layout}"
    if isinstance(t, types.BaseTuple):
        return "(" + ",".join(type_tag(x) for x in t) + ")"
    for kind, letter in ((types.Boolean, "b"), (types.Integer, "i"), (types.Float, "f")):
        if isinstance(t, kind):
            return letter
    raise TypeError(f"no tag for {t}")


def kernels() -> dict[str, object]:
    """The kernels sevenfold calls from Python (helpers named _x are compiled into them)."""
    import importlib

    from numba.core.registry import CPUDispatcher

    return {f"{m}.{name}": f for m in KERNEL_MODULES
            for name, f in vars(importlib.import_module(m)).items()
            if isinstance(f, CPUDispatcher) and not name.startswith("_")
            and f.py_func.__module__ == m}  # (not one imported from another kernel module)


def record(job: Path) -> tuple[dict[str, object], dict[str, tuple]]:
    """Run ``job`` in this process on the jit kernels; the kernels it called and a copy of each
    one's first arguments."""
    import sevenfold.kernels.vector as vector
    from sevenfold.cli import main as sevenfold

    found, calls = kernels(), {}

    def recording(name: str, kernel):
        def call(*args):
            calls.setdefault(name, copy.deepcopy(args))
            return kernel(*args)
        return call

    for name, kernel in found.items():
        module, attr = name.rsplit(".", 1)
        setattr(sys.modules[module], attr, recording(name, kernel))
    for ops in ("SERIAL", "THREADED"):  # the vector builds are held in named tuples
        setattr(vector, ops, vector.VectorOps(*(getattr(vector, f.__name__) for f in getattr(vector, ops))))
    try:
        if sevenfold(["run", "-q", str(job)]) != 0:
            raise SystemExit("the recording run failed")
    finally:  # the kernels back (the build compiles kernels that call others by their names)
        for name, kernel in found.items():
            module, attr = name.rsplit(".", 1)
            setattr(sys.modules[module], attr, kernel)
    return {name: found[name] for name in calls}, calls


def serial_copy(kernel):
    """The kernel's own Python function under plain njit (no parallel), its fastmath flags kept:
    what the AOT build compiles. A threaded kernel's copy takes numpy's error model, as numba
    compiles the body of every prange loop (parfors/parfor_lowering.py): no ZeroDivisionError
    test on each division, which otherwise keeps loops from vectorising (transmissibility and
    residual_restrict ran 3.3-3.5 times their threaded build's one-thread time without it)."""
    from numba import njit

    options = {k: v for k, v in kernel.targetoptions.items() if k in ("fastmath", "error_model")}
    if kernel.targetoptions.get("parallel"):
        options["error_model"] = "numpy"
    return njit(**options)(kernel.py_func)


def build(folder: Path, job: Path, cpus: list[str]) -> None:
    """Step 1 (in its own process): record, then one pycc build per target CPU."""
    from numba.pycc import CC

    t0 = time.perf_counter()
    used, calls = record(job)
    lines = [f"record_seconds={time.perf_counter() - t0:.3f}"]
    for cpu in cpus:
        out = folder / cpu
        out.mkdir(parents=True, exist_ok=True)
        cc = CC(MODULE)
        cc.output_dir = str(out)
        cc.target_cpu = "" if cpu == "generic" else cpu
        table: dict[str, dict[str, str]] = {}
        for name, kernel in used.items():
            serial = serial_copy(kernel)
            params = ", ".join(inspect.signature(kernel.py_func).parameters)
            short = name.rsplit(".", 1)[1]
            space: dict[str, object] = {"_kernel": serial}
            exec(f"def {short}({params}):\n    return _kernel({params})\n", space)
            for i, sig in enumerate(kernel.nopython_signatures):
                symbol = f"{short}_{i}"
                cc.export(symbol, sig)(space[short])
                table.setdefault(name, {})[";".join(type_tag(t) for t in sig.args)] = symbol
        t1 = time.perf_counter()
        cc.compile()
        lines.append(f"compile_seconds_{cpu}={time.perf_counter() - t1:.3f}")
        (out / "sevenfold_aot_table.py").write_text(f"MODULE = {MODULE!r}\nTABLE = {table!r}\n")
    with open(folder / "calls.pkl", "wb") as fh:
        pickle.dump(calls, fh)
    sigs = sorted(f"{n.rsplit('.', 1)[1]}({', '.join(map(str, s.args))}) -> {s.return_type}"
                  for n, k in used.items() for s in k.nopython_signatures)
    (folder / "signatures.txt").write_text("\n".join(sigs) + "\n")
    print("\n".join(lines))


def aot_kernels(folder: Path) -> tuple[dict[str, object], dict[str, object]]:
    """The AOT builds of ``folder`` as per-kernel dispatchers (aot_launch's), numba untouched;
    and each kernel's exported function itself where it has one signature (no type key)."""
    import importlib

    import aot_launch

    sys.path.insert(0, str(folder))
    for m in ("sevenfold_aot_table", MODULE):
        sys.modules.pop(m, None)
    table = importlib.import_module("sevenfold_aot_table")
    ext = importlib.import_module(MODULE)
    sys.path.remove(str(folder))
    return ({name: aot_launch.dispatcher(name, {k: getattr(ext, s) for k, s in builds.items()})
             for name, builds in table.TABLE.items()},
            {name: getattr(ext, *builds.values()) for name, builds in table.TABLE.items() if len(builds) == 1})


def per_call(fn, args: tuple, budget: float = 0.02) -> float:
    """Seconds per call, repeated on the same arrays for at least ``budget`` seconds."""
    n, t0 = 0, time.perf_counter()
    while True:
        fn(*args)
        n += 1
        elapsed = time.perf_counter() - t0
        if elapsed >= budget:
            return elapsed / n


def flat(values) -> list:
    """Arrays and numbers of a result, tuples opened."""
    return [v for x in values for v in (flat(x) if isinstance(x, tuple) else [x])]


def difference(a, b) -> float:
    """The largest relative difference between two results (arrays and numbers, tuples opened)."""
    import numpy as np

    worst = 0.0
    for x, y in zip(flat(a), flat(b)):
        if isinstance(x, np.ndarray) and not np.array_equal(x, y):
            scale = float(np.abs(x).max()) or 1.0
            worst = max(worst, float(np.abs(x.astype(np.float64) - y).max()) / scale)
        elif not isinstance(x, np.ndarray) and x != y:
            worst = max(worst, abs(x - y) / (abs(x) or 1.0))
    return worst


def same(a: tuple, b: tuple) -> str:
    """How result ``b`` (return value, then the arguments after the call) compares with ``a``."""
    arrays, value = difference(a[1:], b[1:]), difference(a[:1], b[:1])
    if arrays == value == 0.0:
        return "equal"
    return ("arrays equal" if arrays == 0.0 else f"arrays rel. diff {arrays:.1e}") + (
        f", return rel. diff {value:.1e}" if value else "")


def values(out: str) -> dict[str, float]:
    """The ``name=number`` lines a child printed."""
    found = {}
    for line in out.splitlines():
        key, eq, value = line.partition("=")
        if eq and key.isidentifier():
            try:
                found[key] = float(value)
            except ValueError:
                pass
    return found


def compare(folder: Path, cpus: list[str], rounds: int) -> None:
    """Step 2 (in its own process): each recorded call on jit (2 and 1 threads) and AOT builds."""
    import numba

    with open(folder / "calls.pkl", "rb") as fh:
        calls = pickle.load(fh)
    jit = kernels()
    aot = {cpu: aot_kernels(folder / cpu) for cpu in cpus}
    threads = numba.get_num_threads()
    for name, args in calls.items():
        variants = {"jit": jit[name], "jit1": jit[name], "serial": serial_copy(jit[name])}
        for cpu in cpus:
            variants[cpu] = aot[cpu][0][name]
            variants[f"{cpu} raw"] = aot[cpu][1][name]
        outs = {}
        for label, fn in variants.items():
            numba.set_num_threads(threads if label == "jit" else 1)
            work = copy.deepcopy(args)
            outs[label] = (fn(*work), *work)  # return value, then every argument after the call
        numba.set_num_threads(threads)
        checks = ";".join(f"{k}: {same(outs['jit'], v)}" for k, v in outs.items() if k != "jit")
        times: dict[str, list[float]] = {k: [] for k in outs}
        work = {k: copy.deepcopy(args) for k in outs}
        for _ in range(rounds):  # alternate the variants, so that a load change hits them alike
            for label, fn in variants.items():
                numba.set_num_threads(threads if label == "jit" else 1)
                times[label].append(per_call(fn, work[label]))
        numba.set_num_threads(threads)
        timing = ",".join(f"{k}:{min(v):.6e}:{statistics.median(v):.6e}" for k, v in times.items())
        print(f"kernel|{name}|{checks}|{timing}")


# the jit kernels' loading child: numba, the kernel modules, every recorded signature from the
# cache (typed from tiny arrays as kernels/warmup.py does), then one threaded launch
LOAD_JIT = """
import sys, time
sys.path[:0] = [{bench!r}, {table!r}]
import numpy as np, aot_launch, sevenfold_aot_table as T
import importlib
t0 = time.perf_counter()
import numba
t1 = time.perf_counter()
for name, builds in T.TABLE.items():
    module, attr = name.rsplit(".", 1)
    kernel = getattr(importlib.import_module(module), attr)
    for key in builds:
        kernel.compile(tuple(numba.typeof(a) for a in aot_launch.example(key)))
t2 = time.perf_counter()
from sevenfold.kernels.multigrid import narrow
narrow(np.zeros(64), np.zeros(64, dtype=np.float32))
t3 = time.perf_counter()
print(f"numba_import={{t1 - t0:.6f}}\\ncache_load={{t2 - t1:.6f}}\\nfirst_launch={{t3 - t2:.6f}}")
"""


def processes(folder: Path, cpus: list[str], jobs: dict[str, Path], env: dict[str, str],
              repeats: int) -> tuple[dict[str, dict], dict[str, list[float]]]:
    """Step 3: every command once unmeasured, then ``repeats`` rounds, each command once per round."""
    launch = str(HERE / "aot_launch.py")
    commands = {
        "python -c pass": [PY, "-c", "pass"],
        "import numpy, scipy": [PY, "-c", "import numpy, scipy"],
        "import numpy, numba": [PY, "-c", "import numpy, numba"],
        "numba + kernel modules + cached kernels loaded + first threaded launch":
            [PY, "-c", LOAD_JIT.format(bench=str(HERE), table=str(folder / cpus[0]))],
        **{f"AOT module imported ({cpu} build)": [PY, launch, str(folder / cpu), "--load-only"] for cpu in cpus},
        "import numpy, zarr": [PY, "-c", "import numpy, zarr"],
        "sevenfold run -q column32, gmg (jit, warm cache)": [PY, "-m", "sevenfold.cli", "run", "-q", str(jobs["jit"])],
        **{f"sevenfold run -q column32, gmg (AOT {cpu}, no numba)":
           [PY, launch, str(folder / cpu), "run", "-q", str(jobs[cpu])] for cpu in cpus},
    }
    walls: dict[str, list[float]] = {k: [] for k in commands}
    cpu_s: dict[str, list[float]] = {k: [] for k in commands}
    parts: dict[str, list[float]] = {}
    for r in range(repeats + 1):
        for label, argv in commands.items():
            wall, used, out = timed(argv, env)
            if r == 0:
                continue  # warm: file cache, numba cache
            walls[label].append(wall)
            cpu_s[label].append(used)
            for key, value in values(out).items():
                parts.setdefault(key, []).append(value)
    rows = {k: {"min": min(walls[k]), "median": statistics.median(walls[k]),
                "cpu": statistics.median(cpu_s[k])} for k in commands}
    return rows, parts


def results_agree(jobs: dict[str, Path], cpus: list[str]) -> list[str]:
    """The AOT runs' solutions and solver records against the jit run's."""
    import numpy as np
    import zarr
    from sevenfold.store import read_attrs

    def load(job: Path):
        path = job.with_suffix(".zarr")
        return np.asarray(zarr.open_group(str(path), mode="r")["u"][...]), read_attrs(path)["solver"]

    u0, s0 = load(jobs["jit"])
    lines = []
    for cpu in cpus:
        u, s = load(jobs[cpu])
        diff = float(np.abs(u - u0).max() / np.abs(u0).max())
        lines.append(f"AOT {cpu}: {s['iterations']} iterations (jit {s0['iterations']}), final relative "
                     f"residual {s['final_relative_residual']:.3e} (jit {s0['final_relative_residual']:.3e}), "
                     f"max |u_aot - u_jit| / max |u_jit| = {diff:.1e}"
                     + (" (identical)" if diff == 0.0 else ""))
    return lines


def child(args: list[str], env: dict[str, str]) -> tuple[str, float]:
    wall, _, out = timed([PY, __file__, *args], env)
    return out, wall


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--repeats", type=int, default=7, help="measured rounds of the process table")
    p.add_argument("--rounds", type=int, default=7, help="alternating rounds of each kernel timing")
    p.add_argument("--cpus", default="generic,host", help="pycc target CPUs (generic: portable)")
    p.add_argument("--output", default=str(HERE / "RESULTS_AOT.md"))
    p.add_argument("--build", nargs=2, metavar=("FOLDER", "JOB"), help=argparse.SUPPRESS)
    p.add_argument("--compare", metavar="FOLDER", help=argparse.SUPPRESS)
    args = p.parse_args()
    cpus = args.cpus.split(",")
    if args.build:
        return build(Path(args.build[0]), Path(args.build[1]), cpus)
    if args.compare:
        return compare(Path(args.compare), cpus, args.rounds)

    load_start = load_average()
    work = Path(tempfile.mkdtemp(prefix="aot-bench-"))
    env = {**os.environ, "PYTHONPATH": str(ROOT / "src")}
    env.pop("NUMBA_CACHE_DIR", None)
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    jobs = {}
    for label in ["jit", "record", *cpus]:
        (work / label).mkdir()
        jobs[label] = write_job(work / label, "gmg")
    timed([PY, "-m", "sevenfold.cli", "run", "-q", str(jobs["jit"])], env)  # compiles if the cache is cold
    build_parts, build_wall = {}, {}
    for cpu in cpus:  # each target in a process of its own, so that no build reuses another's typing
        out, build_wall[cpu] = child(["--build", str(work / "aot"), str(jobs["record"]), "--cpus", cpu], env)
        build_parts.update({f"{k}_{cpu}" if k == "record_seconds" else k: v for k, v in values(out).items()})
    kernel_out, _ = child(["--compare", str(work / "aot"), "--cpus", args.cpus, "--rounds", str(args.rounds)], env)
    rows, parts = processes(work / "aot", cpus, jobs, env, args.repeats)
    agree = results_agree(jobs, cpus)
    profiles = {"jit": dict(import_profile(env, jobs["jit"])),
                cpus[0]: dict(import_profile(env, jobs[cpus[0]], [str(HERE / "aot_launch.py"), str(work / "aot" / cpus[0])]))}
    load_end = load_average()
    signatures = (work / "aot" / "signatures.txt").read_text().splitlines()
    text = report(work / "aot", args, cpus, rows, parts, kernel_out, agree, profiles, build_parts,
                  build_wall, signatures, load_start, load_end)
    out = Path(args.output)
    kept = out.read_text().split(NOTES, 1)[1] if out.exists() and NOTES in out.read_text() else "\n"
    out.write_text(text + "\n" + NOTES + kept)  # the reading written below the marker stays
    print(text)
    shutil.rmtree(work, ignore_errors=True)


NOTES = "<!-- reading: written by hand below this line; aot_bench.py keeps it when it rewrites the above -->"


def linked(library: Path) -> list[str]:
    """The shared libraries ``library`` needs, as ldd lists them (names only)."""
    try:
        out = subprocess.run(["ldd", str(library)], capture_output=True, text=True).stdout
    except OSError:
        return ["(ldd not available)"]
    return [line.split()[0] for line in out.splitlines() if line.strip() and "vdso" not in line]


def report(folder, args, cpus, rows, parts, kernel_out, agree, profiles, build_parts, build_wall,
           signatures, load_start, load_end) -> str:
    from run import machine

    m = machine()
    base = rows["import numpy, scipy"]["min"]
    lines = [
        "# Kernels compiled ahead of time: a warm 32^3 gmg run (benchmarks/aot_bench.py)",
        "",
        "Written by `python benchmarks/" + " ".join([Path(__file__).name, *sys.argv[1:]]) + "`; do not edit by hand above the "
        "reading at the end (the script keeps what is below its marker).",
        "",
        f"Revision {revision()}; {m['date']}. Machine: {m['cpu']}, {m['cores']} cores, {m['memory']}; "
        f"{m['os']}; Python {m['python']}, numpy {m['numpy']}, numba {m['numba']}.",
        f"Load average at start {load_start}, at end {load_end} (shared machine: compare within "
        "this file).",
        "",
        f"## Whole processes ({args.repeats} rounds after one unmeasured round; the commands "
        "alternate within each round)",
        "",
        "| command | wall min (s) | wall median (s) | CPU median (s) | ratio to numpy+scipy |",
        "|---|---:|---:|---:|---:|",
    ]
    for label, r in rows.items():
        lines.append(f"| {label} | {r['min']:.3f} | {r['median']:.3f} | {r['cpu']:.3f} | {r['min'] / base:.2f} |")
    med = {k: statistics.median(v) for k, v in parts.items()}
    lines += ["", "Inside those processes (median seconds, perf_counter): "
              + ", ".join(f"{k.replace('_', ' ')} {v:.3f}" for k, v in med.items()) + ".", ""]
    jit_run = rows["sevenfold run -q column32, gmg (jit, warm cache)"]
    jit_load = rows["numba + kernel modules + cached kernels loaded + first threaded launch"]
    lines += ["## Projection and measurement", "",
              "Projected AOT run = jit run - (numba + kernels loaded) + (AOT module imported), "
              "whole-process wall times of the rows above (the python start and numpy cancel).", "",
              "| | from minima (s) | from medians (s) |", "|---|---:|---:|",
              f"| jit run, measured | {jit_run['min']:.3f} | {jit_run['median']:.3f} |"]
    for cpu in cpus:
        aot_load = rows[f"AOT module imported ({cpu} build)"]
        aot_run = rows[f"sevenfold run -q column32, gmg (AOT {cpu}, no numba)"]
        proj = {s: jit_run[s] - jit_load[s] + aot_load[s] for s in ("min", "median")}
        lines += [f"| AOT {cpu}, projected | {proj['min']:.3f} | {proj['median']:.3f} |",
                  f"| AOT {cpu}, measured (aot_launch.py) | {aot_run['min']:.3f} | {aot_run['median']:.3f} |",
                  f"| AOT {cpu} measured / jit measured | {aot_run['min'] / jit_run['min']:.2f} | "
                  f"{aot_run['median'] / jit_run['median']:.2f} |"]
    lines += [""] + [
        f"Target (issue 10), a warm 32^3 run under {TARGET} s whole process: AOT {cpu} "
        + ", ".join(f"{what} {r[s]:.3f} s {'meets' if r[s] < TARGET else 'does not meet'} it"
                    for s, what in (("min", "minimum"), ("median", "median")))
        + f" (jit run in the same rounds: minimum {jit_run['min']:.3f} s, median {jit_run['median']:.3f} s)."
        for cpu, r in ((c, rows[f"sevenfold run -q column32, gmg (AOT {c}, no numba)"]) for c in cpus)]
    lines += ["", "Same answers, whole solve (the zarr results of the last measured runs):", ""]
    lines += [f"- {line}" for line in agree]
    (a, pa), (b, pb) = profiles.items()
    top = sorted(set(pa) | set(pb), key=lambda k: -max(pa.get(k, 0.0), pb.get(k, 0.0)))[:10]
    lines += ["", "Imports of the two runs (`python -X importtime`, one run each, modules imported "
              "by the program itself, cumulative seconds; `aot_launch` and numpy, which it imports "
              "first, stand for the jit run's numpy inside sevenfold's modules):", "",
              f"| module | jit run (s) | AOT {b} run (s) |", "|---|---:|---:|"]
    lines += [f"| {k} | {pa.get(k, 0.0):.3f} | {pb.get(k, 0.0):.3f} |" for k in top]
    columns = ["jit", "jit1", "serial", *(f"{c}{raw}" for c in cpus for raw in ("", " raw"))]
    lines += ["", f"## Kernels ({args.rounds} alternating rounds; each timing repeats the call on "
              "the same 32^3 arrays for at least 20 ms)", "",
              "The first call each kernel got in the recorded run, replayed: `jit` as the solve "
              "runs it (numba's default threads; the serial vector builds are serial anyway), "
              "`jit1` on one thread, `serial` the serial copy the AOT build compiles, jit-compiled "
              "here for this CPU (so `serial / jit1` is the cost of dropping `parallel=True`, "
              "`AOT raw / serial` that of compiling ahead of time), and the AOT builds: through "
              "aot_launch.py's dispatcher (a type key per call, as a run uses them) and `raw`, the "
              "exported function called directly. Results: every "
              "output array and the return value against `jit`'s (`equal`: `np.array_equal` and an "
              "equal return).", "",
              "| kernel | results vs jit | " + " | ".join(f"{k} min (ms)" for k in columns)
              + " | serial / jit1 | " + " | ".join(f"{c} raw / serial" for c in cpus) + " |",
              "|---|---|" + "---:|" * (len(columns) + 1 + len(cpus))]
    for line in kernel_out.splitlines():
        if not line.startswith("kernel|"):
            continue
        _, name, checks, timing = line.split("|")
        checks = checks if any(x != "equal" for x in (c.split(": ")[1] for c in checks.split(";"))) else "all equal"
        t = {k: (float(a), float(b)) for k, a, b in (x.split(":") for x in timing.split(","))}
        lines.append(f"| {name.rsplit('.', 1)[1]} | {checks.replace(';', '; ')} | "
                     + " | ".join(f"{t[k][0] * 1e3:.3f}" for k in columns) + " | "
                     + f"{t['serial'][0] / t['jit1'][0]:.2f} | "
                     + " | ".join(f"{t[c + ' raw'][0] / t['serial'][0]:.2f}" for c in cpus) + " |")
    import llvmlite.binding as ll

    lines += ["", "## Build (each target in a fresh process of its own, one core)", "",
              f"`host` is LLVM's name for this CPU, `{ll.get_host_cpu_name()}`; `generic` is the "
              "architecture's baseline (x86-64: SSE2), what a portable wheel would carry.", "",
              "| target | recording run, jit (s) | pycc compile (s) | whole build process (s) |",
              "|---|---:|---:|---:|"]
    lines += [f"| {cpu} | {build_parts[f'record_seconds_{cpu}']:.1f} | "
              f"{build_parts[f'compile_seconds_{cpu}']:.1f} | {build_wall[cpu]:.1f} |" for cpu in cpus]
    for cpu in cpus:
        so = next((folder / cpu).glob(f"{MODULE}.*"))
        lines += ["", f"`{so.name}` ({cpu}): {so.stat().st_size / 1e6:.2f} MB, linked against "
                  + ", ".join(linked(so)) + " (ldd); it imports nothing but numpy."]
    lines += ["", f"Signatures built ({len(signatures)}):", ""]
    lines += [f"    {s}" for s in signatures]
    return "\n".join(lines) + "\n"


if __name__ == "__main__":
    main()
