"""The fft path's true-residual check in one compiled pass: a prototype for the speed suite's
"fft path within 1.5x of a bare transform pair" row.

    python benchmarks/fft_residual_bench.py [--sizes 128 256] [--repeats 5] [--against REVISION]

`sevenfold.solvers.fft.residual_norm` evaluates ||b - A u|| with numpy in slabs of x planes
that stay in cache (six shifted neighbours, then each face plane corrected): about ten passes
over each slab. The fft path imports no numba, on purpose (a whole `sevenfold run` with the fft
method starts without the compiler). The design tried here is the same norm as one fused numba
kernel (each cell's row and its square summed in one read of u and f), to see what it would buy
inside the solve and what it would cost at start-up.

Measured in one run, alternating, best of ``--repeats`` (wall seconds, the path's own threads):
the bare pair and `solve_fft` as benchmarks/fft_bench.py times them (its jobs: six Dirichlet
faces with varying values, or six Neumann faces with a balanced source), the numpy residual
and the fused one on the same random u (their norms must agree to 1e-12 relative), the path's ratio
to the bare pair as it is and with the fused check in place of the numpy one; and, in fresh
processes, `import numba` against `import numpy, scipy` (the start-up the fused check would
add, before loading its one cached kernel). With ``--against``, the path as it is against the
path at an earlier git revision, alternating (for a change to the numpy check); and the numpy
check alone at several slab sizes. Writes benchmarks/RESULTS_FFT_RESIDUAL.md.
"""

from __future__ import annotations

import argparse
import math
import subprocess
import sys
from pathlib import Path

import numba
import numpy as np
import scipy.fft
from numba import njit, prange

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import fft_bench  # noqa: E402
import wall_bench  # noqa: E402
from timing import best  # noqa: E402

from sevenfold.problem import build_problem  # noqa: E402
from sevenfold.solvers.fft import SLAB_CELLS as SLAB_NOW  # noqa: E402
from sevenfold.solvers.fft import default_workers, residual_norm, solve_fft, uniform_spacing  # noqa: E402
from sevenfold.spec import parse_job  # noqa: E402


@njit(parallel=True)  # (no cache: a cached kernel re-imports this module)
def fused_residual_norm(u, f, cx, cy, cz, rb, db):
    """||b - A u|| in one pass: the row of cell P is f_P + sum over interior neighbours of
    T (u_N - u_P) + sum over its boundary faces of (rb - db u_P), the face terms per unit
    volume as `residual_norm` takes them. ``rb`` and ``db`` are (6, m, m) arrays of the six
    faces' terms (x_min, x_max, y_min, y_max, z_min, z_max; face-shaped in their leading
    corner)."""
    nx, ny, nz = u.shape
    total = 0.0
    for i in prange(nx):
        acc = 0.0
        for j in range(ny):
            for k in range(nz):
                c = u[i, j, k]
                r = f[i, j, k]
                if i > 0:
                    r += cx * (u[i - 1, j, k] - c)
                else:
                    r += rb[0, j, k] - db[0, j, k] * c
                if i < nx - 1:
                    r += cx * (u[i + 1, j, k] - c)
                else:
                    r += rb[1, j, k] - db[1, j, k] * c
                if j > 0:
                    r += cy * (u[i, j - 1, k] - c)
                else:
                    r += rb[2, i, k] - db[2, i, k] * c
                if j < ny - 1:
                    r += cy * (u[i, j + 1, k] - c)
                else:
                    r += rb[3, i, k] - db[3, i, k] * c
                if k > 0:
                    r += cz * (u[i, j, k - 1] - c)
                else:
                    r += rb[4, i, j] - db[4, i, j] * c
                if k < nz - 1:
                    r += cz * (u[i, j, k + 1] - c)
                else:
                    r += rb[5, i, j] - db[5, i, j] * c
                acc += r * r
        total += acc
    return math.sqrt(total)


