"""CG's operator pass on coded face arrays, against the kept float64 face arrays.

    python benchmarks/coded_faces_bench.py [--jobs column:256 inclusions:128 ...] [--rounds 7]
        [--solves 3] [--results PATH]

A design for the resident 256^3 column row (own time >= 80x in a worker's slot): where the
coefficient is piecewise constant on a uniform grid (regions of a material), the finest level's
face arrays take few distinct values. Stored as one byte per face (a code) and a table of at
most 256 float64 values per array, CG's operator pass (A p with p . A p, ``stencil.apply_dot``)
reads u (8 B), four codes (4 B) and writes A u (8 B, plus the write-allocate read) per cell:
28 B against the kept 56 B. The operator is the same matrix: each coefficient is looked up,
not rounded, so A p agrees with the kept pass bit for bit up to the order of the dot's sum.

*coded, diag kept*: tx, ty, tz coded, diag float64 (the diagonal carries boundary and held-cell
terms, the first array to leave the few-values case): 36 B per cell.

Each job's finest level comes from the product (``gmg.fine_level``); the codes from
``np.unique``, whose cost (a sort) is reported beside the pass: a product would derive them
from the material's region codes instead. Passes alternate kept / coded-diag-kept / coded,
``--rounds`` each, wall seconds, best and median. Then whole warm gmg solves with CG's pass
kept or coded (``--solves`` each, alternating). Writes benchmarks/RESULTS_CODED_FACES.md unless
--results says otherwise.
"""

from __future__ import annotations

import argparse
import gc
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import column
import run as engine
import speed

from numba import njit, prange

from sevenfold.kernels import stencil
from sevenfold.kernels.stencil import _bands, _neighbours


@njit(inline="always")
def _diagonal(d, tabd, i, j, m):
    """The diagonal at (i, j, m): ``d`` itself (float64) when ``tabd`` is None, else looked up
    from its codes (the None branch is pruned at compile time)."""
    if tabd is None:
        return d[i, j, m]
    return tabd[d[i, j, m]]


@njit(inline="always")
def _coded_row(cx, cy, cz, d, tabx, taby, tabz, tabd, u, out, i, j, nx, ny, nz):
    """``stencil._apply_row`` with each coupling looked up from its code (the diagonal as
    :func:`_diagonal`)."""
    wxm, wxp, wym, wyp, im, ip, jm, jp = _neighbours(i, j, nx, ny)
    for m in range(nz):
        out[m] = (_diagonal(d, tabd, i, j, m) * u[i, j, m] - wxm * tabx[cx[im, j, m]] * u[im, j, m]
                  - wxp * tabx[cx[i, j, m]] * u[ip, j, m] - wym * taby[cy[i, jm, m]] * u[i, jm, m]
                  - wyp * taby[cy[i, j, m]] * u[i, jp, m])
    for m in range(1, nz - 1):
        out[m] -= tabz[cz[i, j, m - 1]] * u[i, j, m - 1] + tabz[cz[i, j, m]] * u[i, j, m + 1]
    if nz > 1:
        out[0] -= tabz[cz[i, j, 0]] * u[i, j, 1]
        out[nz - 1] -= tabz[cz[i, j, nz - 2]] * u[i, j, nz - 2]


@njit(parallel=True, fastmath={"reassoc", "nsz", "contract"})
def coded_apply_dot(cx, cy, cz, d, tabx, taby, tabz, tabd, u, out):
    """``stencil.apply_dot`` on coded faces: out = A u, returns u . A u. ``d``: the diagonal's
    codes with ``tabd`` its table, or the float64 diagonal with ``tabd`` None."""
    nx, ny, nz = u.shape
    per, rows = _bands(nx, ny, nz)
    slabs = (nx + per - 1) // per
    s = 0.0
    for t in prange(slabs):
        for j0 in range(0, ny, rows):
            for i in range(t * per, min(t * per + per, nx)):
                for j in range(j0, min(j0 + rows, ny)):
                    _coded_row(cx, cy, cz, d, tabx, taby, tabz, tabd, u, out[i, j], i, j, nx, ny, nz)
                    for m in range(nz):
                        s += out[i, j, m] * u[i, j, m]
    return s


