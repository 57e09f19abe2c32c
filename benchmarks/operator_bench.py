"""The matrix-free operator against the copy bandwidth, a branch-free variant of it, and
variants that store the diagonal implicitly.

    python benchmarks/operator_bench.py [--sizes 256 512] [--repeats 7] [--interior 300]
                                        [--jblock 32] [--results FILE]

Test data of n^3 cells (float64), built with the structure of a finest level: random face
couplings tx, ty, tz (zero on the last planes); a positive conductance on every cell face of the
six outer planes (as Dirichlet faces give; an edge or corner cell gets one per outer face it
has); ``--interior`` random interior cells with a positive extra (as holds, exchanges and wells
give); diag = the sum of the cell's couplings + those extras.

Variants, each checked against ``stencil.apply`` on the same data (max |difference| / max |A u|
must stay below ``TOLERANCE``, else the script stops):

* ``stencil.apply``: reads u, tx, ty, tz, diag and writes out: 48 B per cell. Since
  2026-12-02 it is branch-free and walks large planes in bands (``stencil._bands``).
* plain order: the operator as it was before that, one x plane per prange iteration, the z
  couplings with branches in the inner loop: 48 B per cell.
* branch-free: the same arrays, the inner z loop without branches (the first and last cell of
  each column handled outside it): 48 B per cell.
* implicit: no diag array; a cell's diagonal is the sum of its six couplings plus ``extra``,
  held as six 2D planes (one per outer face of the block, added, so edge and corner cells get
  each of their faces') and a list of (flat index, value) for the interior cells, added after
  the main loop: 40 B per cell (the planes add 48 B per n cells).
* implicit + branch-free: the implicit diagonal with the branch-free z loop: 40 B per cell.
* branch-free, y bands and implicit + branch-free, y bands: the same arithmetic as branch-free
  and implicit + branch-free, with the loops reordered: each thread walks its slab of x planes
  in bands of ``--jblock`` y rows, so that u's plane i - 1 is still in cache when plane i + 1
  reads it (48 and 40 B per cell).

The times are best of ``--repeats`` each, the six variants and ``np.copyto`` of one n^3 array
(16 B per cell) interleaved three times; two numba threads. The result file gives each
variant's share of the copy bandwidth (its own bytes per cell over its time, against 16 B per
cell over the copy's time), its time over ``stencil.apply``'s, its max difference, the number of
interior cells in the list and the memory saved per unknown by dropping diag (less the planes and
the list). Writes benchmarks/RESULTS_OPERATOR.md.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np
from numba import get_num_threads, njit, prange

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import timing  # noqa: E402
sys.path.insert(0, str(HERE))
import run as engine  # noqa: E402
from sevenfold.kernels.stencil import _apply_row  # noqa: E402  (the production operator's row)

TOLERANCE = 2e-15  # max |variant - stencil.apply| / max |stencil.apply|


@njit(parallel=True)
def apply_plain(tx, ty, tz, diag, u, out):
    """out = A u in the plain order with branches: ``stencil.apply`` before its bands."""
    nx, ny, nz = u.shape
    for i in prange(nx):
        im, ip = max(i - 1, 0), min(i + 1, nx - 1)
        wxm, wxp = (1.0 if i > 0 else 0.0), (1.0 if i < nx - 1 else 0.0)
        for j in range(ny):
            jm, jp = max(j - 1, 0), min(j + 1, ny - 1)
            wym, wyp = (1.0 if j > 0 else 0.0), (1.0 if j < ny - 1 else 0.0)
            for m in range(nz):
                s = (wxm * tx[im, j, m] * u[im, j, m] + wxp * tx[i, j, m] * u[ip, j, m]
                     + wym * ty[i, jm, m] * u[i, jm, m] + wyp * ty[i, j, m] * u[i, jp, m])
                if m > 0:
                    s += tz[i, j, m - 1] * u[i, j, m - 1]
                if m < nz - 1:
                    s += tz[i, j, m] * u[i, j, m + 1]
                out[i, j, m] = diag[i, j, m] * u[i, j, m] - s


@njit(parallel=True)
def apply_branch_free(tx, ty, tz, diag, u, out):
    """out = A u in the plain order (one x plane per prange iteration) with the production
    operator's branch-free rows (``stencil._apply_row``: the z ends peeled off)."""
    nx, ny, nz = u.shape
    for i in prange(nx):
        for j in range(ny):
            _apply_row(tx, ty, tz, diag, u, out, i, j, nx, ny, nz)


