"""Shared helpers of the numerical verification tests.

``make_spec`` and ``solve_spec`` drive the engine through its public steps (job table ->
spec -> problem -> assembled system -> direct solve -> full field). ``reference_system`` is
an independent reading of the same job table: a plain loop over cells and faces that writes
the finite-volume balance of the discretisation contract, without using sevenfold's grid,
fields, boundary or assembly code, so the tests can compare the two.
"""

from __future__ import annotations

import copy
import math
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import scipy.sparse as sp

from sevenfold.operator import assemble, scatter
from sevenfold.problem import build_problem
from sevenfold.solvers.direct import solve_direct
from sevenfold.spec import parse_job

FACES = ("x_min", "x_max", "y_min", "y_max", "z_min", "z_max")

BASE_TABLE: dict[str, Any] = {
    "name": "verification",
    "grid": {"cells": [4, 3, 5], "size": [1.0, 1.0, 1.0]},
    "material": {"value": 1.0},
    "source": {"value": 0.0},
    "boundary": {},
    "solver": {"method": "direct"},
}


def make_table(**overrides: Any) -> dict[str, Any]:
    """A job table: ``BASE_TABLE`` with top-level keys replaced by ``overrides``."""
    table = copy.deepcopy(BASE_TABLE)
    table.update(copy.deepcopy(overrides))
    return table


def make_spec(**overrides: Any):
    """A validated JobSpec from ``BASE_TABLE`` with top-level keys replaced."""
    return parse_job(make_table(**overrides), "test")


def solve_spec(spec, coefficient_file=None, source_file=None):
    """Build, assemble, solve directly and scatter: returns (u on all cells, problem)."""
    problem = build_problem(spec, coefficient_file, source_file)
    system = assemble(problem)
    result = solve_direct(system.matrix, system.rhs)
    return scatter(system, problem, result.x), problem


# ---------------------------------------------------------------- independent reading
_NUMPY_NAMES = {
    "sin": np.sin, "cos": np.cos, "tan": np.tan, "exp": np.exp, "log": np.log,
    "sqrt": np.sqrt, "sinh": np.sinh, "cosh": np.cosh, "tanh": np.tanh,
    "arctan": np.arctan, "abs": np.abs, "where": np.where, "pi": math.pi,
}


def np_eval(value: float | str, x, y, z) -> np.ndarray:
    """A number, or an expression string in x, y, z evaluated with numpy (test-side only)."""
    shape = np.broadcast_shapes(np.shape(x), np.shape(y), np.shape(z))
    if isinstance(value, str):
        out = eval(value, {"__builtins__": {}}, {**_NUMPY_NAMES, "x": x, "y": y, "z": z})
        return np.broadcast_to(np.asarray(out, dtype=float), shape).copy()
    return np.full(shape, float(value))


def grid_of(table: dict[str, Any]):
    """(cells, spacing, origin) of a table's grid, read independently."""
    g = table["grid"]
    cells = tuple(g["cells"])
    if "spacing" in g:
        spacing = tuple(float(s) for s in g["spacing"])
    else:
        spacing = tuple(float(s) / n for s, n in zip(g["size"], cells))
    origin = tuple(float(o) for o in g.get("origin", (0.0, 0.0, 0.0)))
    return cells, spacing, origin


def centres(table: dict[str, Any]):
    """Cell-centre coordinates as three full (nx, ny, nz) arrays: origin + (i + 1/2) h."""
    cells, spacing, origin = grid_of(table)
    axes = [o + (np.arange(n) + 0.5) * h for n, h, o in zip(cells, spacing, origin)]
    return np.meshgrid(*axes, indexing="ij")


def _in_box(box, x, y, z):
    (x0, y0, z0), (x1, y1, z1) = box["min"], box["max"]
    return (x0 <= x) & (x <= x1) & (y0 <= y) & (y <= y1) & (z0 <= z) & (z <= z1)