def encode(a: np.ndarray) -> tuple[np.ndarray, np.ndarray] | None:
    """(codes, table) with table[codes] == a exactly, or None beyond 256 distinct values."""
    table, inverse = np.unique(a, return_inverse=True)
    if table.size > 256:
        return None
    return inverse.reshape(a.shape).astype(np.uint8), table


def job_file(folder: Path, name: str, n: int) -> Path:
    path = folder / f"{name}-{n}.toml"
    out = folder / f"out-{name}-{n}"
    text = column.job_text(n, out) if name == "column" else speed.job_text(n, name, str(out))
    path.write_text(text)
    return path


def whole_solves(problem, spec, codes, rounds: int) -> dict[str, list[tuple[float, int]]]:
    """Warm gmg solves of ``problem`` alternating CG's kept operator pass and the coded one
    (``codes``: tx, ty, tz codes and tables; the diagonal as the solve's level has it):
    (solve seconds, iterations) per round and side, after one untimed solve of each."""
    from sevenfold.solvers import gmg, solve_problem

    (cx, tabx), (cy, taby), (cz, tabz) = codes
    kept = gmg.FineOperator.apply_dot

    def coded(self, p):
        lv = self.level
        pq = coded_apply_dot(cx, cy, cz, lv.diag, tabx, taby, tabz, None, p.reshape(lv.shape), self.out)
        return self.out.ravel(), pq

    out: dict[str, list[tuple[float, int]]] = {"kept": [], "coded, diag kept": []}
    try:
        for r in range(rounds + 1):
            for name, f in (("kept", kept), ("coded, diag kept", coded)):
                gmg.FineOperator.apply_dot = f
                _, result = solve_problem(problem, spec.solver, "gmg")
                if r:
                    out[name].append((result.solve_seconds, result.iterations))
                del result
                gc.collect()
    finally:
        gmg.FineOperator.apply_dot = kept
    return out


