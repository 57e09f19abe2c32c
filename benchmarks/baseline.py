"""The plain numpy + scipy + pyamg script that sevenfold is measured against.

Steady -div(k grad u) = f on the unit cube split into n^3 cells (cell-centred finite
volumes, 7-point stencil). The coefficient is 1 with low-conductivity walls and
inclusions of 1e-3 (contrast 1000:1), laid out in :data:`BOXES`; a cell takes a box's
value when its centre lies in the box (boundary included), later boxes winning. The x_min
face is held at 1 and x_max at 0, half a cell from the boundary cells' centres; the other
faces are insulated; f = 0. Equations are written per unit cell volume.

``--pattern column`` is a different problem: k = 1000 in the column 0.3 < x, y < 0.7 through
the full height (k = 1 elsewhere), all six faces held at 0 (again half a cell from the
boundary centres), f = sin(pi x) sin(pi y) sin(pi z) at the cell centres.

    python benchmarks/baseline.py --cells 128 --out sol.npy [--pattern layered|column]

prints one JSON line of timings (seconds), iterations and peak RSS (bytes).
"""

from __future__ import annotations

import argparse
import json
import resource
import time

import numpy as np
import pyamg
import scipy.sparse as sp
from scipy.sparse.linalg import cg

K_BACKGROUND = 1.0
K_LOW = 1.0e-3
K_HIGH = 1.0e3  # the column pattern's column
# (min corner, max corner, coefficient) on the unit cube; edges on multiples of 1/8.
BOXES: tuple[tuple[tuple[float, float, float], tuple[float, float, float], float], ...] = (
    ((0.25, 0.0, 0.0), (0.375, 1.0, 0.75), K_LOW),     # wall across x, open above z = 0.75
    ((0.625, 0.0, 0.25), (0.75, 1.0, 1.0), K_LOW),     # wall across x, open below z = 0.25
    ((0.375, 0.125, 0.125), (0.625, 0.375, 0.375), K_LOW),  # inclusion between the walls
    ((0.375, 0.625, 0.5), (0.625, 0.875, 0.875), K_LOW),    # inclusion between the walls
)
Box = tuple[tuple[float, float, float], tuple[float, float, float], float]
PATTERNS = ("walls", "constant", "layered", "inclusions", "column")
COLUMN: Box = ((0.3, 0.3, 0.0), (0.7, 0.7, 1.0), K_HIGH)
INCLUSIONS = 60
INCLUSION_SEED = 20261201


def pattern_boxes(pattern: str) -> tuple[Box, ...]:
    """The coefficient boxes of a named pattern (k = 1 outside them, the box's value inside).

    walls: :data:`BOXES`. constant: none. layered: five 1000:1 layers across x with edges off
    the dyadic planes, shifted between the halves y < 0.5 and y > 0.5 (a fault), so no layer
    lines up with coarse cells and every path from x_min to x_max crosses them. inclusions:
    :data:`INCLUSIONS` random boxes (seed :data:`INCLUSION_SEED`), edges rounded to 1e-4.
    All of these are 1e-3. column: :data:`COLUMN`, one box of 1000 (see :func:`problem`).
    """
    if pattern == "walls":
        return BOXES
    if pattern == "constant":
        return ()
    if pattern == "layered":
        layers = ((0.11, 0.17), (0.29, 0.36), (0.47, 0.55), (0.66, 0.71), (0.83, 0.9))
        out: list[Box] = []
        for (y0, y1), shift in (((0.0, 0.5), 0.0), ((0.5, 1.0), 0.043)):
            for x0, x1 in layers:
                out.append(((round(x0 + shift, 4), y0, 0.0), (round(x1 + shift, 4), y1, 1.0), K_LOW))
        return tuple(out)
    if pattern == "column":
        return (COLUMN,)
    if pattern == "inclusions":
        rng = np.random.default_rng(INCLUSION_SEED)
        centre = rng.uniform(0.05, 0.95, (INCLUSIONS, 3))
        half = rng.uniform(0.02, 0.09, (INCLUSIONS, 3))
        lo = np.round(np.clip(centre - half, 0.0, 1.0), 4)
        hi = np.round(np.clip(centre + half, 0.0, 1.0), 4)
        return tuple((tuple(map(float, a)), tuple(map(float, b)), K_LOW) for a, b in zip(lo, hi))
    raise ValueError(f"unknown pattern {pattern!r}; one of {', '.join(PATTERNS)}")


U_X_MIN = 1.0
U_X_MAX = 0.0
FACES = ("x_min", "x_max", "y_min", "y_max", "z_min", "z_max")
X_FACES = {"x_min": U_X_MIN, "x_max": U_X_MAX}  # every pattern but column; other faces insulated
COLUMN_FACES = dict.fromkeys(FACES, 0.0)  # the column pattern holds every face at 0
RTOL = 1e-8
MAX_ITERATIONS = 500


def coefficient(n: int, boxes: tuple[Box, ...] = BOXES, c: np.ndarray | None = None) -> np.ndarray:
    """k on the n^3 cells of the unit cube, indexed [x, y, z]; ``c`` holds the cell centres
    along each axis, by default (i + 1/2) / n."""
    c = (np.arange(n) + 0.5) * (1.0 / n) if c is None else c
    x, y, z = c[:, None, None], c[None, :, None], c[None, None, :]
    k = np.full((n, n, n), K_BACKGROUND)
    for lo, hi, value in boxes:
        inside = ((lo[0] <= x) & (x <= hi[0])) & ((lo[1] <= y) & (y <= hi[1])) & ((lo[2] <= z) & (z <= hi[2]))
        k[np.broadcast_to(inside, k.shape)] = value
    return k


