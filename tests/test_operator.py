"""The assembled operator and right-hand side against references built here with scipy.sparse."""

from __future__ import annotations

import copy

import numpy as np
import pytest
import scipy.linalg
import scipy.sparse as sp
from conftest import eliminate, make_table, reference_fields, reference_system

from sevenfold.operator import assemble
from sevenfold.problem import build_problem
from sevenfold.spec import parse_job

# Anisotropic spacing: hx = 0.25, hy = 0.2, hz = 0.4.
CELLS = [4, 3, 5]
SIZE = [1.0, 0.6, 2.0]


def assembled(table):
    problem = build_problem(parse_job(table, "test"))
    return assemble(problem), problem


def per_volume(system, volume: float):
    """The rows divided by the (uniform) cell volume: the textbook per-unit-volume form."""
    return system.matrix / volume, system.rhs / volume


def assert_same(A, A_ref, b, b_ref):
    A, A_ref = sp.csr_matrix(A), sp.csr_matrix(A_ref)
    assert A.shape == A_ref.shape
    scale = abs(A_ref).max()
    assert abs(A - A_ref).max() <= 1e-13 * scale
    assert np.allclose(b, b_ref, rtol=1e-13, atol=1e-13 * np.abs(b_ref).max())


def second_difference(n: int, h: float, lo: float, hi: float) -> sp.csr_matrix:
    """1D cell-centred (-1, 2, -1)/h^2 with insulated ends, plus G/h at each end.

    ``lo`` and ``hi`` are the end faces' conductances per area G (0 for Neumann); with k = 1
    and G = 2/h (Dirichlet) the end rows become the ghost-cell rows (3, -1)/h^2
    (common practice for cell-centred schemes).
    """
    main = np.full(n, 2.0)
    main[0] -= 1.0
    main[-1] -= 1.0
    L = sp.diags([-np.ones(n - 1), main, -np.ones(n - 1)], [-1, 0, 1]) / h**2
    ends = np.zeros(n)
    ends[0] += lo / h
    ends[-1] += hi / h
    return (L + sp.diags(ends)).tocsr()


def conductance(cond: dict, k: float, h: float) -> float:
    if cond["type"] == "dirichlet":
        return 2.0 * k / h
    if cond["type"] == "robin":
        return 1.0 / (1.0 / cond["coefficient"] + h / (2.0 * k))
    return 0.0


def driving(cond: dict, k: float, h: float) -> float:
    """Per-area inward term G*value (+ flux): what the face adds to the balance before /h."""
    if cond["type"] == "dirichlet":
        return conductance(cond, k, h) * cond["value"]
    if cond["type"] == "robin":
        return conductance(cond, k, h) * cond["reference"]
    return cond.get("flux", 0.0)


D = lambda v: {"type": "dirichlet", "value": v}  # noqa: E731
N = lambda q: {"type": "neumann", "flux": q}  # noqa: E731
R = lambda c, r: {"type": "robin", "coefficient": c, "reference": r}  # noqa: E731

# Each boundary type on each axis and on both sides of an axis, across the cases.
CONSTANT_BOUNDARIES = [
    {"x_min": D(1.0), "x_max": R(3.0, 2.0), "y_min": N(0.5), "y_max": D(-1.0), "z_min": R(0.7, -3.0)},
    {"x_min": N(-2.0), "x_max": D(4.0), "y_min": R(5.0, 1.5), "y_max": N(1.0), "z_min": D(0.0), "z_max": R(2.0, 1.0)},
    {"x_min": R(1.0, 1.0), "x_max": N(0.25), "y_min": D(2.0), "y_max": R(9.0, 0.0), "z_min": N(3.0), "z_max": D(-2.0)},
    {face: D(float(i)) for i, face in enumerate(("x_min", "x_max", "y_min", "y_max", "z_min", "z_max"))},
]


