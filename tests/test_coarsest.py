"""The coarsest level's direct solve (solvers/coarsest.py) against scipy's sparse solver on
the level's own matrix (Level.to_csr), and its banded Cholesky kernels (kernels/band.py)
against LAPACK's (pbtrf and pbtrs through scipy.linalg) and numpy's dense factor."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse.linalg as sla

import sevenfold.solvers.coarsest as coarsest
from conftest import write_layer_job
from sevenfold.kernels.band import band_cholesky, band_cholesky_solve
from sevenfold.solvers.coarsest import CoarsestSolver
from sevenfold.solvers.levels import Level


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


@pytest.mark.parametrize("shape", [(16, 16, 16), (8, 8, 32), (5, 7, 3), (12, 1, 7), (1, 30, 2),
                                   (1, 1, 9), (1, 1, 1)])
def test_band_storage_is_the_levels_matrix(shape) -> None:
    """Every entry of the band, put back in place, is the CSR matrix's (and nothing else is)."""
    level = random_level(shape)
    band, order = level.to_band()
    dense = level.to_csr().toarray()
    # the band numbers cells in C order of the transposed grid: renumber the CSR matrix so
    n = level.diag.size
    perm = np.arange(n).reshape(shape).transpose(order).ravel()
    expected = dense[np.ix_(perm, perm)]
    rebuilt = np.zeros((n, n))
    for d in range(band.shape[1]):
        j = np.arange(n - d)
        rebuilt[j + d, j] = band[: n - d, d]
        rebuilt[j, j + d] = band[: n - d, d]
    assert np.array_equal(rebuilt, expected)
    j, d = np.indices(band.shape)
    assert not band[j + d >= n].any()  # nothing beyond the matrix's last row
    assert band.shape[1] - 1 == sorted(shape)[0] * sorted(shape)[1]  # the two shorter sides


@pytest.mark.parametrize("shape", [(16, 16, 16), (8, 8, 32), (12, 1, 7), (1, 1, 1)])
@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_banded_cholesky_solves_the_level_like_scipy(shape, dtype) -> None:
    level = random_level(shape, seed=1)
    solver = CoarsestSolver(level)
    assert solver.kind == "band"
    b = np.random.default_rng(2).standard_normal(shape).astype(dtype)
    u = np.empty(shape, dtype=dtype)
    solver.solve(b, u)
    reference = scipy_solution(level, b.astype(np.float64))
    # float64: the factor's rounding (cond of these levels is below 1e4); float32: the output's
    tol = 1e-11 if dtype == np.float64 else 1e-6
    assert np.abs(u - reference).max() <= tol * np.abs(reference).max()


def test_a_wide_band_or_an_indefinite_matrix_takes_the_sparse_lu(monkeypatch) -> None:
    """Both fallbacks give scipy's solution too."""
    level = random_level((6, 5, 4), seed=3)
    monkeypatch.setattr(coarsest, "BAND_ENTRIES", 10)  # far below (20 + 1) x 120
    wide = CoarsestSolver(level)
    monkeypatch.undo()
    b = np.random.default_rng(4).standard_normal(level.shape)
    u = np.empty(level.shape)
    wide.solve(b, u)
    assert wide.kind == "lu"
    assert np.abs(u - scipy_solution(level, b)).max() <= 1e-11 * np.abs(u).max()

    indefinite = random_level((6, 5, 4), seed=3, margin=-5.0)  # a negative eigenvalue or more
    assert np.linalg.eigvalsh(indefinite.to_csr().toarray()).min() < 0
    solver = CoarsestSolver(indefinite)
    assert solver.kind == "lu"
    solver.solve(b, u)
    assert np.abs(u - scipy_solution(indefinite, b)).max() <= 1e-9 * np.abs(u).max()


@pytest.mark.parametrize("shape", [(16, 16, 16), (8, 8, 32), (12, 1, 7), (1, 1, 1)])
def test_band_kernels_match_lapack_and_numpy(shape) -> None:
    """The factor equals LAPACK's banded one (scipy.linalg.cholesky_banded, our layout
    transposed) and numpy's dense one to rounding; the solve equals LAPACK's cho_solve_banded."""
    from scipy.linalg import cho_solve_banded, cholesky_banded

    level = random_level(shape, seed=5)
    band, _ = level.to_band()
    lapack = cholesky_banded(band.T.copy(), lower=True)
    factor = band.copy()
    assert band_cholesky(factor) == 0
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

    b = np.random.default_rng(6).standard_normal(n)
    x = b.copy()
    band_cholesky_solve(factor, x)
    reference = cho_solve_banded((lapack, True), b)
    assert np.abs(x - reference).max() <= 1e-12 * np.abs(reference).max()
    assert np.abs(dense @ x - b).max() <= 1e-10 * np.abs(b).max()


def column_by_column(band: np.ndarray) -> np.ndarray:
    """The banded Cholesky factor the plain way (LAPACK's pbtf2 order), in numpy."""
    a = band.copy()
    n, w = a.shape
    for j in range(n):
        a[j, 0] = np.sqrt(a[j, 0])
        m = min(w - 1, n - 1 - j)
        a[j, 1:m + 1] /= a[j, 0]
        for c in range(m):
            a[j + 1 + c, 0:m - c] -= a[j, 1 + c:m + 1] * a[j, 1 + c]
    return a


@pytest.mark.parametrize("shape", [(5, 7, 3), (3, 4, 5), (9, 9, 8), (2, 3, 40), (1, 1, 9), (1, 2, 2)])
def test_the_factor_in_panels_is_the_column_by_column_factor(shape) -> None:
    """Panels of 8 columns, updates four columns at a time and the shorter reach of the last
    columns change nothing but rounding: bands narrower and wider than a panel, row counts
    that are not a multiple of it (common practice: the blocked form is a reordering of the
    same sums)."""
    band, _ = random_level(shape, seed=8).to_band()
    factor = band.copy()
    assert band_cholesky(factor) == 0
    reference = column_by_column(band)
    j, d = np.indices(band.shape)
    inside = j + d < band.shape[0]
    assert np.abs(factor[inside] - reference[inside]).max() <= 1e-14 * np.abs(reference).max()
    assert np.array_equal(factor[~inside], band[~inside])  # the unused corner is not touched


def test_band_factor_reports_the_first_pivot_that_is_not_positive_like_lapack() -> None:
    """LAPACK's info: i when the leading minor of order i is not positive definite."""
    from scipy.linalg import LinAlgError, cholesky_banded

    level = random_level((4, 4, 4), seed=7)
    band, _ = level.to_band()
    band[5, 0] = -1.0  # the sixth pivot is negative whatever came before
    with pytest.raises(LinAlgError, match="6-th leading minor"):
        cholesky_banded(band.T.copy(), lower=True)
    assert band_cholesky(band.copy()) == 6
    band[5, 0] = np.nan
    assert band_cholesky(band.copy()) == 6


def test_a_gmg_run_imports_no_scipy_linalg(tmp_path) -> None:
    """The coarsest level's factor is our kernel: a gmg run in a fresh process whose kernels
    are cached imports neither scipy.linalg (84-106 ms) nor scipy.sparse. (Compiling imports
    scipy.linalg through numba's compiler, for its BLAS bindings: the first run fills the
    cache.)"""
    import json
    import subprocess
    import sys

    job = write_layer_job(tmp_path / "job.toml", 1e-2, 24)  # 24^3: levels and a band
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