@njit(inline="always")
def _coupling_sum(tx, ty, tz, i, j, m, nx, ny, nz):
    """The sum of cell (i, j, m)'s six couplings, in one fixed order (the split and the test
    data use this, so a cell without extra has diag == this sum exactly)."""
    s = 0.0
    if i > 0:
        s += tx[i - 1, j, m]
    if i < nx - 1:
        s += tx[i, j, m]
    if j > 0:
        s += ty[i, j - 1, m]
    if j < ny - 1:
        s += ty[i, j, m]
    if m > 0:
        s += tz[i, j, m - 1]
    if m < nz - 1:
        s += tz[i, j, m]
    return s


@njit(parallel=True)
def _build_diag(tx, ty, tz, ex0, ex1, ey0, ey1, ez0, ez1, idx, val, diag):
    """diag = sum of couplings + each outer face's conductance on its plane + val at idx."""
    nx, ny, nz = diag.shape
    for i in prange(nx):
        for j in range(ny):
            for m in range(nz):
                d = _coupling_sum(tx, ty, tz, i, j, m, nx, ny, nz)
                if i == 0:
                    d += ex0[j, m]
                if i == nx - 1:
                    d += ex1[j, m]
                if j == 0:
                    d += ey0[i, m]
                if j == ny - 1:
                    d += ey1[i, m]
                if m == 0:
                    d += ez0[i, j]
                if m == nz - 1:
                    d += ez1[i, j]
                diag[i, j, m] = d
    flat = diag.reshape(-1)
    for k in range(idx.size):
        flat[idx[k]] += val[k]


@njit
def _interior_extra(tx, ty, tz, diag, count_only, idx, val):
    """The interior cells whose diag differs from the sum of their couplings: their number,
    and (unless ``count_only``) their flat indices and diag - sum in idx, val."""
    nx, ny, nz = diag.shape
    n = 0
    for i in range(1, nx - 1):
        for j in range(1, ny - 1):
            for m in range(1, nz - 1):
                e = diag[i, j, m] - _coupling_sum(tx, ty, tz, i, j, m, nx, ny, nz)
                if e != 0.0:
                    if not count_only:
                        idx[n] = (i * ny + j) * nz + m
                        val[n] = e
                    n += 1
    return n


@njit(parallel=True)
def _plane_extra(tx, ty, tz, diag, ex0, ex1, ey0, ey1, ez0, ez1):
    """diag - sum of couplings on the six outer planes, each cell's in exactly one plane (x
    planes first, then y, then z), so that adding the six planes gives it once."""
    nx, ny, nz = diag.shape
    for i in prange(nx):
        for j in range(ny):
            for m in range(nz):
                on_x = i == 0 or i == nx - 1
                on_y = j == 0 or j == ny - 1
                on_z = m == 0 or m == nz - 1
                if not (on_x or on_y or on_z):
                    continue
                e = diag[i, j, m] - _coupling_sum(tx, ty, tz, i, j, m, nx, ny, nz)
                if on_x:
                    if i == 0:
                        ex0[j, m] = e
                    else:
                        ex1[j, m] = e
                elif on_y:
                    if j == 0:
                        ey0[i, m] = e
                    else:
                        ey1[i, m] = e
                elif m == 0:
                    ez0[i, j] = e
                else:
                    ez1[i, j] = e


def split_diag(tx, ty, tz, diag):
    """(ex0, ex1, ey0, ey1, ez0, ez1), idx, val with diag = sum of couplings + the planes' extra
    (x planes indexed [j, m], y planes [i, m], z planes [i, j]) + val at the flat indices idx.
    Here a cell on several outer planes gets its whole extra in one of them and zero in the
    others; the kernels add all six, so planes holding each face's own conductance work too."""
    nx, ny, nz = diag.shape
    planes = tuple(np.zeros(s) for s in ((ny, nz), (ny, nz), (nx, nz), (nx, nz), (nx, ny), (nx, ny)))
    _plane_extra(tx, ty, tz, diag, *planes)
    n = _interior_extra(tx, ty, tz, diag, True, np.empty(0, np.int64), np.empty(0))
    idx, val = np.empty(n, np.int64), np.empty(n)
    _interior_extra(tx, ty, tz, diag, False, idx, val)
    return planes, idx, val


@njit(inline="always")
def _add_planes(ex0, ex1, ey0, ey1, ez0, ez1, u, out, i, j, nx, ny, nz):
    """out += extra * u for column (i, j) from the six outer planes (the column is in cache)."""
    out[i, j, 0] += ez0[i, j] * u[i, j, 0]
    out[i, j, nz - 1] += ez1[i, j] * u[i, j, nz - 1]
    if i == 0:
        for m in range(nz):
            out[i, j, m] += ex0[j, m] * u[i, j, m]
    if i == nx - 1:
        for m in range(nz):
            out[i, j, m] += ex1[j, m] * u[i, j, m]
    if j == 0:
        for m in range(nz):
            out[i, j, m] += ey0[i, m] * u[i, j, m]
    if j == ny - 1:
        for m in range(nz):
            out[i, j, m] += ey1[i, m] * u[i, j, m]


