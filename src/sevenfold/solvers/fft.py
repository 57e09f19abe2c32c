"""Exact fast solve by fast sine/cosine transforms, for constant coefficient and no holds.

With k constant and no held cells, the discrete system of the cell-centred 7-point
operator (per unit cell volume, see :mod:`sevenfold.kernels.assembly`) is

    k (L_x + L_y + L_z) u = b,    b = f + (G value + q) / h on boundary cells,

where ``L_a`` is the 1D second difference along axis ``a`` with its two boundary rows.
A Dirichlet face at half a cell (G = 2 k / h) makes the boundary row read
``(3 u_0 - u_1) / h^2``: the ghost value is ``-u_0``. A Neumann face (G = 0) makes it
``(u_0 - u_1) / h^2``: the ghost value is ``+u_0``. With both faces of an axis of the same
type, ``L_a`` is diagonalised exactly by the orthonormal DST-II (Dirichlet) or DCT-II
(Neumann), with eigenvalues, for m = 0 .. n-1,

    Dirichlet: 4 / h^2 sin^2(pi (m + 1) / (2 n))      Neumann: 4 / h^2 sin^2(pi m / (2 n)).

So u = T^-1 [ T b / (k (lambda_x + lambda_y + lambda_z)) ], T the per-axis transforms.
With only Neumann faces the zero eigenvalue's mode is set to zero: the solution has mean
zero, the gauge :class:`~sevenfold.problem.Problem` asks for (its pinned cell is not used;
its source is already balanced).

The relative residual ``||b - A u|| / ||b||`` is then evaluated independently of the
transforms, slab by slab straight from the problem's source, coefficient and face terms,
without assembling a matrix.

Units as in the rest of the package: u in the physics' solution units, f per unit volume,
fluxes q per unit area and positive INTO the domain, b and the residual per unit volume.
"""

from __future__ import annotations

import math
import time
from concurrent.futures import ThreadPoolExecutor
from typing import Callable

import numpy as np

from ..errors import Cancelled, SolverError
from ..grid import FACE_AXIS
from ..helper import threads as default_workers  # the transforms' threads: numba's count
from ..problem import Problem
from .cg import Monitor, QuietMonitor, SolveResult

AXES = "xyz"
# cells per slab of the residual evaluation (2 MiB per buffer, in the shared cache); smaller
# slabs pay more in per-call overhead than they save (benchmarks/RESULTS_FFT_RESIDUAL.md)
SLAB_CELLS = 1 << 18


def fft_eligibility(problem: Problem) -> str | None:
    """None when :func:`solve_fft` solves ``problem`` exactly, else the reason it cannot.

    Needs a constant coefficient, no held cells (the pin of a pure-Neumann problem does not
    count) and, on each axis, two Dirichlet or two Neumann faces. Face values and fluxes may
    vary along a face: they enter only the right-hand side.
    """
    grid = problem.grid
    graded = [AXES[a] for a in range(3) if not grid.is_uniform(a)]
    if graded:
        return f"graded axis {', '.join(graded)} (cell widths vary; the transforms need equal widths)"
    if not problem.isotropic:
        return "a directional coefficient [kx, ky, kz] (the transforms need one k for every direction)"
    k_min, k_max = problem.coefficient_range
    if k_min != k_max:
        return f"k varies (min {k_min:.6g}, max {k_max:.6g})"
    if not problem.gauge_mean_zero and problem.held.any():
        return f"holds present ({int(np.count_nonzero(problem.held)):,} held cells)"
    if problem.exchanges:
        return "an [[exchange]] (it adds to the diagonal of some cells)"
    if problem.contacts:
        return "a [[contact]] resistance (it changes the conductances between some cells)"
    mixed = [name for name, t in problem.faces.items() if t.kind == "mixed"]
    if mixed:
        return f"patches of another type on part of a face ({', '.join(mixed)})"
    if problem.wells:
        return f"wells present ({len(problem.wells)})"
    robin = [name for name, t in problem.faces.items() if t.kind == "robin"]
    if robin:
        return f"a robin face ({', '.join(robin)})"
    for axis, name in enumerate(AXES):
        low, high = problem.faces[f"{name}_min"].kind, problem.faces[f"{name}_max"].kind
        if low != high:
            return f"axis {name} mixes {low} and {high} faces ({name}_min {low}, {name}_max {high})"
    return None


