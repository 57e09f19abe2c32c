"""Constant-coefficient Dirichlet problems against a fast sine transform solution.

The 1D cell-centred Dirichlet operator, tridiag(-1, 2, -1)/h^2 with ghost-cell end rows
(3, -1)/h^2, has the eigenvectors sin(pi (m+1) (i+1/2) / n) (the ghost value -u_P is the odd
reflection about the face) with eigenvalues 4/h^2 sin^2(pi (m+1) / (2n)), m = 0..n-1; that
basis is the DST-II (common practice for cell-centred fast Poisson solvers; checked
numerically in ``test_dst2_diagonalises_1d_operator``). In 3D the operator is a Kronecker
sum, so dstn(type=2) diagonalises it with the sum of the three axes' eigenvalues.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.fft
from conftest import FACES, centres, make_spec, make_table, np_eval, solve_spec


def eigenvalues_1d(n: int, h: float) -> np.ndarray:
    return 4.0 / h**2 * np.sin(np.pi * (np.arange(n) + 1) / (2 * n)) ** 2


def operator_1d(n: int, h: float) -> np.ndarray:
    A = 2 * np.eye(n) - np.eye(n, k=1) - np.eye(n, k=-1)
    A[0, 0] += 1.0  # ghost cells: 3 at each end, 4 when one cell touches both faces
    A[-1, -1] += 1.0
    return A / h**2


@pytest.mark.parametrize("n", [1, 2, 7, 16])
def test_dst2_diagonalises_1d_operator(n):
    """Each DST-II basis vector is an eigenvector, and the orthonormal transform solves A u = f."""
    h = 0.37
    A = operator_1d(n, h)
    lam = eigenvalues_1d(n, h)
    i = np.arange(n)
    for m in range(n):
        v = np.sin(np.pi * (m + 1) * (i + 0.5) / n)
        assert np.allclose(A @ v, lam[m] * v, rtol=1e-12, atol=1e-12 * lam.max())
    f = np.random.default_rng(n).standard_normal(n)
    u = scipy.fft.idst(scipy.fft.dst(f, type=2, norm="ortho") / lam, type=2, norm="ortho")
    assert np.allclose(A @ u, f, rtol=0, atol=1e-12 * np.abs(f).max())


def fft_solve(k: float, cells, spacing, rhs: np.ndarray) -> np.ndarray:
    """Solve k (Lx + Ly + Lz) u = rhs with all-Dirichlet closures by DST-II diagonalisation."""
    lam = sum(
        np.expand_dims(eigenvalues_1d(n, h), [b for b in range(3) if b != a])
        for a, (n, h) in enumerate(zip(cells, spacing))
    )
    return scipy.fft.idstn(scipy.fft.dstn(rhs, type=2, norm="ortho") / (k * lam), type=2, norm="ortho")


def face_rhs(k: float, table: dict, boundary: dict) -> np.ndarray:
    """Per-volume rhs of the Dirichlet faces, 2 k g / h^2 in the boundary cells, g at face centres."""
    cells = table["grid"]["cells"]
    spacing = table["grid"]["spacing"]
    origin = table["grid"]["origin"]
    x, y, z = centres(table)
    out = np.zeros(cells)
    for face in FACES:
        axis = "xyz".index(face[0])
        h = spacing[axis]
        side = 0 if face.endswith("min") else cells[axis] - 1
        plane = origin[axis] + (0.0 if face.endswith("min") else cells[axis] * h)
        at = [np.take(c, [side], axis=axis) for c in (x, y, z)]
        at[axis] = np.full_like(at[axis], plane)
        index = [slice(None)] * 3
        index[axis] = slice(side, side + 1)
        out[tuple(index)] += 2 * k * np_eval(boundary[face]["value"], *at) / h**2
    return out


GRIDS = [
    ([12, 10, 14], [0.1, 0.07, 0.13]),
    ([9, 16, 5], [0.3, 0.05, 0.2]),
    ([20, 1, 1], [0.05, 0.5, 0.5]),
    ([24, 20, 28], [0.04, 0.05, 0.03]),
]
FACE_VALUES = {
    "zero": {face: 0.0 for face in FACES},
    "constant": dict(zip(FACES, [1.0, -2.0, 0.5, 3.0, -1.5, 2.0])),
    "varying": dict(zip(FACES, ["1 + y*z", "x - 2*z + y", "sin(3*x) + z", "x*z - 1", "2*x + y", "y - x*x + z"])),
}


@pytest.mark.parametrize("cells, spacing", GRIDS)
@pytest.mark.parametrize("values", FACE_VALUES)
def test_matches_sine_transform(cells, spacing, values):
    """Random source, all six faces Dirichlet: the direct solve equals the DST-II solution."""
    k = 3.7
    rng = np.random.default_rng(sum(cells))
    f = rng.standard_normal(cells)
    boundary = {face: {"type": "dirichlet", "value": v} for face, v in FACE_VALUES[values].items()}
    table = make_table(
        grid={"cells": cells, "spacing": spacing, "origin": [0.2, -0.1, 0.4]},
        material={"value": k},
        source={"file": "source.npy"},
        boundary=boundary,
    )
    u, _ = solve_spec(make_spec(**table), source_file=f)
    reference = fft_solve(k, cells, spacing, f + face_rhs(k, table, boundary))
    assert np.linalg.norm(u - reference) <= 1e-10 * np.linalg.norm(reference)