@pytest.mark.parametrize("boundary", CONSTANT_BOUNDARIES)
def test_constant_coefficient_equals_kronecker_sum(boundary):
    """Constant k, anisotropic cells: A = k (Lx (x) I (x) I + I (x) Ly (x) I + I (x) I (x) Lz)."""
    k = 2.5
    table = make_table(
        grid={"cells": CELLS, "size": SIZE},
        material={"value": k},
        source={"value": 0.75},
        boundary=boundary,
    )
    system, _ = assembled(table)

    n = CELLS
    h = [s / c for s, c in zip(SIZE, n)]
    none = {"type": "neumann", "flux": 0.0}
    faces = [(boundary.get(f"{a}_min", none), boundary.get(f"{a}_max", none)) for a in "xyz"]
    L = [
        second_difference(n[a], h[a], conductance(lo, k, h[a]) / k, conductance(hi, k, h[a]) / k)
        for a, (lo, hi) in enumerate(faces)
    ]
    I = [sp.identity(c) for c in n]
    A_ref = k * (
        sp.kron(L[0], sp.kron(I[1], I[2]))
        + sp.kron(I[0], sp.kron(L[1], I[2]))
        + sp.kron(I[0], sp.kron(I[1], L[2]))
    )
    b_ref = np.full(n, 0.75)
    for a, (lo, hi) in enumerate(faces):
        first = [slice(None)] * 3
        last = [slice(None)] * 3
        first[a], last[a] = 0, -1
        b_ref[tuple(first)] += driving(lo, k, h[a]) / h[a]
        b_ref[tuple(last)] += driving(hi, k, h[a]) / h[a]
    A, b = per_volume(system, np.prod(h))
    assert_same(A, A_ref, b, b_ref.ravel())


# Expressions are not symmetric in x, y, z and face data depend on the normal coordinate too,
# so a face array transposed, or evaluated on the wrong plane, changes the result.
K_EXPR = "1 + 0.5*sin(2*pi*x) * cos(pi*y) + 0.3*z**2 + 0.1*x*y"
VARIABLE_BOUNDARIES = [
    {
        "x_min": D("1 + y + 2*z + 3*x"),
        "x_max": R("2 + y*z + x", "3*y - z*x"),
        "y_min": N("x - 2*z + 5*y"),
        "y_max": D("x*z + y"),
        "z_min": R(4.0, "x + 3*y - z"),
        "z_max": N(0.5),
    },
    {
        "x_min": N("y*y + z"),
        "x_max": D("sin(pi*y) + z*x"),
        "y_min": R("1 + x", 2.0),
        "y_max": N("-x*z"),
        "z_min": D("x - y"),
        "z_max": R("1 + x + y + z", "x*y + z"),
    },
    {
        "x_min": R("3 + z + x", "y"),
        "x_max": N("z - y"),
        "y_min": D("2*x + z"),
        "y_max": R(1.5, "x - z + y"),
        "z_min": N("x + y"),
        "z_max": D("x + 2*y + z"),
    },
]


@pytest.mark.parametrize("boundary", VARIABLE_BOUNDARIES)
def test_variable_coefficient_equals_cell_loop(boundary):
    """Variable k (expression and a box region), expression face data: equals the loop reference."""
    table = make_table(
        grid={"cells": CELLS, "size": SIZE, "origin": [-0.3, 0.1, 0.5]},
        material={
            "value": K_EXPR,
            "region": [{"box": {"min": [0.0, 0.0, 0.0], "max": [0.3, 0.5, 1.3]}, "value": 40.0}],
        },
        source={"value": "x + 2*y*z"},
        boundary=boundary,
    )
    system, _ = assembled(table)
    A_ref, b_ref, held, _ = reference_system(table)
    assert not held.any()
    assert (system.row.ravel() == np.arange(np.prod(CELLS))).all()
    assert_same(system.matrix, A_ref, system.rhs, b_ref)


def test_region_changes_the_coefficient():
    """The box region above really selects cells, so the variable case tests contrast."""
    table = make_table(
        grid={"cells": CELLS, "size": SIZE, "origin": [-0.3, 0.1, 0.5]},
        material={
            "value": K_EXPR,
            "region": [{"box": {"min": [0.0, 0.0, 0.0], "max": [0.3, 0.5, 1.3]}, "value": 40.0}],
        },
    )
    k, *_ = reference_fields(table)
    assert 0 < np.count_nonzero(k[0] == 40.0) < k[0].size
    problem = build_problem(parse_job(table, "test"))
    assert all(np.allclose(problem.coefficient[a], k[a], rtol=1e-14) for a in range(3))


