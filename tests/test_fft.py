"""The exact fast path, method "fft", against the assembled system solved by sparse LU.

Reference: scipy.fft's orthonormal DST-II and DCT-II diagonalise the cell-centred second
difference with Dirichlet (ghost -u_P) and Neumann (ghost +u_P) end rows respectively
(common practice for fast Poisson solvers on cell-centred grids); checked here against the
explicit 1D matrices, then the 3D solve against sevenfold's direct solve of the assembled
system (CSR + SuperLU) to 1e-10 relative for each eligible boundary combination.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
import scipy.fft
from conftest import FACES, make_spec, make_table, np_eval, reference_system, solve_spec

from sevenfold.cli import main
from sevenfold.errors import JobError
from sevenfold.operator import assemble
from sevenfold.problem import build_problem
from sevenfold.runner import run_job
from sevenfold.solvers import fft as fft_module
from sevenfold.solvers import select
from sevenfold.solvers import method_for, solve
from sevenfold.solvers.fft import eigenvalues, fft_eligibility, residual_norm, solve_fft
from sevenfold.spec import SolverSpec

TOL = 1e-10  # relative, max norm: both sides are exact solves of the same discrete system

D, N = "dirichlet", "neumann"
COMBOS = [(D, D, D), (N, N, N), (D, N, D), (N, D, N), (N, N, D), (D, D, N)]
GRIDS = [  # non-cubic counts, anisotropic spacing, a count of 1 on an axis
    ([7, 5, 6], [0.1, 0.23, 0.05]),
    ([9, 4, 1], [0.05, 0.3, 0.8]),
    ([1, 6, 5], [0.4, 0.07, 0.11]),
]
VALUES = dict(zip(FACES, ["1 + y*z", "x - 2*z + y", "sin(3*x) + z", "-2.5", "2*x + y", "y - x*x + z"]))
FLUXES = dict(zip(FACES, ["cos(4*y) + z", "-0.5", "x*z", "sin(2*x) - 1", "0.75", "x + y"]))
SOURCE = "sin(5*x)*cos(3*y) + z*z"


def boundary_for(kinds) -> dict:
    out = {}
    for axis, kind in enumerate(kinds):
        for face in FACES[2 * axis: 2 * axis + 2]:
            out[face] = ({"type": D, "value": VALUES[face]} if kind == D
                         else {"type": N, "flux": FLUXES[face]})
    return out


def balancing_source(cells, spacing, boundary: dict) -> str:
    """SOURCE plus the constant that makes sources and face fluxes balance (pure Neumann).

    Read independently of sevenfold: the source at cell centres, the fluxes at face centres.
    """
    origin = (0.0, 0.0, 0.0)
    axes = [o + (np.arange(n) + 0.5) * h for n, h, o in zip(cells, spacing, origin)]
    x, y, z = np.meshgrid(*axes, indexing="ij")
    volume = math.prod(spacing)
    total = float(np_eval(SOURCE, x, y, z).sum()) * volume
    for face, cond in boundary.items():
        axis = "xyz".index(face[0])
        at = [a for a in axes]
        at[axis] = np.array([0.0 if face.endswith("min") else cells[axis] * spacing[axis]])
        fx, fy, fz = np.meshgrid(*at, indexing="ij")
        total += float(np_eval(cond["flux"], fx, fy, fz).sum()) * volume / spacing[axis]
    return f"{SOURCE} + ({-total / (math.prod(cells) * volume)!r})"


def table_for(kinds, cells, spacing, k: float = 3.7) -> dict:
    boundary = boundary_for(kinds)
    source = balancing_source(cells, spacing, boundary) if set(kinds) == {N} else SOURCE
    return make_table(grid={"cells": cells, "spacing": spacing}, material={"value": k},
                      source={"value": source}, boundary=boundary)


# ---------------------------------------------------------------- the 1D diagonalisation
def second_difference(n: int, h: float, kind: str) -> np.ndarray:
    """The cell-centred 1D operator, written out: ghost -u_P (dirichlet) or +u_P (neumann)."""
    A = 2.0 * np.eye(n) - np.eye(n, k=1) - np.eye(n, k=-1)
    end = 1.0 if kind == D else -1.0
    A[0, 0] += end
    A[-1, -1] += end
    return A / h**2


@pytest.mark.parametrize("kind", [D, N])
@pytest.mark.parametrize("n", [1, 2, 5, 16])
def test_transform_diagonalises_the_1d_operator(n: int, kind: str) -> None:
    h = 0.37
    A = second_difference(n, h, kind)
    lam = eigenvalues(n, h, kind)
    np.testing.assert_allclose(np.sort(lam), np.linalg.eigvalsh(A), rtol=1e-12, atol=1e-12 / h**2)
    transform = scipy.fft.dst if kind == D else scipy.fft.dct
    basis = transform(np.eye(n), type=2, norm="ortho", axis=0)  # row m: mode m over the cells
    np.testing.assert_allclose(basis @ A @ basis.T, np.diag(lam), atol=1e-12 / h**2)


# ---------------------------------------------------------------- fft against direct
@pytest.mark.parametrize("cells, spacing", GRIDS, ids=lambda v: "x".join(map(str, v)) if isinstance(v[0], int) else None)
@pytest.mark.parametrize("kinds", COMBOS, ids=lambda k: "".join(c[0].upper() for c in k))
def test_fft_matches_direct(kinds, cells, spacing) -> None:
    spec = make_spec(**table_for(kinds, cells, spacing))
    u_direct, problem = solve_spec(spec)
    assert fft_eligibility(problem) is None
    u, result = solve_fft(problem)
    if problem.gauge_mean_zero:  # both are reported with mean zero; compare without the mean
        u_direct = u_direct - u_direct.mean()
        assert abs(u.mean()) <= 1e-12 * np.abs(u).max()
    scale = np.abs(u_direct).max()
    assert scale > 1e-3  # a non-trivial solution: the comparison is not of two near-zero fields
    assert np.abs(u - u_direct).max() <= TOL * scale
    assert result.method == "fft" and result.iterations == 1 and result.converged
    assert result.history[0] == 1.0 and result.history[-1] == result.final_relative_residual
    assert result.final_relative_residual < 1e-12


@pytest.mark.parametrize("kinds", COMBOS, ids=lambda k: "".join(c[0].upper() for c in k))
def test_norm_of_b_from_the_divided_planes(kinds) -> None:
    """solve_fft takes ||b||^2 from the transformed planes as it divides them: the orthonormal
    DST-II / DCT-II keep the sum of squares (Parseval; scipy.fft's norm="ortho"), so it must
    equal the sum over b itself, and the division must be the one scipy's own inverse undoes."""
    kinds_named = tuple("dirichlet" if k == D else "neumann" for k in kinds)
    b = np.random.default_rng(3).standard_normal((6, 5, 7))
    lx, ly, lz = (np.linspace(1.0, 2.0, n) for n in b.shape)
    w_hat = fft_module._transform(b.copy(), kinds_named, 1, inverse=False)
    expected = w_hat / (lx[:, None, None] + ly[None, :, None] + lz[None, None, :])
    total = fft_module._divide_by_eigenvalues(w_hat, lx, ly, lz, workers=2)
    assert total == pytest.approx(float(np.sum(b * b)), rel=1e-12)
    assert np.allclose(w_hat, expected, rtol=1e-14, atol=0.0)


# three couplings, two equal (y and z share one scaling), all equal (one scaling, cubic cells)
SPACINGS = [[0.1, 0.23, 0.05], [0.1, 0.25, 0.25], [0.25, 0.25, 0.25]]  # binary: sizes exact


@pytest.mark.parametrize("spacing", SPACINGS, ids=lambda s: "-".join(map(str, s)))
@pytest.mark.parametrize("slab", [7, 30, 1 << 16])  # one plane per slab, several, all at once
@pytest.mark.parametrize("kinds", COMBOS, ids=lambda k: "".join(c[0].upper() for c in k))
def test_residual_without_matrix_matches_independent_operator(kinds, slab, spacing, monkeypatch) -> None:
    """For any u (not a solution), the matrix-free ||b - A u|| equals the one from the
    operator written cell by cell in conftest.reference_system (independent of sevenfold)."""
    monkeypatch.setattr(fft_module, "SLAB_CELLS", slab)
    cells = [5, 4, 6]
    table = table_for(kinds, cells, spacing)
    problem = build_problem(make_spec(**table))
    A, b, _, _ = reference_system(table)
    u = np.random.default_rng(7).standard_normal(cells)
    padded = np.zeros((cells[0] + 2, cells[1], cells[2]))
    padded[1:-1] = u
    # the reference rows are cell balances; the fft residual is per unit volume (equal cells)
    expected = np.linalg.norm(b - A @ u.reshape(-1)) / np.prod(spacing)
    assert expected > 1.0
    # pure Neumann: sevenfold's source carries the rounding-level balancing shift
    assert residual_norm(problem, padded) == pytest.approx(expected, rel=1e-12)


def test_pure_neumann_ignores_the_pin() -> None:
    """The pinned cell of a pure-Neumann problem does not make it ineligible."""
    problem = build_problem(make_spec(**table_for((N, N, N), [7, 5, 6], [0.1, 0.23, 0.05])))
    assert problem.gauge_mean_zero and problem.held[0, 0, 0]
    assert fft_eligibility(problem) is None


def test_zero_data_gives_zero() -> None:
    table = make_table(grid={"cells": [4, 3, 5], "size": [1.0, 1.0, 1.0]}, material={"value": 2.0},
                       boundary={f: {"type": D, "value": 0.0} for f in FACES})
    u, result = solve_fft(build_problem(make_spec(**table)))
    assert not u.any() and result.history == [0.0, 0.0]


# ---------------------------------------------------------------- refusals
INELIGIBLE = {
    "varying k": (dict(material={"value": 1.0, "region": [
        {"box": {"min": [0.0, 0.0, 0.0], "max": [0.5, 1.0, 1.0]}, "value": 4.0}]}),
        "k varies (min 1, max 4)"),
    "varying k expression": (dict(material={"expression": "1 + x"}), "k varies (min 1.125, max 1.875)"),
    "a hold": (dict(hold=[{"box": {"min": [0.0, 0.0, 0.0], "max": [0.3, 0.3, 0.3]}, "value": 1.0}]),
               "holds present"),
    "a robin face": (dict(boundary={**boundary_for((D, D, D)),
                                    "y_max": {"type": "robin", "coefficient": 5.0, "reference": 1.0}}),
                     "a robin face (y_max)"),
    "mixed axis": (dict(boundary={**boundary_for((D, D, D)), "z_min": {"type": N, "flux": 1.0}}),
                   "axis z mixes neumann and dirichlet faces"),
    "unlisted face is insulated": (dict(boundary={"x_min": {"type": D, "value": 1.0}}),
                                   "axis x mixes dirichlet and neumann faces"),
}


@pytest.mark.parametrize("case", INELIGIBLE)
def test_ineligible_problems_are_refused_with_the_reason(case: str) -> None:
    overrides, reason = INELIGIBLE[case]
    table = make_table(grid={"cells": [4, 3, 5], "size": [1.0, 1.0, 1.0]}, material={"value": 2.0},
                       boundary=boundary_for((D, D, D)))
    table.update(overrides)
    problem = build_problem(make_spec(**table))
    assert reason in fft_eligibility(problem)
    with pytest.raises(JobError) as err:
        method_for(SolverSpec(method="fft"), problem)
    assert err.value.where == "solver.method"
    assert err.value.reason.startswith("method 'fft' needs a constant coefficient, no holds")
    assert reason in err.value.reason
    with pytest.raises(ValueError, match="eligible"):
        solve_fft(problem)
    assert method_for(SolverSpec(method="auto"), problem) == "gmg"


def test_matrix_entry_point_does_not_take_fft() -> None:
    problem = build_problem(make_spec(**table_for((D, D, D), [4, 3, 5], [0.1, 0.1, 0.1])))
    system = assemble(problem)
    with pytest.raises(ValueError, match="fft"):
        solve(system.matrix, system.rhs, SolverSpec(method="fft"))


# ---------------------------------------------------------------- jobs: check and run
JOB = """
name = "{name}"
[grid]
cells = [8, 6, 5]
size = [0.8, 0.3, 0.5]
[material]
value = 2.0
[source]
value = "sin(3*x)*y"
[boundary]
x_min = {{ type = "dirichlet", value = "1 + y*z" }}
x_max = {{ type = "dirichlet", value = 0.0 }}
y_min = {{ type = "neumann", flux = "x" }}
z_min = {{ type = "dirichlet", value = 3.0 }}
z_max = {{ type = "{z_max}", {z_max_data} }}
[solver]
method = "{method}"
"""


def write_job(folder: Path, name: str, method: str, z_max: str = "dirichlet") -> Path:
    data = {"dirichlet": 'value = "x"', "robin": "coefficient = 4.0, reference = 1.0"}[z_max]
    path = folder / f"{name}.toml"
    path.write_text(JOB.format(name=name, method=method, z_max=z_max, z_max_data=data))
    return path


def test_check_shows_fft_chosen_by_auto_only_when_eligible(tmp_path: Path, capsys) -> None:
    assert main(["check", str(write_job(tmp_path, "eligible", "auto"))]) == 0
    assert "fft (chosen by auto)" in capsys.readouterr().out
    assert main(["check", str(write_job(tmp_path, "robin", "auto", z_max="robin"))]) == 0
    text = capsys.readouterr().out
    assert "gmg (chosen by auto)" in text and "fft (chosen" not in text


def test_check_refuses_fft_with_the_reason(tmp_path: Path, capsys) -> None:
    job = write_job(tmp_path, "robin", "fft", z_max="robin")
    assert main(["check", str(job)]) == 2
    err = " ".join(capsys.readouterr().err.split())
    assert "Traceback" not in err
    assert f"{job}: solver.method: method 'fft' needs" in err and "a robin face (z_max)" in err


def test_run_solves_without_assembling_and_matches_direct(tmp_path: Path, monkeypatch) -> None:
    direct = run_job(write_job(tmp_path, "direct", "direct"))
    reference = direct.solve.x.reshape(8, 6, 5)

    def no_assembly(problem):
        raise AssertionError("the fft path assembled a matrix")

    monkeypatch.setattr(select, "assemble", no_assembly)
    for method in ("fft", "auto"):
        result = run_job(write_job(tmp_path, method, method))
        assert result.plan.method == "fft" and result.solve.method == "fft"
        u = result.solve.x.reshape(8, 6, 5)
        assert np.abs(u - reference).max() <= TOL * np.abs(reference).max()
        assert result.solve.final_relative_residual < 1e-12
    with pytest.raises(AssertionError, match="assembled"):  # the other methods still assemble
        run_job(write_job(tmp_path, "direct", "direct"))


def test_coefficient_range_is_read_once_and_matches_numpy(monkeypatch) -> None:
    """Problem.coefficient_range: numpy's own min and max over every direction (an anisotropic
    material with a region, and an isotropic one), computed once per problem however often
    fft_eligibility and the cautions ask (common practice)."""
    from sevenfold import fields

    table = make_table(grid={"cells": [6, 5, 4], "size": [1.0, 1.0, 1.0]},
                       material={"value": [2.0, 3.0, 0.5],
                                 "region": [{"box": {"min": [0, 0, 0], "max": [0.5, 0.5, 0.5]},
                                             "value": [7.0, 0.25, 1.0]}]},
                       boundary=boundary_for((D, D, D)))
    problem = build_problem(make_spec(**table))
    k = problem.coefficient
    assert problem.coefficient_range == (min(float(a.min()) for a in k),
                                         max(float(a.max()) for a in k)) == (0.25, 7.0)
    calls = []
    real = fields.value_range
    monkeypatch.setattr(fields, "value_range", lambda arrays: calls.append(1) or real(arrays))
    fresh = build_problem(make_spec(**table))
    assert fresh.coefficient_range == fresh.coefficient_range == (0.25, 7.0)
    assert "directional" in fft_eligibility(fresh)
    iso = build_problem(make_spec(**table_for((D, D, D), [4, 3, 5], [0.1, 0.1, 0.1])))
    assert fft_eligibility(iso) is None and fft_eligibility(iso) is None
    assert iso.coefficient_range == (float(iso.coefficient[0].min()), float(iso.coefficient[0].max()))
    assert calls == [1, 1]
