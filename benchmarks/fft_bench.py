"""The fft path against a bare scipy.fft transform pair of the same size, in one run.

    python benchmarks/fft_bench.py [--sizes 128 256] [--repeats 3] [--results PATH]

For each size n, an n^3 job with constant k (all six faces Dirichlet, values varying along
the faces, a varying source; and the same with all faces Neumann and a balanced source) is
built outside the timer. Then, alternating, best of ``--repeats``:

* the bare pair: ``y = dstn(x); idstn(y, overwrite_x=True)`` (``dctn``/``idctn`` for the
  Neumann job), type 2, norm "ortho", on a random array of the same shape, with the same
  ``workers``;
* ``solve_fft(problem)``: right-hand side, forward transform, division by the eigenvalues,
  inverse transform and the matrix-free true residual.

Target (from the speed issue): the fft path within 1.5x of the bare pair. The ratio, the
residual and the machine's details go to stdout and to a section of benchmarks/RESULTS_FFT.md
(replaced between its markers on every run). The machine is shared: compare the ratio of
one run, never times across runs.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import scipy
import scipy.fft

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent / "src"))

from sevenfold.problem import build_problem  # noqa: E402
from sevenfold.solvers.fft import default_workers, fft_eligibility, residual_norm, solve_fft  # noqa: E402

sys.path.insert(0, str(HERE))
from run import machine  # noqa: E402  (one description of the machine for every RESULTS file)
from sevenfold.spec import parse_job  # noqa: E402

TARGET = 1.5  # fft path / bare transform pair
START, END = "<!-- fft_bench:start -->", "<!-- fft_bench:end -->"
FACES = ("x_min", "x_max", "y_min", "y_max", "z_min", "z_max")
VALUES = ["1 + y*z", "x - 2*z + y", "sin(3*x) + z", "-2.5", "2*x + y", "y - x*x + z"]


def job_table(n: int, kind: str) -> dict:
    """An n^3 constant-coefficient job on the unit cube, every face of type ``kind``."""
    if kind == "dirichlet":
        boundary = {f: {"type": "dirichlet", "value": v} for f, v in zip(FACES, VALUES)}
        source = "sin(5*x)*cos(3*y) + z*z"
    else:  # fluxes of zero total and a source of zero mean on the unit cube: balanced
        boundary = {f: {"type": "neumann", "flux": "cos(2*pi*y)*cos(2*pi*z)" if f[0] == "x" else 0.0}
                    for f in FACES}
        source = "cos(2*pi*x)*cos(2*pi*y)"
    return {
        "name": f"fft-bench-{kind}-{n}",
        "grid": {"cells": [n, n, n], "size": [1.0, 1.0, 1.0]},
        "material": {"value": 2.5},
        "source": {"value": source},
        "boundary": boundary,
        "solver": {"method": "fft"},
    }


@dataclass
class Row:
    n: int
    kind: str
    workers: int
    pair: list[float]
    fft: list[float]
    setup: float  # of the best fft run: right-hand side
    residual: float
    residual_check: float  # best time of the matrix-free residual alone
    eligibility: float  # best time of the eligibility check alone

    @property
    def ratio(self) -> float:
        return min(self.fft) / min(self.pair)


def bench(n: int, kind: str, repeats: int, workers: int) -> Row:
    problem = build_problem(parse_job(job_table(n, kind), "fft_bench"))
    forward, inverse = ((scipy.fft.dstn, scipy.fft.idstn) if kind == "dirichlet"
                        else (scipy.fft.dctn, scipy.fft.idctn))
    x = np.random.default_rng(n).standard_normal((n, n, n))
    pair, fft, setups, residual = [], [], [], float("nan")
    u, result = solve_fft(problem, workers=workers)  # warm: imports, plans, first touch
    del u
    for _ in range(repeats):
        t = time.perf_counter()
        y = forward(x, type=2, norm="ortho", workers=workers)
        y = inverse(y, type=2, norm="ortho", workers=workers, overwrite_x=True)
        pair.append(time.perf_counter() - t)
        del y
        t = time.perf_counter()
        u, result = solve_fft(problem, workers=workers)
        fft.append(time.perf_counter() - t)
        setups.append(result.setup_seconds)
        residual = result.final_relative_residual
        del u, result
    best = int(np.argmin(fft))
    # where the time beyond the transforms goes: the two checks alone, on the same data
    padded = np.zeros((n + 2, n, n))
    padded[1:-1] = x
    residual_check, eligibility = [], []
    for _ in range(repeats):
        t = time.perf_counter()
        residual_norm(problem, padded, workers)
        residual_check.append(time.perf_counter() - t)
        t = time.perf_counter()
        fft_eligibility(problem)
        eligibility.append(time.perf_counter() - t)
    return Row(n, kind, workers, pair, fft, setups[best], residual, min(residual_check), min(eligibility))


def load_average() -> str:
    try:
        return " ".join(Path("/proc/loadavg").read_text().split()[:3])
    except OSError:
        return "unknown"


def section(rows: list[Row], info: dict[str, str], repeats: int, load: tuple[str, str]) -> str:
    lines = [
        START,
        "## fft path against a bare scipy.fft transform pair",
        "",
        f"Written by `python benchmarks/fft_bench.py` on {info['date']}; every number below comes "
        "from that run. Best of "
        f"{repeats}, the two alternating; the job is built outside the timer. The bare pair is "
        "`idstn(dstn(x), overwrite_x=True)` (`dctn`/`idctn` for the Neumann job), type 2, "
        "norm \"ortho\", same shape and workers. The fft path is `solve_fft(problem)`: right-hand "
        "side, both transforms, division by the eigenvalues and the matrix-free true residual. "
        f"Target: ratio at most {TARGET}.",
        "",
        "| cells | faces | workers | bare pair best (s) | fft path best (s) | ratio | within target "
        "| of which: rhs (s) | residual check (s) | eligibility check (s) | relative residual |",
        "| --- | --- | --- | --- | --- | --- | --- | --- | --- | --- | --- |",
    ]
    for r in rows:
        lines.append(
            f"| {r.n}^3 | {r.kind} | {r.workers} | {min(r.pair):.3f} | {min(r.fft):.3f} | {r.ratio:.2f} | "
            f"{'yes' if r.ratio <= TARGET else 'no'} | {r.setup:.3f} | {r.residual_check:.3f} | "
            f"{r.eligibility:.3f} | {r.residual:.1e} |"
        )
    lines += ["", "The residual and eligibility checks are timed alone, best of the same repeats, after "
              "the pairs; the rhs time is the fft run's own record.", "", "All times (s), in run order:", ""]
    for r in rows:
        lines.append(f"- {r.n}^3 {r.kind}: pair {', '.join(f'{t:.3f}' for t in r.pair)}; "
                     f"fft {', '.join(f'{t:.3f}' for t in r.fft)}")
    lines += ["", "Machine (shared with other work while this ran: compare ratios within the run):", ""]
    lines += [f"- {k}: {v}" for k, v in info.items()]
    lines += [f"- load average (1, 5, 15 min) at start: {load[0]}; at end: {load[1]}", END]
    return "\n".join(lines) + "\n"


def write_section(path: Path, text: str) -> None:
    """Replace this benchmark's section of ``path`` (between its markers), keeping the rest."""
    old = path.read_text() if path.exists() else "# fft benchmark results\n\n"
    if START in old and END in old:
        head, rest = old.split(START, 1)
        tail = rest.split(END, 1)[1].lstrip("\n")
        new = head + text + ("\n" + tail if tail else "")
    else:
        new = old.rstrip("\n") + "\n\n" + text
    tmp = path.with_suffix(".tmp")
    tmp.write_text(new)
    os.replace(tmp, path)


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--sizes", type=int, nargs="+", default=[128, 256])
    p.add_argument("--repeats", type=int, default=3)
    p.add_argument("--kinds", nargs="+", default=["dirichlet", "neumann"], choices=["dirichlet", "neumann"])
    p.add_argument("--results", type=Path, default=HERE / "RESULTS_FFT.md")
    args = p.parse_args(argv)
    workers = default_workers()
    load_start = load_average()
    rows = []
    for n in args.sizes:
        for kind in args.kinds:
            row = bench(n, kind, args.repeats, workers)
            rows.append(row)
            print(f"{n}^3 {kind:9s} workers {workers}: bare pair {min(row.pair):.3f} s, fft path "
                  f"{min(row.fft):.3f} s, ratio {row.ratio:.2f} (target {TARGET}), "
                  f"residual {row.residual:.1e}; of which rhs {row.setup:.3f} s, residual check "
                  f"{row.residual_check:.3f} s, eligibility {row.eligibility:.3f} s", flush=True)
    text = section(rows, machine(), args.repeats, (load_start, load_average()))
    write_section(args.results, text)
    print(f"wrote {args.results}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