def measure(job: Path, rounds: int, solves: int) -> dict:
    from sevenfold.problem import build_problem
    from sevenfold.solvers.gmg import fine_level
    from sevenfold.spec import load_job

    spec = load_job(job)
    problem = build_problem(spec)
    level, _ = fine_level(problem)
    t = time.perf_counter()
    coded = [encode(a) for a in (level.tx, level.ty, level.tz, level.diag)]
    encode_s = time.perf_counter() - t
    row = {"cells": level.tx.size, "distinct": [None if c is None else c[1].size for c in coded],
           "encode_s": encode_s}
    if any(c is None for c in coded[:3]):
        return row
    (cx, tabx), (cy, taby), (cz, tabz) = coded[:3]
    p = np.random.default_rng(1).standard_normal(level.tx.shape)
    outs = {name: np.empty_like(p) for name in ("kept", "coded", "coded, diag kept")}
    passes = {
        "kept": lambda: stencil.apply_dot(level.tx, level.ty, level.tz, level.diag, p, outs["kept"]),
        "coded, diag kept": lambda: coded_apply_dot(cx, cy, cz, level.diag, tabx, taby, tabz, None, p,
                                                    outs["coded, diag kept"]),
    }
    if coded[3] is not None:
        cd, tabd = coded[3]
        passes["coded"] = lambda: coded_apply_dot(cx, cy, cz, cd, tabx, taby, tabz, tabd, p, outs["coded"])
    dots = {name: f() for name, f in passes.items()}  # compile, first touch
    times: dict[str, list[float]] = {name: [] for name in passes}
    for _ in range(rounds):
        for name, f in passes.items():
            t = time.perf_counter()
            f()
            times[name].append(time.perf_counter() - t)
    ref = outs["kept"]
    row["agree"] = {name: float(np.max(np.abs(outs[name] - ref)) / np.max(np.abs(ref))) for name in passes}
    row["dot"] = {name: abs(dots[name] - dots["kept"]) / abs(dots["kept"]) for name in passes}
    row["times"] = times
    del outs, p, level
    gc.collect()
    if solves:
        row["solves"] = whole_solves(problem, spec, coded[:3], solves)
    return row


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--jobs", nargs="+", default=["column:256", "inclusions:256", "layered:256",
                                                   "column:128", "inclusions:128"])
    ap.add_argument("--rounds", type=int, default=7)
    ap.add_argument("--solves", type=int, default=3, help="whole warm solves per side (0: none)")
    ap.add_argument("--results", type=Path, default=HERE / "RESULTS_CODED_FACES.md")
    ap.add_argument("--folder", type=Path, default=Path("/tmp/coded-faces"))
    args = ap.parse_args()
    args.folder.mkdir(parents=True, exist_ok=True)
    command = "python benchmarks/coded_faces_bench.py " + " ".join(sys.argv[1:])
    rows = []
    for spec in args.jobs:
        name, n = spec.split(":")
        row = measure(job_file(args.folder, name, int(n)), args.rounds, args.solves)
        rows.append((name, int(n), row))
        print(name, n, {k: v for k, v in row.items() if k != "times"},
              {k: (min(v), float(np.median(v))) for k, v in row.get("times", {}).items()},
              row.get("solves"), flush=True)
    info = {**engine.machine(), "revision": speed.revision()}
    w = []
    w.append("# CG's operator pass on coded face arrays\n")
    w.append(f"Written by `{command}` on {info['date']} at {info['revision']}; every number below comes from that run. "
             "Do not edit by hand: run the command again.\n")
    w.append(__doc__.split("\n\n", 2)[2].split("Writes benchmarks")[0].strip() + "\n")
    w.append("Milliseconds per pass (best / median of the rounds); *ratio* = median / the kept "
             "median; *agree* = max |A p - kept A p| / max |kept A p|; *distinct* = distinct values "
             "of tx, ty, tz, diag.\n")
    w.append("| job | cells | distinct | np.unique s | kept ms | coded ms | ratio | coded, diag kept ms | ratio | agree |")
    w.append("|---|---|---|---|---|---|---|---|---|---|")
    for name, n, row in rows:
        d = " / ".join("> 256" if x is None else str(x) for x in row["distinct"])
        if "times" not in row:
            w.append(f"| {name} | {n}^3 | {d} | {row['encode_s']:.2f} | | | | | | not coded |")
            continue
        t = row["times"]
        km = float(np.median(t["kept"]))

        def cell(name_):
            if name_ not in t:
                return "", ""
            return (f"{1e3 * min(t[name_]):.1f} / {1e3 * np.median(t[name_]):.1f}",
                    f"{np.median(t[name_]) / km:.2f}")

        c1, r1 = cell("coded")
        c2, r2 = cell("coded, diag kept")
        agree = max(v for v in row["agree"].values())
        w.append(f"| {name} | {n}^3 | {d} | {row['encode_s']:.2f} | {1e3 * min(t['kept']):.1f} / "
                 f"{1e3 * km:.1f} | {c1} | {r1} | {c2} | {r2} | {agree:.1e} |")
    w.append("")
    w.append("Whole warm gmg solves (``solve_problem``, method gmg), CG's operator pass kept or coded "
             "(diag kept), the sides alternating after one untimed solve of each: solve seconds "
             "(best / median), iterations, and the coded median over the kept median.\n")
    w.append("| job | cells | kept solve s | iterations | coded, diag kept solve s | iterations | ratio |")
    w.append("|---|---|---|---|---|---|---|")
    for name, n, row in rows:
        if "solves" not in row:
            continue
        k, c = row["solves"]["kept"], row["solves"]["coded, diag kept"]
        ks, cs = [x[0] for x in k], [x[0] for x in c]
        w.append(f"| {name} | {n}^3 | {min(ks):.3f} / {np.median(ks):.3f} | {sorted({x[1] for x in k})} | "
                 f"{min(cs):.3f} / {np.median(cs):.3f} | {sorted({x[1] for x in c})} | "
                 f"{np.median(cs) / np.median(ks):.3f} |")
    engine.write_report(args.results, w, info)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