def uniform_spacing(grid) -> tuple[float, float, float]:
    """The cell width of each (uniform) axis."""
    return tuple(float(grid.extent[a] / grid.cells[a]) for a in range(3))  # type: ignore[return-value]


def axis_kinds(problem: Problem) -> tuple[str, str, str]:
    """The face type ('dirichlet' or 'neumann') of each axis of an eligible problem."""
    return tuple(problem.faces[f"{a}_min"].kind for a in AXES)  # type: ignore[return-value]


def eigenvalues(n: int, h: float, kind: str) -> np.ndarray:
    """Eigenvalues (1/m^2) of the 1D cell-centred second difference, both faces of ``kind``.

    Ordered as the modes of scipy's DST-II (dirichlet) or DCT-II (neumann).
    """
    m = np.arange(n, dtype=np.float64)
    shift = 1.0 if kind == "dirichlet" else 0.0
    return 4.0 / h**2 * np.sin(np.pi * (m + shift) / (2.0 * n)) ** 2


def _transform(w: np.ndarray, kinds: tuple[str, ...], workers: int, inverse: bool) -> np.ndarray:
    """Orthonormal type-2 sine transform on Dirichlet axes, cosine on Neumann axes, in place."""
    import scipy.fft  # here, not at module level: method_for's eligibility test needs none of it

    sine = tuple(a for a, kind in enumerate(kinds) if kind == "dirichlet")
    cosine = tuple(a for a, kind in enumerate(kinds) if kind == "neumann")
    for axes, forward, backward in ((sine, scipy.fft.dstn, scipy.fft.idstn),
                                    (cosine, scipy.fft.dctn, scipy.fft.idctn)):
        if axes:
            fn = backward if inverse else forward
            w = fn(w, type=2, axes=axes, norm="ortho", workers=workers, overwrite_x=True)
    return w