def test_a_sphere_regions_expression_is_evaluated_on_the_block_around_it(monkeypatch):
    """A region of another shape than a box takes its expression's values at its cells, which
    are evaluated on the smallest block of cells holding the shape's cells, not on the whole
    grid (values against the cell centres in numpy); the material's base expression is
    evaluated straight into k."""
    from sevenfold import fields

    shapes: list[tuple[int, ...]] = []
    into: list[bool] = []
    real = fields.evaluate

    def recorded(text, *xyz, **kwargs):
        out = real(text, *xyz, **kwargs)
        shapes.append(out.shape)
        into.append(out is kwargs.get("out"))
        return out

    monkeypatch.setattr(fields, "evaluate", recorded)
    centre, radius = [0.6, 0.3, 1.1], 0.33
    table = make_table(grid={"cells": [9, 8, 7], "size": SIZE},
                       material={"value": "2 + y", "region": [
                           {"sphere": {"center": centre, "radius": radius}, "value": "5 + x * z - y"}]},
                       boundary={"x_min": D(1.0)})
    problem = build_problem(parse_job(table, "test"))
    x, y, z = np.meshgrid(*(problem.grid.centres(a) for a in range(3)), indexing="ij")
    inside = (x - centre[0]) ** 2 + (y - centre[1]) ** 2 + (z - centre[2]) ** 2 <= radius**2
    assert 0 < inside.sum() < inside.size
    np.testing.assert_allclose(problem.coefficient[0], np.where(inside, 5 + x * z - y, 2 + y), rtol=1e-15)
    block = tuple(int(np.count_nonzero(inside.any(axis=tuple(b for b in range(3) if b != a))))
                  for a in range(3))
    assert shapes == [inside.shape, block] and block != inside.shape, (shapes, block)
    assert into == [True, False]


def test_box_regions_select_the_cells_whose_centres_they_hold(monkeypatch):
    """Boxes are assigned as blocks of slices (no grid-sized mask each): overlapping boxes
    (the later wins), a box valued by an expression, a source box's value and a total spread
    over its cells' volume, against masks of the cell centres built in numpy (conftest). A
    box's expression is evaluated on the box's cells alone, the base's on the whole grid,
    straight into the field."""
    from sevenfold import fields
    from sevenfold.errors import JobError

    shapes: dict[str, tuple[int, ...]] = {}
    into: dict[str, bool] = {}
    real = fields.evaluate

    def recorded(text, *xyz, **kwargs):
        out = real(text, *xyz, **kwargs)
        shapes[text] = out.shape
        into[text] = out is kwargs.get("out")
        return out

    monkeypatch.setattr(fields, "evaluate", recorded)

    table = make_table(
        grid={"cells": [7, 6, 5], "size": SIZE, "origin": [-0.3, 0.1, 0.5]},
        material={"value": 2.0, "region": [
            {"box": {"min": [-0.3, 0.1, 0.5], "max": [0.3, 0.5, 1.3]}, "value": 40.0},
            {"box": {"min": [0.0, 0.2, 0.9], "max": [0.7, 0.7, 2.5]}, "value": "3 + x * y + z"},
        ]},
        source={"value": "x + 2", "region": [
            {"box": {"min": [0.1, 0.0, 0.0], "max": [0.5, 0.35, 1.7]}, "value": "10 * z"},
            {"box": {"min": [-0.3, 0.3, 1.5], "max": [0.2, 0.7, 2.5]}, "total": 5.0},
        ]},
        boundary={"x_min": D(1.0)},
    )
    k, f, _, _ = reference_fields(table)
    assert 0 < np.count_nonzero(k[0] == 40.0) and np.count_nonzero(k[0] == 2.0)
    problem = build_problem(parse_job(table, "test"))
    assert all(np.allclose(problem.coefficient[a], k[a], rtol=1e-14) for a in range(3))
    np.testing.assert_allclose(problem.source, f, rtol=1e-14)
    centres = [problem.grid.centres(a) for a in range(3)]
    for text, (lo, hi) in (("3 + x * y + z", ([0.0, 0.2, 0.9], [0.7, 0.7, 2.5])),
                           ("10 * z", ([0.1, 0.0, 0.0], [0.5, 0.35, 1.7]))):
        inside = tuple(int(np.count_nonzero((c >= l) & (c <= h))) for c, l, h in zip(centres, lo, hi))
        assert shapes[text] == inside, (text, shapes[text], inside)
    assert shapes["x + 2"] == (7, 6, 5) and into["x + 2"]
    assert not into["10 * z"]
    empty = copy.deepcopy(table)
    empty["material"]["region"].append({"box": {"min": [0.0, 0.0, 0.0], "max": [0.01, 0.6, 2.5]}, "value": 1.0})
    with pytest.raises(JobError, match="selects no cell centre") as info:
        build_problem(parse_job(empty, "test"))
    assert info.value.where == "material.region.2"


