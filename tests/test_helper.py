"""Whole-grid passes split in two halves (sevenfold/helper.py) and their users: the same
numbers on one core and on two, bit for bit, and against numpy's own whole-array results
(np.min, np.max, np.argmax, np.argmin, np.einsum, a direct count: common practice)."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

import sevenfold.helper as helper
import sevenfold.solvers.levels as levels
from sevenfold.errors import JobError
from sevenfold.fields import _check_finite, array_range, value_range
from sevenfold.grid import weighted_sum
from sevenfold.headline import _arg_extreme
from sevenfold.kernels.multigrid import wall_counts
from sevenfold.solvers.cg import pcg


@pytest.fixture
def small_halves(monkeypatch):
    """Split arrays of 8 elements and more, so that small test arrays take the two-half path."""
    monkeypatch.setattr(helper, "HALVES_FROM", 8)


def on_cores(monkeypatch, cores: int, call):
    monkeypatch.setattr(helper, "threads", lambda: cores)
    return call()


def test_halves_cut_at_the_middle_row_and_keep_small_arrays_whole(small_halves) -> None:
    a = np.arange(7 * 3).reshape(7, 3)
    parts = helper.halves(lambda x: x.copy(), a)
    assert [p.shape for p in parts] == [(3, 3), (4, 3)]
    assert np.array_equal(np.concatenate(parts), a)
    assert len(helper.halves(lambda x: x, np.arange(7))) == 1  # under HALVES_FROM elements
    assert len(helper.halves(lambda x: x, np.zeros((1, 50)))) == 1  # one row: nothing to cut


def test_a_split_sum_is_the_same_on_one_core_and_two(small_halves, monkeypatch) -> None:
    rng = np.random.default_rng(3)
    values = rng.standard_normal((9, 6, 5))
    widths = tuple(rng.uniform(0.5, 2.0, n) for n in values.shape)
    where = rng.random(values.shape) < 0.6
    for mask in (None, where):
        one = on_cores(monkeypatch, 1, lambda: weighted_sum(values, widths, mask))
        two = on_cores(monkeypatch, 2, lambda: weighted_sum(values, widths, mask))
        assert one == two  # bit for bit: the same halves, added in the same order
        masked = values if mask is None else np.where(mask, values, 0.0)
        assert two == pytest.approx(np.einsum("ijk,i,j,k->", masked, *widths), rel=1e-13)


def test_range_and_the_finite_check_see_both_halves(small_halves) -> None:
    rng = np.random.default_rng(4)
    a = rng.uniform(1.0, 2.0, (10, 4, 4))
    assert array_range(a) == (a.min(), a.max())
    assert value_range((a, a * 3.0, a)) == (a.min(), 3.0 * a.max())
    _check_finite(a, "material", positive=True)  # no error
    for bad, message in ((np.nan, "NaN or infinite"), (np.inf, "NaN or infinite"),
                         (-np.inf, "NaN or infinite"), (-0.5, "minimum is -0.5"), (0.0, "minimum is 0.0")):
        for half in (1, 8):  # in the first half, then in the second
            b = a.copy()
            b[half, 2, 3] = bad
            with pytest.raises(JobError, match=message):
                _check_finite(b, "material", positive=True)
    b = a.copy()
    b[8, 0, 0] = -0.5
    _check_finite(b, "source", positive=False)  # negative is allowed in a source
    with pytest.raises(JobError, match="NaN"):
        _check_finite(float("nan"), "source", positive=False)
    with pytest.raises(JobError, match="minimum is -1.0"):
        _check_finite(-1.0, "material", positive=True)


@pytest.mark.parametrize("which", ["max", "min"])
def test_the_extremes_index_is_numpys(small_halves, which: str) -> None:
    rng = np.random.default_rng(5)
    pick = np.argmax if which == "max" else np.argmin
    ties = rng.integers(0, 4, (9, 5, 3)).astype(np.float64)  # the extreme in both halves
    assert _arg_extreme(ties, which) == pick(ties)  # the first of the ties, as numpy
    smooth = rng.standard_normal((9, 5, 3))
    assert _arg_extreme(smooth, which) == pick(smooth)
    second = smooth.copy()
    second[7, 1, 1] = np.nan  # numpy gives the first NaN
    assert _arg_extreme(second, which) == pick(second)
    both = second.copy()
    both[2, 0, 2] = np.nan
    assert _arg_extreme(both, which) == pick(both)


def test_wall_counts_of_two_plane_ranges_add_up_to_a_direct_count(small_halves) -> None:
    rng = np.random.default_rng(6)
    diag = np.where(rng.random((11, 7, 5)) < 0.3, 1000.0, 1.0) * rng.uniform(1.0, 2.0, (11, 7, 5))
    free = rng.random(diag.shape) < 0.9
    ratio = 10.0

    def jumps(a: np.ndarray, b: np.ndarray, fa: np.ndarray, fb: np.ndarray) -> np.ndarray:
        return fa & fb & ((a > ratio * b) | (b > ratio * a))

    direct_x = jumps(diag[:-1], diag[1:], free[:-1], free[1:]).sum(axis=(1, 2))
    direct_y = jumps(diag[:, :-1], diag[:, 1:], free[:, :-1], free[:, 1:]).sum(axis=(0, 2))
    whole = wall_counts(diag, free, ratio, 0, 11)
    first, second = wall_counts(diag, free, ratio, 0, 5), wall_counts(diag, free, ratio, 5, 11)
    assert np.array_equal(whole[0], direct_x) and np.array_equal(whole[1], direct_y)
    assert np.array_equal(first[0] + second[0], direct_x)
    assert np.array_equal(first[1] + second[1], direct_y)


def test_material_walls_split_find_the_same_walls(monkeypatch) -> None:
    from test_gmg import column_job

    from sevenfold.solvers.gmg import fine_level

    level = fine_level(column_job(32, 0.28, 0.72))[0]
    whole = levels.material_walls(level)
    monkeypatch.setattr(levels, "HALVES_FROM", 8)
    assert levels.material_walls(level) == whole == ((9, 23), (9, 23), ())


def test_both_runs_in_the_caller_when_no_thread_can_be_had(monkeypatch) -> None:
    class NoThreads:
        def submit(self, *args):
            raise RuntimeError("can't start new thread")

    monkeypatch.setattr(helper, "threads", lambda: 2)
    monkeypatch.setattr(helper, "helper", NoThreads)
    assert helper.both(lambda: 1, lambda: 2) == [1, 2]


def test_cg_with_split_vector_passes_gives_the_same_iterate(monkeypatch) -> None:
    """CG's copies, its zeroed start and its catch-up step of x, split in halves: the same
    iterate bit for bit, and the solution of scipy's direct solver to rtol."""
    n = 40
    lap = sp.diags([-np.ones(n - 1), 2.0 * np.ones(n), -np.ones(n - 1)], [-1, 0, 1])
    A = sp.kronsum(lap, sp.identity(3) * 0.5, format="csr")
    b = np.random.default_rng(7).standard_normal(A.shape[0])
    jacobi = 1.0 / A.diagonal()

    def run():
        return pcg(A, b, lambda r: jacobi * r, 1e-10, 500).x

    whole = run()
    monkeypatch.setattr(helper, "HALVES_FROM", 8)
    split = on_cores(monkeypatch, 2, run)
    assert np.array_equal(whole, split)
    direct = sp.linalg.spsolve(A.tocsc(), b)
    assert np.linalg.norm(split - direct) <= 1e-8 * np.linalg.norm(direct)
