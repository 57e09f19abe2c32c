"""The coarsest level's direct solve (solvers/coarsest.py): its sparse Cholesky factor front
by front in nested-dissection order (solvers/dissection.py, kernels/fronts.py) against
scipy's sparse solver and numpy's dense factor of the level's own matrix (Level.to_csr), on
two threads against the serial factor bit for bit, and the dense kernel each front is
factored with (kernels/band.py) against LAPACK's (pbtrf through scipy.linalg) and a plain
column-by-column factor."""

from __future__ import annotations

import threading

import numba
import numpy as np
import pytest
import scipy.sparse.linalg as sla

import sevenfold.helper as helper
import sevenfold.solvers.coarsest as coarsest
from conftest import write_layer_job
from sevenfold.kernels.band import band_cholesky
from sevenfold.solvers.coarsest import CoarsestSolver
from sevenfold.solvers.dissection import LEAF, fronts
from sevenfold.solvers.levels import Level

SHAPES = [(16, 16, 16), (17, 17, 16), (8, 8, 32), (5, 7, 3), (12, 1, 7), (1, 30, 2), (1, 1, 9),
          (1, 1, 1)]


def random_level(shape: tuple[int, int, int], seed: int = 0, margin: float = 1e-2) -> Level:
    """A 7-point level with random positive couplings (0 on each axis's last plane) and a
    diagonal of the row's couplings plus ``margin`` (SPD for a positive margin)."""
    rng = np.random.default_rng(seed)
    t = [rng.uniform(0.1, 10.0, shape) for _ in range(3)]
    diag = np.full(shape, margin)
    for axis in range(3):
        last = [slice(None)] * 3
        last[axis] = -1
        t[axis][tuple(last)] = 0.0
        diag += t[axis] + np.roll(t[axis], 1, axis=axis)  # to the + and from the - neighbour
    return Level(*t, diag, np.ones(shape, dtype=bool), np.ones(3, dtype=np.int64))


def scipy_solution(level: Level, b: np.ndarray) -> np.ndarray:
    return sla.spsolve(level.to_csr().tocsc(), b.ravel()).reshape(level.shape)


def band_of(dense: np.ndarray, w: int) -> np.ndarray:
    """Lower band storage, a column per row: ``a[j, d]`` = entry (j + d, j)."""
    n = dense.shape[0]
    a = np.zeros((n, w))
    for d in range(min(w, n)):
        a[: n - d, d] = np.diagonal(dense, -d)
    return a


@pytest.mark.parametrize("shape", [(12, 9, 8), (5, 7, 3), (12, 1, 7), (1, 30, 2), (1, 1, 9),
                                   (1, 1, 1)])