@njit
def _add_sparse(idx, val, u, out):
    """out += val * u at the flat indices idx (after the parallel loop: no races)."""
    fu, fo = u.reshape(-1), out.reshape(-1)
    for k in range(idx.size):
        fo[idx[k]] += val[k] * fu[idx[k]]


@njit(parallel=True)
def apply_implicit_diag(tx, ty, tz, ex0, ex1, ey0, ey1, ez0, ez1, idx, val, u, out):
    """out = A u without a diag array: diag = sum of the couplings (computed in the loop) +
    the outer planes' extra (per column) + the interior list's (after the loop)."""
    nx, ny, nz = u.shape
    for i in prange(nx):
        im, ip = max(i - 1, 0), min(i + 1, nx - 1)
        wxm, wxp = (1.0 if i > 0 else 0.0), (1.0 if i < nx - 1 else 0.0)
        for j in range(ny):
            jm, jp = max(j - 1, 0), min(j + 1, ny - 1)
            wym, wyp = (1.0 if j > 0 else 0.0), (1.0 if j < ny - 1 else 0.0)
            for m in range(nz):
                a, b = wxm * tx[im, j, m], wxp * tx[i, j, m]
                c, d = wym * ty[i, jm, m], wyp * ty[i, j, m]
                s = a + b + c + d
                v = a * u[im, j, m] + b * u[ip, j, m] + c * u[i, jm, m] + d * u[i, jp, m]
                if m > 0:
                    e = tz[i, j, m - 1]
                    s += e
                    v += e * u[i, j, m - 1]
                if m < nz - 1:
                    e = tz[i, j, m]
                    s += e
                    v += e * u[i, j, m + 1]
                out[i, j, m] = s * u[i, j, m] - v
            _add_planes(ex0, ex1, ey0, ey1, ez0, ez1, u, out, i, j, nx, ny, nz)
    _add_sparse(idx, val, u, out)


@njit(inline="always")
def _implicit_row(tx, ty, tz, ex0, ex1, ey0, ey1, ez0, ez1, u, out, i, j, nx, ny, nz):
    """out[i, j, :] with the implicit diagonal: the x and y couplings in one loop, the z
    couplings in a second, branch-free one (the row's ends outside it), then the planes."""
    im, ip = max(i - 1, 0), min(i + 1, nx - 1)
    wxm, wxp = (1.0 if i > 0 else 0.0), (1.0 if i < nx - 1 else 0.0)
    jm, jp = max(j - 1, 0), min(j + 1, ny - 1)
    wym, wyp = (1.0 if j > 0 else 0.0), (1.0 if j < ny - 1 else 0.0)
    for m in range(nz):
        a, b = wxm * tx[im, j, m], wxp * tx[i, j, m]
        c, d = wym * ty[i, jm, m], wyp * ty[i, j, m]
        out[i, j, m] = ((a + b + c + d) * u[i, j, m] - a * u[im, j, m] - b * u[ip, j, m]
                        - c * u[i, jm, m] - d * u[i, jp, m])
    for m in range(1, nz - 1):
        e, f = tz[i, j, m - 1], tz[i, j, m]
        out[i, j, m] += (e + f) * u[i, j, m] - e * u[i, j, m - 1] - f * u[i, j, m + 1]
    if nz > 1:
        f = tz[i, j, 0]
        out[i, j, 0] += f * (u[i, j, 0] - u[i, j, 1])
        e = tz[i, j, nz - 2]
        out[i, j, nz - 1] += e * (u[i, j, nz - 1] - u[i, j, nz - 2])
    _add_planes(ex0, ex1, ey0, ey1, ez0, ez1, u, out, i, j, nx, ny, nz)


@njit(parallel=True)
def apply_implicit_branch_free(tx, ty, tz, ex0, ex1, ey0, ey1, ez0, ez1, idx, val, u, out):
    """apply_implicit_diag with the z couplings in a second, branch-free loop over the column
    (the first and last cell outside it), as in apply_branch_free."""
    nx, ny, nz = u.shape
    for i in prange(nx):
        for j in range(ny):
            _implicit_row(tx, ty, tz, ex0, ex1, ey0, ey1, ez0, ez1, u, out, i, j, nx, ny, nz)
    _add_sparse(idx, val, u, out)


