"""How gmg's two threads fare when another process holds a core: OpenMP's wait policy.

    python benchmarks/threads_bench.py [--n 128] [--cases layered inclusions] [--repeats 3]

Each row is a child process that builds the cycle benchmark's problem (benchmarks/cycle_bench.py)
and solves it with gmg-CG to rtol 1e-8 ``--repeats`` times (after one untimed solve); the
best wall time is kept. Settings: one thread; two threads with OpenMP's threads spinning
while they wait (``OMP_WAIT_POLICY`` set empty, so sevenfold's default does not apply and
libgomp's own spin-then-sleep rule does, as before the change); two threads sleeping while they wait
(``PASSIVE``, sevenfold's default); two threads on numba's own workqueue layer. Each setting
runs on a quiet machine and with one busy process (a Python loop) beside it, which is what a
second user's job does to a 2-core machine. Writes benchmarks/RESULTS_THREADS.md.
"""

from __future__ import annotations

import argparse
import datetime
import os
import subprocess
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import run as engine  # noqa: E402

CHILD = """
import sys, time
sys.path.insert(0, {here!r})
import numba
numba.set_num_threads({threads})
import cycle_bench as cb
from sevenfold.solvers import gmg
fine, b = cb.problem_level({n}, {case!r})
gmg.solve_levels(fine, b, 1e-8, 100)
best = 1e9
for _ in range({repeats}):
    t = time.perf_counter(); result, _ = gmg.solve_levels(fine, b, 1e-8, 100)
    best = min(best, time.perf_counter() - t)
print(best, result.iterations, numba.threading_layer())
"""

SETTINGS = {
    "one thread": (1, {}),
    "two threads, OpenMP threads spin while waiting (libgomp's default)": (2, {"OMP_WAIT_POLICY": ""}),
    "two threads, OpenMP threads sleep while waiting (PASSIVE, sevenfold's default)": (
        2, {"OMP_WAIT_POLICY": "PASSIVE"}),
    "two threads, numba's workqueue layer": (2, {"NUMBA_THREADING_LAYER": "workqueue"}),
}


def solve_seconds(n: int, case: str, threads: int, env: dict[str, str], repeats: int) -> tuple[float, int, str]:
    code = CHILD.format(here=str(HERE), threads=threads, n=n, case=case, repeats=repeats)
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=False,
                         env={**os.environ, **env})
    if out.returncode != 0:
        raise RuntimeError(out.stderr)
    seconds, iterations, layer = out.stdout.split()[-3:]
    return float(seconds), int(iterations), layer


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--n", type=int, default=128)
    p.add_argument("--cases", nargs="+", default=["layered", "inclusions"])
    p.add_argument("--repeats", type=int, default=3)
    p.add_argument("--results", type=Path, default=HERE / "RESULTS_THREADS.md")
    args = p.parse_args(argv)
    info = engine.machine()
    info["load average before"] = " ".join(f"{x:.2f}" for x in os.getloadavg())
    info["sevenfold revision"] = subprocess.run(["git", "rev-parse", "--short", "HEAD"], capture_output=True,
                                                text=True, cwd=HERE, check=False).stdout.strip()
    rows = []
    for loaded in (False, True):
        busy = subprocess.Popen([sys.executable, "-c", "while True: pass"]) if loaded else None
        try:
            for case in args.cases:
                for name, (threads, env) in SETTINGS.items():
                    s, it, layer = solve_seconds(args.n, case, threads, env, args.repeats)
                    rows.append((loaded, case, name, s, it, layer))
                    print(f"{'busy' if loaded else 'quiet'} {case} {name}: {s:.2f} s, {it} it, {layer}", flush=True)
        finally:
            if busy is not None:
                busy.kill()
                busy.wait()
    info["load average after"] = " ".join(f"{x:.2f}" for x in os.getloadavg())
    command = "python benchmarks/threads_bench.py " + " ".join(sys.argv[1:] if argv is None else argv)
    date = datetime.datetime.now(datetime.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    out = ["# gmg on two threads beside another process: OpenMP's wait policy", "",
           f"Written by `{command.strip()}` on {date}; every number below comes from that run. Do not edit "
           "by hand: run the command again.", "",
           f"gmg-CG to rtol 1e-8 on the cycle benchmark's problems at {args.n}^3, best wall seconds of "
           f"{args.repeats} solves in one child process per row (the problem and the hierarchy's setup "
           "included, the first solve untimed). *beside a busy process*: one Python loop runs on the "
           "machine's other core meanwhile. *ratio* = seconds / the one-thread seconds in the same "
           "condition.", "",
           "| condition | case | setting | seconds | ratio to one thread | iterations | layer |",
           "|---|---|---|---|---|---|---|"]
    one = {(r[0], r[1]): r[3] for r in rows if r[2] == "one thread"}
    for loaded, case, name, s, it, layer in rows:
        out.append(f"| {'beside a busy process' if loaded else 'quiet'} | {case} | {name} | {s:.2f} | "
                   f"{s / one[(loaded, case)]:.2f} | {it} | {layer} |")
    engine.write_report(args.results, out, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