def test_the_fronts_hold_every_entry_of_the_factor(shape) -> None:
    """Each cell is eliminated by one front; numpy's dense Cholesky factor of the matrix in
    that order has no entry outside the fronts' rows (the fronts are a true structure of the
    factor, so the kernels drop nothing), and the kernels' factor equals numpy's there."""
    level = random_level(shape, seed=11)
    tree = fronts(shape)
    n = level.diag.size
    own = [tree.index[s:s + o] for s, o in zip(tree.start[:-1], tree.own)]
    order = np.concatenate(own)
    assert np.array_equal(np.sort(order), np.arange(n))  # a permutation
    dense = level.to_csr().toarray()[np.ix_(order, order)]
    numpy_factor = np.linalg.cholesky(dense)
    solver = CoarsestSolver(level)
    assert solver.kind == "fronts"
    position = np.empty(n, dtype=np.int64)
    position[order] = np.arange(n)
    reached = np.zeros((n, n), dtype=bool)
    scale = np.abs(numpy_factor).max()
    for f in range(len(tree.own)):
        cells = tree.index[tree.start[f]:tree.start[f + 1]]
        rows = position[cells]
        stored = solver._factor[tree.factor_start[f]:tree.factor_start[f + 1]].reshape(tree.own[f], -1)
        for c in range(tree.own[f]):
            reached[rows[c:], rows[c]] = True
            assert np.abs(stored[c, :cells.size - c] - numpy_factor[rows[c:], rows[c]]).max() <= 1e-13 * scale
    assert np.abs(numpy_factor[~reached]).max(initial=0.0) <= 1e-13 * scale
    assert reached[np.tril_indices(n)].sum() == tree.factor_start[-1] - sum(
        o * (o - 1) // 2 for o in tree.own)  # every front row held once (own blocks lower only)


def test_the_dissection_cuts_fewer_multiply_adds_than_the_band() -> None:
    """The reason for the order: at 17 x 17 x 16 the factor's column counts give about a third
    of the band's multiply-adds (the band: longest axis outermost, width 17 x 16 + 1)."""
    tree = fronts((17, 17, 16))
    size = np.diff(tree.start)
    work = sum(sum((s - c) * (s - c - 1) / 2 for c in range(o)) for o, s in zip(tree.own, size))
    n, w = 17 * 17 * 16, 17 * 16
    band = sum(min(w, n - 1 - j) * (min(w, n - 1 - j) + 1) / 2 for j in range(n))
    assert work < 0.4 * band
    assert tree.own[tree.children == 0].max() <= LEAF  # leaves: boxes of at most LEAF cells


@pytest.mark.parametrize("shape", SHAPES)
@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_the_fronts_solve_the_level_like_scipy(shape, dtype) -> None:
    level = random_level(shape, seed=1)
    solver = CoarsestSolver(level)
    assert solver.kind == "fronts"
    b = np.random.default_rng(2).standard_normal(shape).astype(dtype)
    u = np.empty(shape, dtype=dtype)
    solver.solve(b, u)
    reference = scipy_solution(level, b.astype(np.float64))
    # float64: the factor's rounding (cond of these levels is below 1e4); float32: the output's
    tol = 1e-11 if dtype == np.float64 else 1e-6
    assert np.abs(u - reference).max() <= tol * np.abs(reference).max()


def test_a_large_level_or_an_indefinite_matrix_takes_the_sparse_lu(monkeypatch) -> None:
    """Both fallbacks give scipy's solution too."""
    level = random_level((6, 5, 4), seed=3)
    monkeypatch.setattr(coarsest, "FRONT_ENTRIES", 10)
    large = CoarsestSolver(level)
    monkeypatch.undo()
    b = np.random.default_rng(4).standard_normal(level.shape)
    u = np.empty(level.shape)
    large.solve(b, u)
    assert large.kind == "lu"
    assert np.abs(u - scipy_solution(level, b)).max() <= 1e-11 * np.abs(u).max()

    indefinite = random_level((6, 5, 4), seed=3, margin=-5.0)  # a negative eigenvalue or more
    assert np.linalg.eigvalsh(indefinite.to_csr().toarray()).min() < 0
    solver = CoarsestSolver(indefinite)
    assert solver.kind == "lu"
    solver.solve(b, u)
    assert np.abs(u - scipy_solution(indefinite, b)).max() <= 1e-9 * np.abs(u).max()


def recorded_calls(monkeypatch) -> list[tuple[str, int, int]]:
    """(thread, first front, end) of each ``fronts_factor`` call the coarsest solver makes."""
    calls = []
    kernel = coarsest.fronts_factor

    def recording(*args):
        calls.append((threading.current_thread().name, args[-3], args[-2]))
        return kernel(*args)

    monkeypatch.setattr(coarsest, "fronts_factor", recording)
    return calls


def factored(level: Level, two_threads: bool) -> np.ndarray:
    """The factor ``coarsest.factor`` writes (over NaN), on one thread or two."""
    tree = fronts(level.shape)
    out = np.full(int(tree.factor_start[-1]), np.nan)
    assert coarsest.factor(tree, level, out, two_threads) == 0
    return out


@pytest.mark.parametrize("shape", [(17, 17, 16), (16, 16, 16), (9, 9, 16), (8, 8, 32), (5, 7, 3),
                                   (11, 5, 13), (7, 3, 9), (4, 4, 4), (1, 30, 2)])
def test_two_threads_give_the_serial_factor_bit_for_bit(shape, monkeypatch) -> None:
    """The helper thread factors the root's second subtree while this one factors the first,
    then this one the root; every entry of the factor (the unused corners' zeros too) is the
    serial factor's. A level of one front (at most LEAF cells) is factored serially."""
    level = random_level(shape, seed=6)
    tree = fronts(shape)
    serial = factored(level, False)
    calls = recorded_calls(monkeypatch)
    assert np.array_equal(factored(level, True), serial)
    me = threading.current_thread().name
    nodes = tree.own.size
    if np.prod(shape) <= LEAF:
        assert tree.halves is None and calls == [(me, 0, nodes)]
        return
    middle = tree.halves[0]
    where = {call[1:]: call[0] for call in calls[:2]}  # (the two in either order)
    assert where[(0, middle)] == me and where[(middle, nodes - 1)].startswith("sevenfold-helper")
    assert calls[2:] == [(me, nodes - 1, nodes)]
    assert 0 < middle < nodes - 1 and tree.first[nodes - 2] == middle  # the root's two subtrees


def test_the_solver_factors_on_two_threads_from_the_threshold_up_when_numba_has_two(monkeypatch) -> None:
    """Two threads when numba has them and the level has TWO_THREADS_FROM cells or more."""
    shape = (9, 9, 16)
    level = random_level(shape, seed=2)
    calls = recorded_calls(monkeypatch)
    counts = []
    threads = numba.get_num_threads()
    for cells, numba_threads in ((level.diag.size, 2), (level.diag.size + 1, 2), (0, 1)):
        monkeypatch.setattr(coarsest, "TWO_THREADS_FROM", cells)
        numba.set_num_threads(min(numba_threads, numba.config.NUMBA_NUM_THREADS))
        try:
            assert CoarsestSolver(level).kind == "fronts"
        finally:
            numba.set_num_threads(threads)
        counts.append(len(calls) - sum(counts))
    assert counts[1:] == [1, 1]  # one serial call: too small, or numba on one thread
    assert counts[0] == (3 if numba.config.NUMBA_NUM_THREADS > 1 else 1)


@pytest.mark.parametrize("part", ["first", "second", "root"])
def test_a_pivot_not_positive_in_either_subtree_or_the_root_takes_the_sparse_lu(part, monkeypatch) -> None:
    """A cell whose diagonal is negative makes its own pivot negative, so the factor stops in
    the front that owns it; on two threads as on one it reports so, and the solver falls
    back to the sparse LU, which solves the level like scipy."""
    shape = (9, 8, 7)
    level = random_level(shape, seed=9)
    tree = fronts(shape)
    front = {"first": 0, "second": tree.halves[0], "root": tree.own.size - 1}[part]
    cell = tree.index[tree.start[front]]
    level.diag.flat[cell] = -100.0
    for two in (False, True):
        out = np.empty(int(tree.factor_start[-1]))
        assert coarsest.factor(tree, level, out, two) == 1
    calls = recorded_calls(monkeypatch)
    monkeypatch.setattr(coarsest, "TWO_THREADS_FROM", 0)
    solver = CoarsestSolver(level)
    assert solver.kind == "lu"
    if numba.get_num_threads() > 1:
        assert len(calls) == (3 if part == "root" else 2)  # the root is not factored after a failure
    b = np.random.default_rng(4).standard_normal(shape)
    u = np.empty(shape)
    solver.solve(b, u)
    assert np.abs(u - scipy_solution(level, b)).max() <= 1e-9 * np.abs(u).max()


def test_without_a_helper_thread_the_factor_is_serial(monkeypatch) -> None:
    """When no thread can be had (the interpreter exiting, threads run out), the two subtrees
    and the root are factored in this thread, and the factor is the serial one."""
    class NoThreads:
        def submit(self, *args):
            raise RuntimeError("can't start new thread")

    level = random_level((9, 9, 16), seed=6)
    serial = factored(level, False)
    monkeypatch.setattr(helper, "threads", lambda: 2)
    monkeypatch.setattr(helper, "helper", NoThreads)
    calls = recorded_calls(monkeypatch)
    assert np.array_equal(factored(level, True), serial)
    tree = fronts(level.shape)
    nodes, middle = tree.own.size, tree.halves[0]
    me = threading.current_thread().name
    assert calls == [(me, 0, middle), (me, middle, nodes - 1), (me, nodes - 1, nodes)]


HELPER_PROBE = """
import sys
import numpy as np
sys.path.insert(0, {tests!r})
from test_coarsest import random_level
from sevenfold.solvers import coarsest
from sevenfold.solvers.dissection import fronts

def factor(two):
    tree = fronts((9, 9, 16))
    out = np.zeros(int(tree.factor_start[-1]))
    assert coarsest.factor(tree, random_level((9, 9, 16)), out, two) == 0
    return out

serial = factor(False)
assert np.array_equal(factor(True), serial)  # the helper thread started
{then}
print("done")
"""


@pytest.mark.parametrize("then", ["", "import os\npid = os.fork()\nif pid == 0:\n"
                                  "    os._exit(0 if np.array_equal(factor(True), serial) else 3)\n"
                                  "assert os.waitstatus_to_exitcode(os.waitpid(pid, 0)[1]) == 0"],
                         ids=["exit", "fork"])
def test_the_helper_thread_lets_the_process_exit_and_a_forked_child_factor(then) -> None:
    """A process that has factored on two threads exits (the idle helper is joined at exit);
    a child forked after that (it inherits no running helper) starts its own."""
    import subprocess
    import sys
    from pathlib import Path

    probe = HELPER_PROBE.format(tests=str(Path(__file__).parent), then=then)
    proc = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True,
                          timeout=120)
    assert proc.returncode == 0 and proc.stdout.strip().endswith("done"), proc.stderr