def _in_threads(work: Callable[[int, int], float], n: int, workers: int) -> float:
    """The sum of work(start, stop) over contiguous parts of range(n), one part per thread.

    numpy releases the GIL inside its array loops, so the parts run side by side.
    """
    parts = max(1, min(workers, n))
    if parts == 1:
        return work(0, n)
    bounds = [n * p // parts for p in range(parts + 1)]
    with ThreadPoolExecutor(parts) as pool:
        return sum(pool.map(work, bounds[:-1], bounds[1:]))


def _divide_by_eigenvalues(w_hat: np.ndarray, lx: np.ndarray, ly: np.ndarray, lz: np.ndarray,
                           workers: int = 1) -> float:
    """w_hat[i, j, l] /= lx[i] + ly[j] + lz[l], a slab of x planes at a time (in cache;
    one plane per call spent as long in the calls as in the arithmetic at 128^3).

    Returns the sum of squares of w_hat before the division, read from the same planes: the
    transforms are orthonormal, so it is ||b||^2 (Parseval) without a pass of its own.
    """
    lyz = ly[:, None] + lz[None, :]
    step = max(1, SLAB_CELLS // lyz.size)

    def planes(start: int, stop: int) -> float:
        block = np.empty((step,) + lyz.shape)
        total = 0.0
        with np.errstate(divide="ignore", invalid="ignore"):  # 0/0: the pure-Neumann constant mode
            for i0 in range(start, stop, step):
                i1 = min(stop, i0 + step)
                w, d = w_hat[i0:i1], block[:i1 - i0]
                total += _sum_of_squares(w)
                np.add(lyz[None], lx[i0:i1, None, None], out=d)
                np.divide(w, d, out=w)
        return total

    return _in_threads(planes, w_hat.shape[0], workers)


def _padded(shape: tuple[int, int, int]) -> np.ndarray:
    """A C-ordered (nx + 2, ny, nz) buffer with zero end planes; the cells are [1:-1]."""
    nx, ny, nz = shape
    buf = np.empty((nx + 2, ny, nz), dtype=np.float64)
    buf[0] = 0.0
    buf[-1] = 0.0
    return buf


def _sum_of_squares(a: np.ndarray) -> float:
    # einsum, not BLAS dot: OpenBLAS threads spin and stall on a machine shared with others
    flat = a.reshape(-1)
    return float(np.einsum("i,i->", flat, flat))


def residual_norm(problem: Problem, padded_u: np.ndarray, workers: int = 1) -> float:
    """||b - A u|| of the full system (every cell), per unit volume, without a matrix.

    ``padded_u`` is (nx + 2, ny, nz) C-ordered with u in [1:-1] and finite end planes.
    Rows follow the assembly contract with T = k / h^2 (k constant): the row of P is
    f_P + sum_N T (u_N - u_P) + sum_faces [(G value + q)/h - G/h u_P]. Every cell is first
    given six neighbours (flat shifts of the C-ordered buffer; the ones across a face are
    wrong), then each face plane is corrected: the wrong neighbour's term removed and the
    face's own terms added. Axes of equal T share one scaling (T (sum of their neighbours)),
    and the first group carries the diagonal, so a cube of cubic cells costs nine array
    passes per slab, not eleven. Slabs of x planes are shared out among ``workers`` threads.
    """
    grid = problem.grid
    nx, ny, nz = grid.cells
    plane = ny * nz
    k = float(problem.coefficient[0].flat[0])
    spacing = uniform_spacing(grid)
    coupling = tuple(k / h**2 for h in spacing)
    diagonal = 2.0 * sum(coupling)
    groups: dict[float, list[str]] = {}  # T -> the axes that have it
    for name, t in zip(AXES, coupling):
        groups.setdefault(t, []).append(name)
    flat = padded_u.reshape(-1)
    f = problem.source
    # per unit volume: a boundary face's terms over the cell's width normal to it
    terms = {name: (t.rhs(1.0 / spacing[FACE_AXIS[name][0]]), t.diagonal(1.0 / spacing[FACE_AXIS[name][0]]))
             for name, t in problem.faces.items()}

    step = max(1, SLAB_CELLS // plane)

    def slabs(start: int, stop: int) -> float:
        buf = np.empty((min(step, stop - start), ny, nz))
        tmp = np.empty_like(buf)
        total = 0.0
        for i0 in range(start, stop, step):
            i1 = min(stop, i0 + step)
            m = i1 - i0
            base, length = (i0 + 1) * plane, m * plane

            def shifted(offset: int) -> np.ndarray:
                return flat[base + offset: base + offset + length].reshape(m, ny, nz)

            c = padded_u[i0 + 1: i1 + 1]
            near = {"x": (padded_u[i0:i1], padded_u[i0 + 2: i1 + 2]), "y": (shifted(-nz), shifted(nz)),
                    "z": (shifted(-1), shifted(1))}
            r, t = buf[:m], tmp[:m]
            for g, (scale, names) in enumerate(groups.items()):
                acc = r if g == 0 else t
                np.add(*near[names[0]], out=acc)
                for name in names[1:]:
                    acc += near[name][0]
                    acc += near[name][1]
                if g == 0:  # r = T (neighbours - (diagonal / T) u_P) + f
                    np.multiply(c, diagonal / scale, out=t)
                    r -= t
                    r *= scale
                    r += f[i0:i1]
                else:
                    t *= scale
                    r += t
            for name in problem.faces:
                axis, side = FACE_AXIS[name]
                if axis == 0:
                    if (side == 0 and i0 != 0) or (side == 1 and i1 != nx):
                        continue
                    at = (0 if side == 0 else m - 1,)
                    rhs, diag = terms[name]
                else:
                    at = (slice(None),) * axis + (0 if side == 0 else grid.cells[axis] - 1,)
                    rhs, diag = (a[i0:i1] for a in terms[name])
                wrong = near[AXES[axis]][side][at]
                r[at] += coupling[axis] * (c[at] - wrong) + rhs - diag * c[at]
            total += _sum_of_squares(r)
        return total

    total = _in_threads(slabs, nx, workers)
    return math.sqrt(total)


def solve_fft(
    problem: Problem, workers: int | None = None, monitor: Monitor | None = None
) -> tuple[np.ndarray, SolveResult]:
    """Solve an eligible problem exactly; returns u on every cell (nx, ny, nz) and the result.

    ``workers`` threads run the transforms, the division and the residual (default: numba's
    thread count). The result records method ``fft``, one iteration and the history
    [1, ||b - A u|| / ||b||]; its ``x`` is u flattened in C order (all cells). Raises
    ValueError for an ineligible problem (see :func:`fft_eligibility`).
    """
    reason = fft_eligibility(problem)
    if reason is not None:
        raise ValueError(f"solve_fft needs an eligible problem: {reason}")
    monitor = monitor or QuietMonitor()
    workers = default_workers() if workers is None else max(1, int(workers))
    grid = problem.grid
    nx, ny, nz = grid.cells
    kinds = axis_kinds(problem)
    k = float(problem.coefficient[0].flat[0])
    spacing = uniform_spacing(grid)
    t0 = time.perf_counter()
    if monitor.stop_requested():
        raise Cancelled("the solve was cancelled")
    # right-hand side b = f + (G value + q)/h on the boundary cells, built where u will be
    padded = _padded(grid.cells)
    w = padded[1:-1]
    np.copyto(w, problem.source)
    for name, t in problem.faces.items():
        axis, side = FACE_AXIS[name]
        index = [slice(None)] * 3
        index[axis] = 0 if side == 0 else grid.cells[axis] - 1
        w[tuple(index)] += t.rhs(1.0 / spacing[axis])
    lx, ly, lz = (k * eigenvalues(n, h, kind) for n, h, kind in zip(grid.cells, spacing, kinds))
    setup = time.perf_counter() - t0

    w_hat = _transform(w, kinds, workers, inverse=False)
    b_norm = math.sqrt(_divide_by_eigenvalues(w_hat, lx, ly, lz, workers))
    first = 1.0 if b_norm > 0 else 0.0
    monitor.iteration(0, first, setup)
    if problem.gauge_mean_zero:
        w_hat[0, 0, 0] = 0.0  # the constant mode (zero eigenvalue): mean(u) = 0
    u = _transform(w_hat, kinds, workers, inverse=True)
    if u.ctypes.data != w.ctypes.data or u.strides != w.strides:
        np.copyto(w, u)  # scipy worked out of place this time: bring u back into the buffer
    u = w
    if problem.gauge_mean_zero:
        u -= u.mean()  # the mean is zero already up to rounding; make it so exactly as scatter does
    residual = residual_norm(problem, padded, workers)
    final = residual / b_norm if b_norm > 0 else residual
    elapsed = time.perf_counter() - t0
    if not math.isfinite(final):
        raise SolverError("the fft solve produced non-finite values", [1.0, final])
    monitor.iteration(1, final, elapsed)
    notes = "DST-II/DCT-II per axis: " + ", ".join(f"{a} {kind}" for a, kind in zip(AXES, kinds))
    result = SolveResult(u.reshape(-1), "fft", 1, True, final, setup, elapsed - setup,
                         [first, final], [0.0, elapsed], notes)
    return u, result
