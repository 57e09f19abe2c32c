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
import os
import shutil
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


BAD_JOBS = Path(__file__).parent / "bad_jobs"


def bad_job_corpus(folder: Path) -> Path:
    """Copy tests/bad_jobs into ``folder`` with the arrays its file cases name: one
    mis-shaped, one holding a NaN, and decreasing edges for a graded axis."""
    folder.mkdir(parents=True, exist_ok=True)
    for case in BAD_JOBS.glob("*.toml"):
        shutil.copy(case, folder / case.name)
    np.save(folder / "k_3x3x3.npy", np.ones((3, 3, 3)))
    bad = np.ones((4, 4, 4))
    bad[1, 2, 3] = np.nan
    np.save(folder / "k_nan.npy", bad)
    np.save(folder / "edges_decreasing.npy", np.array([0.0, 0.5, 0.1, 1.0]))
    return folder


def make_table(**overrides: Any) -> dict[str, Any]:
    """A job table: ``BASE_TABLE`` with top-level keys replaced by ``overrides``."""
    table = copy.deepcopy(BASE_TABLE)
    table.update(copy.deepcopy(overrides))
    return table


def write_layer_job(path: Path, k_weak: float, n: int, x: tuple[float, float] = (0.37, 0.41)) -> Path:
    """A gmg job on n^3 cells of k = 1 with one layer of ``k_weak`` across x (``x`` its
    bounds), u = 1 at x_min and 0 at x_max: the contrast that picks gmg's float type."""
    path.write_text(f"""name = "layer"
[grid]
cells = [{n}, {n}, {n}]
size = [1.0, 1.0, 1.0]
[material]
value = 1.0
[[material.region]]
box = {{ min = [{x[0]}, 0.0, 0.0], max = [{x[1]}, 1.0, 1.0] }}
value = {k_weak!r}
[boundary]
x_min = {{ type = "dirichlet", value = 1.0 }}
x_max = {{ type = "dirichlet", value = 0.0 }}
[solver]
method = "gmg"
""")
    return path


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


def edges_of(table: dict[str, Any]) -> list[np.ndarray]:
    """Cell edges per axis of a table's grid, read independently: uniform axes from cells and
    size (or spacing) and origin, graded axes from explicit edge lists in ``grid.edges``."""
    g = table["grid"]
    graded = g.get("edges", {})
    out = []
    for a, name in enumerate("xyz"):
        if name in graded:
            out.append(np.asarray(graded[name], dtype=float))
            continue
        n = g["cells"][a]
        h = float(g["spacing"][a]) if "spacing" in g else float(g["size"][a]) / n
        o = float(g.get("origin", (0.0, 0.0, 0.0))[a])
        out.append(o + h * np.arange(n + 1))
    return out


def grid_of(table: dict[str, Any]):
    """(cells, spacing, origin) of a table's uniform grid, read independently."""
    edges = edges_of(table)
    cells = tuple(e.size - 1 for e in edges)
    spacing = tuple(float(e[1] - e[0]) for e in edges)
    origin = tuple(float(e[0]) for e in edges)
    return cells, spacing, origin


def centres(table: dict[str, Any]):
    """Cell-centre coordinates as three full (nx, ny, nz) arrays: midpoints of the edges."""
    axes = [0.5 * (e[1:] + e[:-1]) for e in edges_of(table)]
    return np.meshgrid(*axes, indexing="ij")


def volumes(table: dict[str, Any]) -> np.ndarray:
    """Cell volumes as an (nx, ny, nz) array."""
    w = [np.diff(e) for e in edges_of(table)]
    return w[0][:, None, None] * w[1][None, :, None] * w[2][None, None, :]


def _in_box(box, x, y, z):
    (x0, y0, z0), (x1, y1, z1) = box["min"], box["max"]
    return (x0 <= x) & (x <= x1) & (y0 <= y) & (y <= y1) & (z0 <= z) & (z <= z1)