def column_by_column(band: np.ndarray, stop: int) -> np.ndarray:
    """The banded Cholesky factor's first ``stop`` columns the plain way (LAPACK's pbtf2
    order), in numpy, the later columns updated by them."""
    a = band.copy()
    n, w = a.shape
    for j in range(stop):
        a[j, 0] = np.sqrt(a[j, 0])
        m = min(w - 1, n - 1 - j)
        a[j, 1:m + 1] /= a[j, 0]
        for c in range(m):
            a[j + 1 + c, 0:m - c] -= a[j, 1 + c:m + 1] * a[j, 1 + c]
    return a


def level_band(shape: tuple[int, int, int], seed: int) -> np.ndarray:
    """The level's matrix in band storage, C order (width: the last two sides' product + 1)."""
    dense = random_level(shape, seed=seed).to_csr().toarray()
    return band_of(dense, shape[1] * shape[2] + 1)


@pytest.mark.parametrize("shape", [(16, 16, 16), (8, 8, 32), (12, 1, 7), (1, 1, 1)])
def test_band_kernel_matches_lapack_and_numpy(shape) -> None:
    """The whole factor equals LAPACK's banded one (scipy.linalg.cholesky_banded, our layout
    transposed) and numpy's dense one to rounding."""
    from scipy.linalg import cholesky_banded

    band = level_band(shape, seed=5)
    lapack = cholesky_banded(band.T.copy(), lower=True)
    factor = band.copy()
    assert band_cholesky(factor, factor.shape[0]) == 0
    j, d = np.indices(factor.shape)
    inside = j + d < factor.shape[0]
    scale = np.abs(lapack).max()
    assert np.abs(factor[inside] - lapack.T[inside]).max() <= 1e-13 * scale
    n = factor.shape[0]
    dense = np.zeros((n, n))
    dense[(j + d)[inside], j[inside]] = band[inside]
    dense += np.tril(dense, -1).T
    numpy_factor = np.linalg.cholesky(dense)
    assert np.abs(numpy_factor[(j + d)[inside], j[inside]] - factor[inside]).max() <= 1e-13 * scale