def face_terms(problem) -> tuple[float, float, float, np.ndarray, np.ndarray]:
    """The couplings k / h^2 per axis and the six faces' terms per unit volume, stacked."""
    spacing = uniform_spacing(problem.grid)
    k = float(problem.coefficient[0].flat[0])
    m = max(problem.grid.cells)
    rb, db = np.zeros((6, m, m)), np.zeros((6, m, m))
    for f, name in enumerate(("x_min", "x_max", "y_min", "y_max", "z_min", "z_max")):
        t = problem.faces.get(name)
        if t is None:
            continue
        h = spacing[f // 2]
        r, d = np.broadcast_arrays(t.rhs(1.0 / h), t.diagonal(1.0 / h))
        rb[f, :r.shape[0], :r.shape[1]] = r
        db[f, :d.shape[0], :d.shape[1]] = d
    cx, cy, cz = (k / h**2 for h in spacing)
    return cx, cy, cz, rb, db


def bench(n: int, kind: str, repeats: int, workers: int) -> dict:
    problem = build_problem(parse_job(fft_bench.job_table(n, kind), "fft_residual_bench"))
    forward, inverse = ((scipy.fft.dstn, scipy.fft.idstn) if kind == "dirichlet"
                        else (scipy.fft.dctn, scipy.fft.idctn))
    x = np.random.default_rng(n).standard_normal((n, n, n))
    solve_fft(problem, workers=workers)  # warm: plans, first touch
    # the checks compared on a random u: at the solution both norms are rounding noise
    padded = np.zeros((n + 2, n, n))
    padded[1:-1] = np.random.default_rng(n + 1).standard_normal((n, n, n))
    u = padded[1:-1]
    cx, cy, cz, rb, db = face_terms(problem)
    f = problem.source
    numba.set_num_threads(workers)
    numpy_norm = residual_norm(problem, padded, workers)
    fused_norm = fused_residual_norm(u, f, cx, cy, cz, rb, db)
    pair, path, numpy_check, fused_check = [], [], [], []
    for _ in range(repeats):
        pair.append(best(lambda: inverse(forward(x, type=2, norm="ortho", workers=workers), type=2,
                                         norm="ortho", workers=workers, overwrite_x=True), 1))
        path.append(best(lambda: solve_fft(problem, workers=workers), 1))
        numpy_check.append(best(lambda: residual_norm(problem, padded, workers), 1))
        fused_check.append(best(lambda: fused_residual_norm(u, f, cx, cy, cz, rb, db), 1))
    row = dict(n=n, kind=kind, workers=workers, pair=min(pair), path=min(path),
               numpy_check=min(numpy_check), fused_check=min(fused_check),
               agreement=abs(fused_norm - numpy_norm) / numpy_norm)
    row["fused_path"] = row["path"] - row["numpy_check"] + row["fused_check"]
    print(f"{n} {kind}: pair {row['pair']:.4f} path {row['path']:.4f} ({row['path'] / row['pair']:.2f}x) "
          f"numpy check {row['numpy_check']:.4f} fused {row['fused_check']:.4f} -> "
          f"{row['fused_path'] / row['pair']:.2f}x, norms agree to {row['agreement']:.1e}", flush=True)
    return row


def against(n: int, kind: str, repeats: int, workers: int, revision: str) -> dict:
    """The path now against the path at ``revision`` (alternating, best of), each over the same
    bare pair; the same u from both."""
    old = wall_bench.module_at(revision, "sevenfold.solvers.fft")
    problem = build_problem(parse_job(fft_bench.job_table(n, kind), "fft_residual_bench"))
    forward, inverse = ((scipy.fft.dstn, scipy.fft.idstn) if kind == "dirichlet"
                        else (scipy.fft.dctn, scipy.fft.idctn))
    x = np.random.default_rng(n).standard_normal((n, n, n))
    u_now, _ = solve_fft(problem, workers=workers)
    u_then, _ = old.solve_fft(problem, workers=workers)
    same = bool(np.array_equal(u_now, u_then))
    pair, now, then = [], [], []
    for _ in range(repeats):
        pair.append(best(lambda: inverse(forward(x, type=2, norm="ortho", workers=workers), type=2,
                                         norm="ortho", workers=workers, overwrite_x=True), 1))
        then.append(best(lambda: old.solve_fft(problem, workers=workers), 1))
        now.append(best(lambda: solve_fft(problem, workers=workers), 1))
    row = dict(n=n, kind=kind, pair=min(pair), now=min(now), then=min(then), same=same)
    print(f"{n} {kind}: pair {row['pair']:.4f}, at {revision} {row['then']:.4f} "
          f"({row['then'] / row['pair']:.3f}x), now {row['now']:.4f} ({row['now'] / row['pair']:.3f}x), "
          f"same u {same}", flush=True)
    return row


def slab_sweep(n: int, repeats: int, workers: int, slabs=(1 << 15, 1 << 16, 1 << 17, 1 << 18, 1 << 19)) -> dict:
    """`residual_norm` alone (Dirichlet job, random u) at several slab sizes, alternating, best of."""
    from sevenfold.solvers import fft as fft_module

    problem = build_problem(parse_job(fft_bench.job_table(n, "dirichlet"), "fft_residual_bench"))
    padded = np.zeros((n + 2, n, n))
    padded[1:-1] = np.random.default_rng(n + 1).standard_normal((n, n, n))
    kept = fft_module.SLAB_CELLS
    times: dict[int, list[float]] = {s: [] for s in slabs}
    try:
        for _ in range(repeats):
            for slab in slabs:
                fft_module.SLAB_CELLS = slab
                times[slab].append(best(lambda: residual_norm(problem, padded, workers), 1))
    finally:
        fft_module.SLAB_CELLS = kept
    out = {slab: min(t) for slab, t in times.items()}
    print(f"{n} slabs: " + ", ".join(f"{s} {t * 1e3:.2f} ms" for s, t in out.items()), flush=True)
    return out


def start_cost(repeats: int) -> dict:
    """Fresh processes: `import numpy, scipy` and `import numpy, scipy, numba` (best of)."""
    out = {}
    for label, code in (("import numpy, scipy.fft", "import numpy, scipy.fft"),
                        ("import numpy, scipy.fft, numba", "import numpy, scipy.fft, numba")):
        out[label] = best(lambda: subprocess.run([sys.executable, "-c", code], check=True), repeats)
    return out


def report(rows: list[dict], start: dict, info: dict, command: str, compared: list[dict],
           revision: str | None, slabs: dict[int, dict]) -> str:
    out = ["# The fft path's residual check in one compiled pass (a prototype)", "",
           f"Written by `{command}` on {info['date']}; every number below comes from that run. "
           "Do not edit by hand: run the command again.", "",
           "Wall seconds, best of the repeats, alternating, the path's own threads. *pair* = a "
           "bare scipy.fft forward and inverse transform of the same shape; *path* = "
           "`solve_fft` as it is (right-hand side, transforms, division, the numpy residual "
           "check); *numpy check* and *fused check* = `residual_norm` and this file's fused "
           "kernel alone on the same random u; *path with the fused check* = path - numpy check "
           "+ fused check; *agreement* = |fused norm - numpy norm| / numpy norm. Target (the "
           "speed issue): path within 1.5x of the pair.", "",
           "| cells | faces | threads | pair s | path s | path / pair | numpy check s | fused "
           "check s | path with the fused check / pair | agreement |",
           "|---|---|---|---|---|---|---|---|---|---|"]
    for r in rows:
        out.append(f"| {r['n']}^3 | {r['kind']} | {r['workers']} | {r['pair']:.4f} | {r['path']:.4f} | "
                   f"{r['path'] / r['pair']:.2f} | {r['numpy_check']:.4f} | {r['fused_check']:.4f} | "
                   f"{r['fused_path'] / r['pair']:.2f} | {r['agreement']:.1e} |")
    out += ["", "Start-up the fused check would add to a whole `sevenfold run` with the fft method "
            "(fresh processes, best of the repeats; loading the one cached kernel comes on top):", "",
            "| command | wall s |", "|---|---|"]
    out += [f"| `{k}` | {v:.3f} |" for k, v in start.items()]
    if compared:
        out += ["", f"## The path now against revision {revision}", "",
                "`solve_fft` as it is and as it was at that revision (loaded from git beside it), "
                "alternating, best of the repeats, each over the bare pair timed in the same "
                "rounds; *same u*: the two solutions equal bit for bit.", "",
                f"| cells | faces | pair s | at {revision} s | / pair | now s | / pair | now / then | same u |",
                "|---|---|---|---|---|---|---|---|---|"]
        out += [f"| {r['n']}^3 | {r['kind']} | {r['pair']:.4f} | {r['then']:.4f} | {r['then'] / r['pair']:.2f} | "
                f"{r['now']:.4f} | {r['now'] / r['pair']:.2f} | {r['now'] / r['then']:.2f} | {r['same']} |"
                for r in compared]
    if slabs:
        sizes = sorted({s for row in slabs.values() for s in row})
        out += ["", "## Slab size of the numpy check", "",
                "`residual_norm` alone on a random u (Dirichlet job), milliseconds, best of the "
                "repeats, the sizes alternating; the slab is the number of cells each numpy pass "
                f"covers at a time (now {SLAB_NOW}).", "",
                "| cells | " + " | ".join(f"{s:,}" for s in sizes) + " |",
                "|---|" + "---|" * len(sizes)]
        out += [f"| {n}^3 | " + " | ".join(f"{row[s] * 1e3:.2f}" for s in sizes) + " |"
                for n, row in slabs.items()]
    out += [""] + wall_bench.machine_table(info)
    return "\n".join(out) + "\n"


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description="benchmarks/fft_residual_bench.py")
    parser.add_argument("--sizes", type=int, nargs="+", default=[128, 256])
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--results", default=str(HERE / "RESULTS_FFT_RESIDUAL.md"))
    parser.add_argument("--against", metavar="REVISION",
                        help="also time the path as it was at this git revision")
    args = parser.parse_args(argv)
    info = wall_bench.run_info()
    workers = default_workers()
    bench(16, "dirichlet", 1, workers)  # compile the kernel before timing
    rows = [bench(n, kind, args.repeats, workers) for n in args.sizes for kind in ("dirichlet", "neumann")]
    start = start_cost(args.repeats)
    compared = [against(n, kind, args.repeats, workers, args.against) for n in args.sizes
                for kind in ("dirichlet", "neumann")] if args.against else []
    slabs = {n: slab_sweep(n, args.repeats, workers) for n in args.sizes}
    command = wall_bench.finish_info(info, "fft_residual_bench.py", argv)
    Path(args.results).write_text(report(rows, start, info, command, compared, args.against, slabs))
    print("wrote", args.results)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