def reference_fields(table: dict[str, Any]):
    """k, f, held mask and held values on the cells, for values and box regions only."""
    x, y, z = centres(table)

    def component(value, a):
        return value[a] if isinstance(value, (list, tuple)) else value

    k = []
    for a in range(3):  # the directional components (the same values thrice when isotropic)
        ka = np_eval(component(table["material"]["value"], a), x, y, z)
        for region in table["material"].get("region", ()):
            m = _in_box(region["box"], x, y, z)
            ka[m] = np_eval(component(region["value"], a), x, y, z)[m]
        k.append(ka)
    vol = volumes(table)
    f = np_eval(table.get("source", {}).get("value", 0.0), x, y, z)
    for region in table.get("source", {}).get("region", ()):
        m = _in_box(region["box"], x, y, z)
        if "total" in region:  # spread evenly per unit volume over the region's cells
            f[m] = region["total"] / vol[m].sum()
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

    Row P is the balance of cell P (amount per time): sum_N T_PN (u_P - u_N) + D_P u_P =
    f_P V_P + B_P with T_PN = A / (h_P / (2 k_P) + h_N / (2 k_N)) (A the shared face's area,
    h each cell's width and k its coefficient along the axis); a Dirichlet face adds G A and
    G g A with G = 2 k_P / h_P; a Robin face the same with G = 1 / (1/c + h_P / (2 k_P)); a
    Neumann face adds q A to the right-hand side. Returns (A as CSR, b, held, held_value).
    """
    edges = edges_of(table)
    cells = tuple(e.size - 1 for e in edges)
    widths = [np.diff(e) for e in edges]
    mids = [0.5 * (e[1:] + e[:-1]) for e in edges]
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
                cell = (i, j, kk)
                w = [widths[a][cell[a]] for a in range(3)]
                b[p] += f[cell] * w[0] * w[1] * w[2]
                centre = [mids[a][cell[a]] for a in range(3)]
                for axis in range(3):
                    kp = k[axis][cell]
                    h = w[axis]
                    area = math.prod(w[a] for a in range(3) if a != axis)
                    for step, face in ((-1, FACES[2 * axis]), (1, FACES[2 * axis + 1])):
                        nb = [i, j, kk]
                        nb[axis] += step
                        if 0 <= nb[axis] < cells[axis]:
                            kn = k[axis][tuple(nb)]
                            hn = widths[axis][nb[axis]]
                            t = area / (h / (2.0 * kp) + hn / (2.0 * kn))
                            rows += [p, p]
                            cols += [p, index(*nb)]
                            vals += [t, -t]
                            continue
                        # boundary face: on the box face, at the cell centre's other coordinates
                        fc = list(centre)
                        fc[axis] = edges[axis][0 if step < 0 else -1]
                        cond = boundary.get(face, {"type": "neumann", "flux": 0.0})
                        at = lambda v: float(np_eval(v, *fc))  # noqa: E731
                        if cond["type"] == "dirichlet":
                            g = 2.0 * kp / h
                            rows.append(p), cols.append(p), vals.append(g * area)
                            b[p] += g * at(cond["value"]) * area
                        elif cond["type"] == "robin":
                            c = at(cond["coefficient"])
                            g = 1.0 / (1.0 / c + h / (2.0 * kp))
                            rows.append(p), cols.append(p), vals.append(g * area)
                            b[p] += g * at(cond["reference"]) * area
                        else:
                            b[p] += at(cond.get("flux", 0.0)) * area
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
@pytest.fixture(scope="session", autouse=True)
def own_queue_home(tmp_path_factory) -> None:
    """An empty default queue home: `sevenfold run` hands its job to an idle worker of the
    default home, and a developer's own worker must not take the tests' jobs."""
    os.environ["SEVENFOLD_HOME"] = str(tmp_path_factory.mktemp("default-home") / "home")


@pytest.fixture(scope="session")
def warm_cache(tmp_path_factory) -> Path:
    """A numba cache with the kernels compiled: two draining workers on an empty queue, started
    at once from an empty cache (a fresh install), make it. From then on it is this session's
    ``NUMBA_CACHE_DIR``, so every process the tests start (workers of other homes, `sevenfold
    run`) finds the kernels compiled, as they would after an install's first start.

    Shared by the queue and web tests that start workers (the first to ask pays the compile).
    """
    from queue_support import WorkerProcess, make_home

    cache = tmp_path_factory.mktemp("numba-cache")
    os.environ["NUMBA_CACHE_DIR"] = str(cache)
    home = make_home(tmp_path_factory.mktemp("warm") / "home")
    workers = [WorkerProcess(home, "--drain") for _ in range(2)]  # two first starts at once
    for w in workers:
        assert w.wait() == 0, w.output()
    assert any(cache.rglob("*.nbi")), "the warm-up left no compiled kernels"
    assert not (home.root / "numba-cache").exists(), "a home keeps no cache of its own"
    # a first start in a new home says it compiles, before its slot is ready; the other
    # worker waits for the compile (a lock) and finds the kernels compiled
    texts = [w.output() for w in workers]
    assert sum(t.count("compiling the numerical kernels once") for t in texts) == 1, texts
    for text in texts:
        if "compiling" in text:
            assert text.index("compiling the numerical kernels") < text.index("ready")
        assert "ready" in text, text
    return cache