@pytest.mark.parametrize("shape", [(5, 7, 3), (3, 4, 5), (9, 9, 8), (2, 3, 40), (1, 1, 9), (1, 2, 2)])
@pytest.mark.parametrize("part", [1.0, 0.5, 0.13])
def test_the_factor_in_panels_is_the_column_by_column_factor(shape, part) -> None:
    """Panels of 8 columns, updates four columns at a time and the shorter reach of the last
    columns change nothing but rounding: bands narrower and wider than a panel, row and stop
    counts that are not a multiple of it (common practice: the blocked form is a reordering of
    the same sums). Stopped early, the later columns hold the Schur complement."""
    band = level_band(shape, seed=8)
    stop = max(1, int(part * band.shape[0]))
    factor = band.copy()
    assert band_cholesky(factor, stop) == 0
    reference = column_by_column(band, stop)
    j, d = np.indices(band.shape)
    inside = j + d < band.shape[0]
    assert np.abs(factor[inside] - reference[inside]).max() <= 1e-14 * np.abs(reference).max()
    assert np.array_equal(factor[~inside], band[~inside])  # the unused corner is not touched
    if stop < band.shape[0]:  # the rest: A22 - A21 A11^-1 A12 (numpy, dense)
        n = band.shape[0]
        dense = np.zeros((n, n))
        dense[(j + d)[inside], j[inside]] = band[inside]
        dense += np.tril(dense, -1).T
        schur = dense[stop:, stop:] - dense[stop:, :stop] @ np.linalg.solve(dense[:stop, :stop], dense[:stop, stop:])
        rest = band_of(schur, band.shape[1])
        k, e = np.indices(rest.shape)
        kept = k + e < rest.shape[0]
        assert np.abs(factor[stop:][kept] - rest[kept]).max() <= 1e-12 * np.abs(schur).max()