SPD_CASES = {
    "dirichlet-all": {f: D(1.0) for f in ("x_min", "x_max", "y_min", "y_max", "z_min", "z_max")},
    "one-robin-face": {"z_max": R(0.01, 0.0)},
    "mixed": VARIABLE_BOUNDARIES[0],
    "pure-neumann": {"x_min": N(1.0), "x_max": N(-1.0)},
}


@pytest.mark.parametrize("name", SPD_CASES)
def test_symmetric_positive_definite(name):
    """A equals its transpose exactly and its smallest eigenvalue is positive."""
    table = make_table(
        grid={"cells": CELLS, "size": SIZE},
        material={"value": K_EXPR},
        boundary=SPD_CASES[name],
    )
    system, _ = assembled(table)
    A = system.matrix
    assert abs(A - A.T).max() == 0.0
    eig = scipy.linalg.eigh(A.toarray(), eigvals_only=True)
    assert eig[0] > 1e-8 * eig[-1]


def test_column_indices_sorted_and_unique():
    """Each row's columns come out strictly increasing (the CSR is marked canonical)."""
    table = make_table(
        grid={"cells": CELLS, "size": SIZE},
        material={"value": K_EXPR},
        boundary=VARIABLE_BOUNDARIES[1],
        hold=[{"box": {"min": [0.3, 0.0, 0.0], "max": [0.7, 0.4, 1.0]}, "value": 2.0}],
    )
    A = assembled(table)[0].matrix
    for r in range(A.shape[0]):
        cols = A.indices[A.indptr[r] : A.indptr[r + 1]]
        assert np.all(np.diff(cols) > 0)


HOLDS = [
    [{"box": {"min": [0.3, 0.0, 0.0], "max": [0.7, 0.4, 1.0]}, "value": 2.0}],
    [
        {"box": {"min": [0.0, 0.0, 0.0], "max": [0.3, 0.3, 0.3]}, "value": -1.0},
        {"box": {"min": [0.7, 0.3, 1.0], "max": [1.0, 0.6, 2.0]}, "value": 5.0},
    ],
]


@pytest.mark.parametrize("hold", HOLDS)
def test_holds_are_eliminated(hold):
    """Held cells leave the unknowns; the rest equals the reference with holds eliminated."""
    table = make_table(
        grid={"cells": CELLS, "size": SIZE},
        material={"value": K_EXPR},
        source={"value": "1 + y"},
        boundary=VARIABLE_BOUNDARIES[2],
        hold=hold,
    )
    system, problem = assembled(table)
    A_full, b_full, held, held_value = reference_system(table)
    assert held.any()
    assert (problem.held == held).all()
    assert system.matrix.shape == (held.size - held.sum(),) * 2
    assert (system.row[held] == -1).all()
    assert (system.row[~held] == np.arange(held.size - held.sum())).all()
    A_ref, b_ref = eliminate(A_full, b_full, held, held_value)
    assert_same(system.matrix, A_ref, system.rhs, b_ref)
    assert abs(system.matrix - system.matrix.T).max() == 0.0
    assert scipy.linalg.eigh(system.matrix.toarray(), eigvals_only=True)[0] > 0


