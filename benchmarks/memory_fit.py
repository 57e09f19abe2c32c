"""Peak memory of whole `sevenfold run` processes against sevenfold's own estimate.

    python benchmarks/memory_fit.py [--sizes 64 128 160]

For each method and size, runs one job in a child process, reads its peak resident set from
the kernel (wait4), and prints it beside the estimate `sevenfold check` shows. The constants
in src/sevenfold/memory.py are fitted from this output.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
from pathlib import Path

from sevenfold.runner import plan_job, prepare_problem

JOB = """
name = "memory-{method}-{n}"
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
[output]
path = "out/{{name}}.zarr"
"""
LAYER = '[[material.region]]\nbox = { min = [0.0, 0.0, 0.3], max = [1.0, 1.0, 0.63] }\nvalue = 1000.0'


def write_job(folder: Path, method: str, n: int) -> Path:
    path = folder / f"{method}-{n}.toml"
    path.write_text(JOB.format(method=method, n=n, region="" if method == "fft" else LAYER))
    return path


MEASURE = """
import os, subprocess, sys
child = subprocess.Popen(sys.argv[1:], stdout=subprocess.DEVNULL)
_, status, usage = os.wait4(child.pid, 0)
print(status, usage.ru_maxrss * 1024)  # kilobytes on Linux
"""


def peak_bytes(job: Path) -> int:
    """Peak resident set of one `sevenfold run` process, in bytes.

    Linux carries a peak across exec, so the run is started from a small go-between process
    rather than from this one, whose own peak grows as it builds problems for the estimates.
    """
    exe = Path(sys.executable).with_name("sevenfold")
    out = subprocess.run([sys.executable, "-c", MEASURE, str(exe), "run", "--here", "--no-progress", str(job)],
                         capture_output=True, text=True, check=True).stdout.split()
    if out[0] != "0":
        raise RuntimeError(f"{job} failed with status {out[0]}")
    return int(out[1])


def estimate(job: Path) -> tuple[str, int]:
    plan = plan_job(job)
    plan, _ = prepare_problem(plan)
    return plan.method, plan.memory_bytes


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[64, 128, 160])
    args = parser.parse_args()
    cases = [(m, n) for m in ("gmg", "amg", "fft") for n in args.sizes] + [("direct", 32), ("direct", 40)]
    print(f"{'method':8} {'cells':>10} {'peak MiB':>9} {'estimate MiB':>13} {'estimate/peak':>14}")
    with tempfile.TemporaryDirectory() as tmp:
        for method, n in cases:
            if method == "amg" and n > 160:
                continue
            job = write_job(Path(tmp), method, n)
            _, est = estimate(job)
            peak = peak_bytes(job)
            print(f"{method:8} {n**3:>10,} {peak / 2**20:>9.0f} {est / 2**20:>13.0f} {est / peak:>14.2f}", flush=True)


if __name__ == "__main__":
    main()