def test_band_factor_reports_the_first_pivot_that_is_not_positive_like_lapack() -> None:
    """LAPACK's info: i when the leading minor of order i is not positive definite."""
    from scipy.linalg import LinAlgError, cholesky_banded

    band = level_band((4, 4, 4), seed=7)
    band[5, 0] = -1.0  # the sixth pivot is negative whatever came before
    with pytest.raises(LinAlgError, match="6-th leading minor"):
        cholesky_banded(band.T.copy(), lower=True)
    assert band_cholesky(band.copy(), 64) == 6
    band[5, 0] = np.nan
    assert band_cholesky(band.copy(), 64) == 6


def test_a_gmg_run_imports_no_scipy_linalg(tmp_path) -> None:
    """The coarsest level's factor is our kernel: a gmg run in a fresh process whose kernels
    are cached imports neither scipy.linalg (84-106 ms) nor scipy.sparse. (Compiling imports
    scipy.linalg through numba's compiler, for its BLAS bindings: the first run fills the
    cache.)"""
    import json
    import subprocess
    import sys

    job = write_layer_job(tmp_path / "job.toml", 1e-2, 24)  # 24^3: levels and a factor
    probe = ("import json, sys\nfrom sevenfold.runner import run_job\n"
             "result = run_job(sys.argv[1])\n"
             "print(json.dumps([result.solve.converged, sorted(m for m in sys.modules if m.startswith('scipy.'))]))")
    for _ in range(2):
        proc = subprocess.run([sys.executable, "-c", probe, str(job)], capture_output=True,
                              text=True, timeout=600, cwd=tmp_path)
        assert proc.returncode == 0, proc.stderr
    converged, modules = json.loads(proc.stdout.strip().splitlines()[-1])
    assert converged
    assert not [m for m in modules if m.startswith(("scipy.linalg", "scipy.sparse"))], modules