def test_held_values_move_to_rhs():
    """Changing a held value by dv changes only its free neighbours' rhs, by T_PN * dv."""
    base = dict(
        grid={"cells": CELLS, "size": SIZE},
        material={"value": K_EXPR},
        boundary=VARIABLE_BOUNDARIES[0],
    )
    box = {"min": [0.3, 0.25, 0.5], "max": [0.45, 0.35, 0.7]}  # only cell (1, 1, 1)
    s0, _ = assembled(make_table(**base, hold=[{"box": box, "value": 0.0}]))
    s1, problem = assembled(make_table(**base, hold=[{"box": box, "value": 3.0}]))
    assert np.count_nonzero(problem.held) == 1 and problem.held[1, 1, 1]
    assert abs(s0.matrix - s1.matrix).max() == 0.0
    k = problem.coefficient[0]
    h = [s / c for s, c in zip(SIZE, CELLS)]
    volume = np.prod(h)
    expected = np.zeros(s0.rhs.shape)
    for axis in range(3):
        for step in (-1, 1):
            nb = [1, 1, 1]
            nb[axis] += step
            kn, kp = k[tuple(nb)], k[1, 1, 1]
            expected[s0.row[tuple(nb)]] = 2 * kp * kn / (kp + kn) / h[axis] ** 2 * 3.0 * volume
    assert np.allclose(s1.rhs - s0.rhs, expected, rtol=1e-13, atol=0)


def test_pure_neumann_pins_one_cell():
    """A balanced pure-Neumann problem is the full operator with cell (0, 0, 0) removed."""
    table = make_table(
        grid={"cells": CELLS, "size": SIZE},
        material={"value": K_EXPR},
        source={"value": 1.0},
        # 1.0 per volume over 1.2 m^3 leaves through x_max (area 1.2 m^2): balanced
        boundary={"x_max": N(-1.0)},
    )
    system, problem = assembled(table)
    assert problem.gauge_mean_zero
    A_full, b_full, _, _ = reference_system(table)
    pin = np.zeros(CELLS, dtype=bool)
    pin[0, 0, 0] = True
    A_ref, b_ref = eliminate(A_full, b_full, pin, np.zeros(CELLS))
    assert_same(system.matrix, A_ref, system.rhs, b_ref)


def test_thin_box_is_1d_second_difference():
    """(n, 1, 1) cells, Dirichlet at both x faces, k = 1: tridiag(-1, 2, -1)/h^2 with end
    rows (3, -1)/h^2, and 2 g/h^2 in the end rows' rhs (ghost cell u_ghost = 2 g - u_P;
    common practice for cell-centred schemes)."""
    n, length = 6, 1.5
    h = length / n
    table = make_table(
        grid={"cells": [n, 1, 1], "size": [length, 0.2, 0.3]},
        boundary={"x_min": D(1.0), "x_max": D(-2.0)},
    )
    system, _ = assembled(table)
    matrix, rhs = per_volume(system, h * 0.2 * 0.3)
    ref = (np.diag(np.full(n, 2.0)) - np.diag(np.ones(n - 1), 1) - np.diag(np.ones(n - 1), -1))
    ref[0, 0] = ref[-1, -1] = 3.0
    ref /= h**2
    assert np.allclose(matrix.toarray(), ref, rtol=1e-14, atol=0)
    b_ref = np.zeros(n)
    b_ref[0], b_ref[-1] = 2 * 1.0 / h**2, 2 * -2.0 / h**2
    assert np.allclose(rhs, b_ref, rtol=1e-14, atol=0)


def test_thin_box_is_2d_second_difference():
    """(nx, ny, 1) cells, Dirichlet on the four side faces: Lx (x) I + I (x) Ly."""
    nx, ny = 5, 4
    hx, hy = 0.2, 0.35
    table = make_table(
        grid={"cells": [nx, ny, 1], "spacing": [hx, hy, 0.1]},
        boundary={"x_min": D(0.0), "x_max": D(0.0), "y_min": D(0.0), "y_max": D(0.0)},
    )
    system, _ = assembled(table)
    Lx = second_difference(nx, hx, 2 / hx, 2 / hx)
    Ly = second_difference(ny, hy, 2 / hy, 2 / hy)
    A_ref = sp.kron(Lx, sp.identity(ny)) + sp.kron(sp.identity(nx), Ly)
    A, b = per_volume(system, hx * hy * 0.1)
    assert_same(A, A_ref, b, np.zeros(nx * ny))
    # the ghost rows (3, -1)/h^2 on the first and last cell of each axis
    assert Lx[0, 0] == pytest.approx(3 / hx**2) and Lx[0, 1] == pytest.approx(-1 / hx**2)