def reference_fields(table: dict[str, Any]):
    """k, f, held mask and held values on the cells, for values and box regions only."""
    x, y, z = centres(table)
    k = np_eval(table["material"]["value"], x, y, z)
    for region in table["material"].get("region", ()):
        m = _in_box(region["box"], x, y, z)
        k[m] = np_eval(region["value"], x, y, z)[m]
    cell_volume = np.prod(grid_of(table)[1])
    f = np_eval(table.get("source", {}).get("value", 0.0), x, y, z)
    for region in table.get("source", {}).get("region", ()):
        m = _in_box(region["box"], x, y, z)
        if "total" in region:  # spread evenly over the region's cells
            f[m] = region["total"] / (np.count_nonzero(m) * cell_volume)
        else:
            f[m] = np_eval(region["value"], x, y, z)[m]
    held = np.zeros(x.shape, dtype=bool)
    held_value = np.zeros(x.shape)
    for hold in table.get("hold", ()):
        m = _in_box(hold["box"], x, y, z)
        held |= m
        held_value[m] = hold["value"]
    return k, f, held, held_value


def reference_system(table: dict[str, Any]):
    """The full operator on every cell (holds not yet removed) and its right-hand side.

    Per unit cell volume, row P: sum_N T_PN (u_P - u_N) + D_P u_P = f_P + B_P with
    T_PN = 2 k_P k_N / (k_P + k_N) / h^2; a Dirichlet face adds G/h and G g/h with
    G = 2 k_P / h; a Robin face the same with G = 1 / (1/c + h / (2 k_P)); a Neumann face
    adds q/h to the right-hand side. Returns (A as CSR, b, held, held_value).
    """
    cells, spacing, origin = grid_of(table)
    nx, ny, nz = cells
    k, f, held, held_value = reference_fields(table)
    boundary = table.get("boundary", {})
    size = nx * ny * nz

    def index(i, j, kk):
        return (i * ny + j) * nz + kk

    rows, cols, vals = [], [], []
    b = np.zeros(size)
    for i in range(nx):
        for j in range(ny):
            for kk in range(nz):
                p = index(i, j, kk)
                kp = k[i, j, kk]
                b[p] += f[i, j, kk]
                centre = [origin[a] + (c + 0.5) * spacing[a] for a, c in enumerate((i, j, kk))]
                for axis in range(3):
                    h = spacing[axis]
                    for step, face in ((-1, FACES[2 * axis]), (1, FACES[2 * axis + 1])):
                        nb = [i, j, kk]
                        nb[axis] += step
                        if 0 <= nb[axis] < cells[axis]:
                            kn = k[tuple(nb)]
                            t = 2.0 * kp * kn / (kp + kn) / h**2
                            rows += [p, p]
                            cols += [p, index(*nb)]
                            vals += [t, -t]
                            continue
                        # boundary face: its centre is the cell centre moved half a cell
                        fc = list(centre)
                        fc[axis] = origin[axis] + (0.0 if step < 0 else cells[axis] * h)
                        cond = boundary.get(face, {"type": "neumann", "flux": 0.0})
                        at = lambda v: float(np_eval(v, *fc))  # noqa: E731
                        if cond["type"] == "dirichlet":
                            g = 2.0 * kp / h
                            rows.append(p), cols.append(p), vals.append(g / h)
                            b[p] += g * at(cond["value"]) / h
                        elif cond["type"] == "robin":
                            c = at(cond["coefficient"])
                            g = 1.0 / (1.0 / c + h / (2.0 * kp))
                            rows.append(p), cols.append(p), vals.append(g / h)
                            b[p] += g * at(cond["reference"]) / h
                        else:
                            b[p] += at(cond.get("flux", 0.0)) / h
    A = sp.coo_matrix((vals, (rows, cols)), shape=(size, size)).tocsr()
    return A, b, held, held_value


def eliminate(A, b, held, held_value):
    """Remove held cells: A_ff and b_f - A_fh u_h, free cells in C order."""
    free = np.flatnonzero(~held.ravel())
    fixed = np.flatnonzero(held.ravel())
    A = sp.csr_matrix(A)
    Aff = A[free][:, free]
    bf = b[free] - A[free][:, fixed] @ held_value.ravel()[fixed]
    return Aff, bf


# ---------------------------------------------------------------- queue tests
@pytest.fixture(scope="session")
def warm_cache(tmp_path_factory) -> Path:
    """A numba cache with the kernels compiled: a draining worker on an empty queue makes it.

    Shared by the queue and web tests that start workers (the first to ask pays the compile).
    """
    from queue_support import WorkerProcess, make_home

    home = make_home(tmp_path_factory.mktemp("warm") / "home")
    w = WorkerProcess(home, "--drain")
    assert w.wait() == 0, w.output()
    assert any(home.numba_cache.rglob("*.nbi")), "the warm-up left no compiled kernels"
    return home.numba_cache