def centres(n: int) -> np.ndarray:
    """Cell centres along one axis of the unit cube cut into n cells, rounded as sevenfold
    rounds them (midpoints of the edges i * (1/n)). (i + 1/2) / n can differ in the last bit,
    which moves a cell in or out of a box when its centre lies on the box's face: for the
    column that happens when n is an odd multiple of 5."""
    e = np.arange(n + 1) * (1.0 / n)
    return 0.5 * (e[:-1] + e[1:])


def problem(pattern: str, n: int) -> tuple[np.ndarray, dict[str, float], np.ndarray | None]:
    """``pattern`` on n^3 cells: k, the Dirichlet faces (name -> value; the faces not named are
    insulated) and the source per unit volume at the cell centres (None for none)."""
    if pattern != "column":
        return coefficient(n, pattern_boxes(pattern)), X_FACES, None
    c = centres(n)
    s = np.sin(np.pi * c)
    f = s[:, None, None] * s[None, :, None] * s[None, None, :]
    return coefficient(n, (COLUMN,), c), dict(COLUMN_FACES), f


def assemble(
    k: np.ndarray, spacing: tuple[float, float, float],
    dirichlet: dict[str, float] | None = None, source: np.ndarray | None = None,
) -> tuple[sp.csr_matrix, np.ndarray]:
    """The 7-point matrix and right-hand side, from COO triplets of every interior face.

    ``dirichlet`` maps face names (:data:`FACES`) to held values, default :data:`X_FACES`;
    ``source`` is f per unit volume per cell, default none.
    """
    shape = k.shape
    cells = k.size
    index = np.arange(cells).reshape(shape)
    rows, cols, vals = [], [], []
    for axis in range(3):
        lo = [slice(None)] * 3
        hi = [slice(None)] * 3
        lo[axis] = slice(0, -1)
        hi[axis] = slice(1, None)
        k_lo, k_hi = k[tuple(lo)], k[tuple(hi)]
        t = (2.0 * k_lo * k_hi / (k_lo + k_hi) / spacing[axis] ** 2).ravel()
        p = index[tuple(lo)].ravel()
        q = index[tuple(hi)].ravel()
        rows += [p, q, p, q]
        cols += [p, q, q, p]
        vals += [t, t, -t, -t]
    # Dirichlet faces: the face value sits half a cell from the boundary cell's centre
    b = np.zeros(shape) if source is None else np.array(source, dtype=np.float64).reshape(shape)
    for face, value in (X_FACES if dirichlet is None else dirichlet).items():
        axis = "xyz".index(face[0])
        plane = (slice(None),) * axis + (0 if face.endswith("_min") else -1,)
        g = 2.0 * k[plane] / spacing[axis] ** 2
        p = index[plane].ravel()
        rows.append(p)
        cols.append(p)
        vals.append(g.ravel())
        b[plane] += g * value
    A = sp.coo_matrix(
        (np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(cells, cells)
    ).tocsr()
    return A, b.ravel()


def solve(A: sp.csr_matrix, b: np.ndarray, rtol: float = RTOL) -> tuple[np.ndarray, int, float, float]:
    """Smoothed-aggregation AMG as CG's preconditioner: solution, iterations, setup s, solve s."""
    t0 = time.perf_counter()
    ml = pyamg.smoothed_aggregation_solver(A)
    M = ml.aspreconditioner()
    t1 = time.perf_counter()
    iterations = 0

    def count(_x: np.ndarray) -> None:
        nonlocal iterations
        iterations += 1

    x, info = cg(A, b, rtol=rtol, maxiter=MAX_ITERATIONS, M=M, callback=count)
    t2 = time.perf_counter()
    if info != 0:
        raise SystemExit(f"cg did not converge (info {info}) after {iterations} iterations")
    return x, iterations, t1 - t0, t2 - t1


def main(argv: list[str] | None = None) -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--cells", type=int, default=128, help="cells along each axis")
    p.add_argument("--out", default="sol.npy", help="where to np.save the (n, n, n) solution")
    p.add_argument("--rtol", type=float, default=RTOL)
    p.add_argument("--pattern", default="walls", choices=PATTERNS, help="coefficient pattern (default walls)")
    args = p.parse_args(argv)
    n = args.cells
    h = 1.0 / n

    t0 = time.perf_counter()
    k, dirichlet, source = problem(args.pattern, n)
    t1 = time.perf_counter()
    A, b = assemble(k, (h, h, h), dirichlet, source)
    t2 = time.perf_counter()
    x, iterations, setup, solve_s = solve(A, b, args.rtol)
    residual = float(np.linalg.norm(b - A @ x) / np.linalg.norm(b))
    t3 = time.perf_counter()
    np.save(args.out, x.reshape(k.shape))
    t4 = time.perf_counter()
    print(json.dumps({
        "cells": n**3,
        "coefficient": t1 - t0,
        "assembly": t2 - t1,
        "setup": setup,
        "solve": solve_s,
        "write": t4 - t3,
        "total": t4 - t0,
        "iterations": iterations,
        "relative_residual": residual,
        "peak_rss_bytes": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024,
    }))


if __name__ == "__main__":
    main()