@njit(parallel=True)
def apply_implicit_blocked(tx, ty, tz, ex0, ex1, ey0, ey1, ez0, ez1, idx, val, u, out, jblock):
    """apply_implicit_branch_free with the loops reordered: each thread takes one slab of x
    planes and walks it in bands of ``jblock`` y rows (all its planes for one band, then the
    next band), so that u's plane i - 1 is still in cache when plane i + 1 needs it."""
    nx, ny, nz = u.shape
    slabs = min(get_num_threads(), nx)
    for t in prange(slabs):
        for j0 in range(0, ny, jblock):
            for i in range(t * nx // slabs, (t + 1) * nx // slabs):
                for j in range(j0, min(j0 + jblock, ny)):
                    _implicit_row(tx, ty, tz, ex0, ex1, ey0, ey1, ez0, ez1, u, out, i, j, nx, ny, nz)
    _add_sparse(idx, val, u, out)


@njit(parallel=True)
def apply_branch_free_blocked(tx, ty, tz, diag, u, out, jblock):
    """The branch-free rows (with diag, 48 B per cell) in the loop order of
    apply_implicit_blocked: one slab of x planes per thread."""
    nx, ny, nz = u.shape
    slabs = min(get_num_threads(), nx)
    for t in prange(slabs):
        for j0 in range(0, ny, jblock):
            for i in range(t * nx // slabs, (t + 1) * nx // slabs):
                for j in range(j0, min(j0 + jblock, ny)):
                    _apply_row(tx, ty, tz, diag, u, out, i, j, nx, ny, nz)


def best(f, repeats: int) -> float:
    """The fastest of ``repeats`` calls after one untimed call (compile, first touch)."""
    f()
    return timing.best(f, repeats)


def test_data(n: int, interior: int, rng):
    """tx, ty, tz, diag, u and the extras the diagonal was built from (planes, idx, val)."""
    shape = (n, n, n)
    tx, ty, tz = (rng.uniform(0.5, 1.5, shape) for _ in range(3))
    tx[-1], ty[:, -1], tz[:, :, -1] = 0.0, 0.0, 0.0
    planes = tuple(rng.uniform(1.0, 3.0, (n, n)) for _ in range(6))  # about 2 k A / h
    inner = np.arange(1, n - 1)
    cells = (rng.choice(inner, (interior, 3)) if n > 2 else np.empty((0, 3), np.int64))
    idx = np.unique((cells[:, 0] * n + cells[:, 1]) * n + cells[:, 2]).astype(np.int64)
    val = rng.uniform(0.1, 5.0, idx.size)
    diag = np.empty(shape)
    _build_diag(tx, ty, tz, *planes, idx, val, diag)
    u = rng.standard_normal(shape)
    return tx, ty, tz, diag, u, planes, idx, val


VARIANTS = ("stencil.apply", "plain order", "branch-free", "implicit", "implicit + branch-free", "branch-free, y bands",
            "implicit + branch-free, y bands")
BYTES = {"stencil.apply": 48, "plain order": 48, "branch-free": 48, "implicit": 40, "implicit + branch-free": 40,
         "branch-free, y bands": 48, "implicit + branch-free, y bands": 40}


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--sizes", type=int, nargs="+", default=[256, 512])
    p.add_argument("--repeats", type=int, default=7)
    p.add_argument("--interior", type=int, default=300, help="interior cells with an extra diagonal")
    p.add_argument("--jblock", type=int, default=32, help="y rows per band in the banded variants")
    p.add_argument("--results", type=Path, default=HERE / "RESULTS_OPERATOR.md")
    args = p.parse_args(argv)
    from sevenfold.kernels import stencil

    rows = []
    for n in args.sizes:
        rng = np.random.default_rng(1)
        tx, ty, tz, diag, u, built_planes, built_idx, _ = test_data(n, args.interior, rng)
        planes, idx, val = split_diag(tx, ty, tz, diag)
        if not np.array_equal(idx, built_idx):
            raise SystemExit(f"{n}^3: the split found {idx.size} interior cells with extra, "
                             f"the data has {built_idx.size}")
        del built_planes
        out, ref = np.empty(u.shape), np.empty(u.shape)
        stencil.apply(tx, ty, tz, diag, u, ref)
        scale = float(np.abs(ref).max())
        jb = args.jblock
        calls = {
            "stencil.apply": lambda: stencil.apply(tx, ty, tz, diag, u, out),
            "plain order": lambda: apply_plain(tx, ty, tz, diag, u, out),
            "branch-free": lambda: apply_branch_free(tx, ty, tz, diag, u, out),
            "implicit": lambda: apply_implicit_diag(tx, ty, tz, *planes, idx, val, u, out),
            "implicit + branch-free": lambda: apply_implicit_branch_free(tx, ty, tz, *planes, idx, val,
                                                                         u, out),
            "branch-free, y bands": lambda: apply_branch_free_blocked(tx, ty, tz, diag, u, out, jb),
            "implicit + branch-free, y bands": lambda: apply_implicit_blocked(tx, ty, tz, *planes, idx, val,
                                                                              u, out, jb),
            "copy": lambda: np.copyto(out, u),
        }
        errors = {}
        for name in VARIANTS[1:]:
            out.fill(np.nan)
            calls[name]()
            errors[name] = float(np.abs(out - ref).max() / scale)
            if not errors[name] < TOLERANCE:  # (also catches NaN: a cell not written)
                raise SystemExit(f"{n}^3: {name} differs from stencil.apply by {errors[name]:.2e} "
                                 f"relative (tolerance {TOLERANCE:.0e})")
        times = dict.fromkeys(calls, np.inf)
        for _ in range(3):  # interleaved, so a change in the machine's load hits all of them
            for name, f in calls.items():
                times[name] = min(times[name], best(f, args.repeats))
        copy_bw = 16 * n**3 / times["copy"]
        share = {k: BYTES[k] * n**3 / times[k] / copy_bw for k in VARIANTS}
        ratio = {k: times[k] / times["stencil.apply"] for k in VARIANTS[1:]}
        saved = (diag.nbytes - sum(a.nbytes for a in planes) - idx.nbytes - val.nbytes) / n**3
        rows.append((n, share, ratio, copy_bw, errors, saved, idx.size))
        print(n, {k: f"{v:.0%}" for k, v in share.items()}, {k: f"{v:.3f}" for k, v in ratio.items()},
              f"copy {copy_bw / 1e9:.1f} GB/s", {k: f"{v:.1e}" for k, v in errors.items()},
              f"saves {saved:.2f} B/unknown", flush=True)
    head, info = engine.report_head("operator_bench.py", argv, "The operator against the copy bandwidth")
    names = " | ".join(VARIANTS)
    out_lines = head + [
        "Variants (see the script's docstring): `stencil.apply`, the production operator (branch-free, "
        "large planes in bands); plain order: the production operator before that; branch-free: "
        "the plain order's z loop without branches; implicit: no diag array, a cell's diagonal is the sum of its "
        "six couplings plus an extra held in six 2D planes (the outer faces) and a list (interior "
        "cells); implicit + branch-free: both; y bands: the same arithmetic with each thread walking "
        f"its x slab in bands of {args.jblock} y rows. Test data: diag = sum of couplings + a positive "
        "conductance on each outer face + an extra on a few hundred random interior cells. Best "
        "times of each, all interleaved in one run.", "",
        "Share of `np.copyto`'s bandwidth (16 B per cell) reached per application, each variant "
        "counted with its own bytes per cell: " + ", ".join(f"{k} {b}" for k, b in BYTES.items())
        + " (48: read u, tx, ty, tz, diag, write out; 40: no diag).", "",
        f"| cells | {names} | copy GB/s |", "|---|" + "---|" * (len(VARIANTS) + 1)]
    for n, share, _, copy_bw, *_ in rows:
        out_lines.append(f"| {n}^3 | " + " | ".join(f"{share[k]:.0%}" for k in VARIANTS)
                         + f" | {copy_bw / 1e9:.1f} |")
    out_lines += [
        "", "Time per application over `stencil.apply`'s in the same run (below 1 is faster):", "",
        f"| cells | {' | '.join(VARIANTS[1:])} |", "|---|" + "---|" * (len(VARIANTS) - 1)]
    for n, _, ratio, *_ in rows:
        out_lines.append(f"| {n}^3 | " + " | ".join(f"{ratio[k]:.3f}" for k in VARIANTS[1:]) + " |")
    out_lines += [
        "", f"Max |variant - stencil.apply| / max |stencil.apply| (the script stops above {TOLERANCE:.0e}); "
        "interior extras: the list's length from the split; saved: the dropped diag array minus the "
        "planes and the list, bytes per unknown:", "",
        f"| cells | {' | '.join(VARIANTS[1:])} | interior extras | saved B/unknown |",
        "|---|" + "---|" * (len(VARIANTS) + 1)]
    for n, _, _, _, errors, saved, count in rows:
        out_lines.append(f"| {n}^3 | " + " | ".join(f"{errors[k]:.1e}" for k in VARIANTS[1:])
                         + f" | {count} | {saved:.2f} |")
    engine.write_report(args.results, out_lines, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
