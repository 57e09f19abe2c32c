"""Face patches, interior exchange and contact resistance (conditions.py): closed forms,
consistency with the faces' own conditions, the balance, and agreement between solvers."""

from __future__ import annotations

import copy

import numpy as np
import pytest
from conftest import make_spec, make_table, solve_spec

from sevenfold.balance import compute_balance
from sevenfold.errors import JobError
from sevenfold.operator import conductances, face_arrays
from sevenfold.problem import build_problem
from sevenfold.queue.sweep import expand
from sevenfold.solvers import solve_problem
from sevenfold.solvers.fft import fft_eligibility
from sevenfold.spec import parse_job

# A graded grid: x by a growth ratio, y by explicit edges, z by two segments.
GRADED = {"edges": {
    "x": {"start": 0.0, "segments": [{"length": 1.0, "cells": 7, "growth": 1.25}]},
    "y": [0.0, 0.1, 0.25, 0.45, 0.7, 1.0],
    "z": {"start": 0.0, "segments": [{"length": 0.2, "cells": 2}, {"length": 0.4, "cells": 4, "first": 0.06}]},
}}
WHOLE = {"min": [0.0, 0.0, 0.0], "max": [1.0, 1.0, 0.6]}  # the whole box


def _solve(spec, method="direct", rtol=1e-12):
    problem = build_problem(spec)
    solver = spec.solver.model_copy(update={"method": method, "rtol": rtol, "max_iterations": 2000})
    u, _ = solve_problem(problem, solver, method)
    return u, problem


# ---------------------------------------------------------------- patches
FACE_CONDITIONS = [
    {"type": "dirichlet", "value": "300 + 10*x*y"},
    {"type": "neumann", "flux": "1000*(x + y)"},
    {"type": "robin", "coefficient": "50 + 20*x", "reference": 290.0},
]


@pytest.mark.parametrize("cond", FACE_CONDITIONS, ids=lambda c: c["type"])
def test_patch_over_a_whole_face_equals_the_face_condition(cond) -> None:
    """A patch covering every boundary face of z_max gives the face's own terms, so the
    operator and the solution equal those of the job with the condition on the face
    (the definition of a patch; to rounding)."""
    common = dict(grid=GRADED, material={"value": 20.0}, source={"value": 5e4},
                  boundary={"z_min": {"type": "dirichlet", "value": 280.0},
                            "z_max": {"type": "robin", "coefficient": 3.0, "reference": 0.0}})
    on_face = copy.deepcopy(common)
    on_face["boundary"]["z_max"] = cond
    a = make_spec(**on_face)
    b = make_spec(**common, patch=[{"face": "z_max", "box": WHOLE, **cond}])
    ua, pa = solve_spec(a)
    ub, pb = solve_spec(b)
    assert pb.faces["z_max"].kind == cond["type"]
    fa, fb = face_arrays(pa), face_arrays(pb)
    for name in ("diag", "b", "tz"):
        np.testing.assert_allclose(getattr(fb, name), getattr(fa, name), rtol=1e-14, atol=0)
    np.testing.assert_allclose(ub, ua, rtol=1e-12)
    ba, bb = compute_balance(pa, ua), compute_balance(pb, ub)
    assert bb.patches[0].outflow == pytest.approx(ba.faces["z_max"], rel=1e-10)
    assert bb.patches[0].area == pytest.approx(1.0 * 1.0)


def test_a_total_patch_appears_in_the_balance_exactly() -> None:
    """A neumann patch's total is spread over the selected faces by area (graded widths), so
    the balance line is the total itself: a prescribed flux, independent of the solve."""
    spec = make_spec(grid=GRADED, material={"value": 3.0},
                     boundary={"z_min": {"type": "dirichlet", "value": 0.0}},
                     patch=[{"face": "z_max", "box": {"min": [0.2, 0.1, 0.5], "max": [0.7, 0.6, 0.7]},
                             "type": "neumann", "total": 7.5, "name": "chip"},
                            {"face": "x_min", "box": {"min": [-1, 0, 0], "max": [0, 1, 0.3]},
                             "type": "neumann", "flux": -2.0}])
    u, problem = solve_spec(spec)
    bal = compute_balance(problem, u)
    chip, side = bal.patches
    assert (chip.name, chip.face, side.name) == ("chip", "z_max", "patch 1")
    assert chip.outflow == pytest.approx(-7.5, rel=1e-14)
    assert bal.faces["z_max"] == pytest.approx(-7.5, rel=1e-14)  # the rest of z_max is insulated
    assert side.outflow == pytest.approx(2.0 * side.area, rel=1e-14)
    # the selected faces have unequal areas on this grid, and the flux is per unit area
    sel = problem.patches[0].selected
    assert np.ptp(problem.grid.face_areas(2)[sel]) > 0
    assert np.ptp(problem.faces["z_max"].flux[sel]) == 0
    assert bal.relative_imbalance < 1e-10


def test_later_patches_override_and_the_face_becomes_mixed() -> None:
    spec = make_spec(grid={"cells": [6, 4, 3], "size": [1.0, 1.0, 1.0]},
                     boundary={"z_max": {"type": "neumann", "flux": 1.0}},
                     patch=[{"face": "z_max", "box": {"min": [0, 0, 1], "max": [0.5, 1, 1]},
                             "type": "dirichlet", "value": 5.0, "name": "a"},
                            {"face": "z_max", "box": {"min": [0.3, 0, 1], "max": [1, 1, 1]},
                             "type": "robin", "coefficient": 0.0, "reference": 9.0, "name": "b"}])
    problem = build_problem(spec)
    t = problem.faces["z_max"]
    assert t.kind == "mixed"
    a, b = problem.patches
    # x centres 1/12, 3/12, 5/12 are in a; 5/12 .. 11/12 in b, which owns 5/12
    assert a.selected[:3].all() and not a.selected[3:].any()
    assert a.owned[:2].all() and not a.owned[2:].any() and b.owned[2:].all()
    assert np.all(t.value[:2] == 5.0) and np.all(t.conductance[:2] > 0)
    assert np.all(t.conductance[2:] == 0.0) and np.all(t.value[2:] == 9.0)  # robin 0: insulated
    assert np.all(t.flux == 0.0)  # the face's own flux is overwritten everywhere
    assert not problem.gauge_mean_zero  # the dirichlet patch fixes the problem
    assert fft_eligibility(problem) == "patches of another type on part of a face (z_max)"


def test_robin_coefficient_zero_on_part_of_a_face_is_insulated() -> None:
    """coefficient = 0 where x < 0.5 (an expression) gives G = 0 there: the same solution as
    a neumann patch with no flux over that half (both mean zero inflow)."""
    face = {"type": "robin", "coefficient": "where(x < 0.5, 0.0, 40.0)", "reference": 1.0}
    base = dict(grid={"cells": [6, 4, 4], "size": [1.0, 1.0, 1.0]}, source={"value": 1.0},
                boundary={"z_max": face})
    u1, p1 = solve_spec(make_spec(**base))
    half = {"face": "z_max", "box": {"min": [0, 0, 0], "max": [0.5, 1, 1]}, "type": "neumann"}
    u2, _ = solve_spec(make_spec(**base, patch=[half]))
    assert np.all(p1.faces["z_max"].conductance[:3] == 0) and np.all(p1.faces["z_max"].conductance[3:] > 0)
    np.testing.assert_allclose(u1, u2, rtol=1e-12)
    with pytest.raises(JobError, match="must not be negative"):
        build_problem(make_spec(**{**base, "boundary": {"z_max": {**face, "coefficient": "x - 0.5"}}}))


def test_pure_neumann_detection_sees_a_dirichlet_patch() -> None:
    """All six faces neumann but a dirichlet patch: a definite problem, no gauge; without the
    patch the same unbalanced job is refused as pure Neumann."""
    base = dict(grid={"cells": [4, 4, 4], "size": [1.0, 1.0, 1.0]}, source={"value": 1.0})
    with pytest.raises(JobError, match="pure-Neumann"):
        build_problem(make_spec(**base))
    patch = {"face": "x_min", "box": {"min": [0, 0.3, 0.3], "max": [0, 0.7, 0.7]}, "type": "dirichlet", "value": 0.0}
    u, problem = solve_spec(make_spec(**base, patch=[patch]))
    assert not problem.gauge_mean_zero
    bal = compute_balance(problem, u)
    assert bal.patches[0].outflow == pytest.approx(1.0, rel=1e-10)  # all the source leaves there


def test_fft_takes_a_patch_of_the_face_type() -> None:
    """A dirichlet patch on a dirichlet face only changes the right-hand side: fft stays
    eligible and agrees with direct (both exact solves of the same system)."""
    spec = make_spec(grid={"cells": [8, 6, 4], "size": [1.0, 1.0, 1.0]},
                     boundary={"x_min": {"type": "dirichlet", "value": 0.0},
                               "x_max": {"type": "dirichlet", "value": 0.0}},
                     patch=[{"face": "x_min", "box": {"min": [0, 0, 0], "max": [0, 0.5, 0.5]},
                             "type": "dirichlet", "value": 2.0}])
    problem = build_problem(spec)
    assert problem.faces["x_min"].kind == "dirichlet" and fft_eligibility(problem) is None
    u_fft, _ = _solve(spec, "fft")
    u_direct, _ = _solve(spec, "direct")
    np.testing.assert_allclose(u_fft, u_direct, rtol=0, atol=1e-11)


def test_a_sweep_over_a_patch_total() -> None:
    table = make_table(boundary={"z_min": {"type": "dirichlet", "value": 0.0}},
                       patch=[{"face": "z_max", "box": {"min": [0, 0, 1], "max": [1, 1, 1]},
                               "type": "neumann", "total": 1.0}],
                       sweep={"patch.0.total": [1.0, 2.0, 4.0]})
    variants, info = expand(table)
    assert info is not None and info.size == 3
    for v, total in zip(variants, (1.0, 2.0, 4.0)):
        spec = parse_job(v.table)
        assert spec.patch[0].total == total
        u, problem = solve_spec(spec)
        assert compute_balance(problem, u).patches[0].outflow == pytest.approx(-total, rel=1e-13)


# ---------------------------------------------------------------- exchange
def test_exchange_everywhere_gives_reference_plus_source_over_coefficient() -> None:
    """Insulated faces, f uniform, exchange c to reference T_r in every cell: each cell's
    balance f V + c V (T_r - u) = 0 gives u = T_r + f / c exactly (closed form)."""
    f, c, ref = 2.0e5, 400.0, 300.0
    spec = make_spec(grid=GRADED, material={"value": "1 + x"}, source={"value": f},
                     exchange=[{"box": WHOLE, "coefficient": c, "reference": ref, "name": "film"}])
    for method in ("direct", "gmg", "amg"):
        u, problem = _solve(spec, method)
        assert not problem.gauge_mean_zero
        np.testing.assert_allclose(u, ref + f / c, rtol=1e-12)
        bal = compute_balance(problem, u)
        volume = 1.0 * 1.0 * 0.6
        assert bal.exchanges[0].outflow == pytest.approx(f * volume, rel=1e-10)
        assert bal.exchanges[0].cells == problem.grid.size
        assert bal.relative_imbalance < 1e-10


def test_exchange_conductance_is_spread_by_volume() -> None:
    """``conductance`` G for the whole region: each cell gets G V_cell / V_region, so with f
    uniform u = T_r + f V_region / G; the cells' conductances sum to G."""
    G, f, ref = 12.0, 30.0, -4.0
    spec = make_spec(grid=GRADED, source={"value": f},
                     exchange=[{"box": WHOLE, "conductance": G, "reference": ref}])
    u, problem = solve_spec(spec)
    e = problem.exchanges[0]
    assert e.conductance.sum() == pytest.approx(G, rel=1e-13)
    np.testing.assert_allclose(e.conductance, G * problem.grid.cell_volumes().ravel() / 0.6, rtol=1e-13)
    np.testing.assert_allclose(u, ref + f * 0.6 / G, rtol=1e-12)


def test_exchange_skips_held_cells_and_closes_the_balance() -> None:
    spec = make_spec(grid=GRADED, material={"value": 5.0}, source={"value": "100*x"},
                     boundary={"y_min": {"type": "robin", "coefficient": 8.0, "reference": 1.0}},
                     hold=[{"box": {"min": [0, 0, 0], "max": [0.3, 0.3, 0.3]}, "value": 2.0}],
                     exchange=[{"sphere": {"center": [0.3, 0.3, 0.3], "radius": 0.35},
                                "coefficient": "50*(1 + y)", "reference": "z"}])
    u, problem = _solve(spec, "direct")
    bal = compute_balance(problem, u)
    e = problem.exchanges[0]
    held_inside = int(problem.held.reshape(-1)[e.cells].sum())
    assert held_inside > 0 and bal.exchanges[0].cells == e.cells.size - held_inside
    assert bal.relative_imbalance < 1e-10


# ---------------------------------------------------------------- contact resistance
def _wall(method: str = "direct"):
    """Three layers along a graded z axis, two contact resistances, dirichlet on z_min/z_max."""
    L = (0.0016, 0.003, 0.001)
    k = (200.0, 15.0, 1.2)
    R = (2.5e-4, 7.0e-5)  # K m^2/W
    T0, T1 = 350.0, 300.0
    z1, z2 = L[0], L[0] + L[1]
    spec = make_spec(
        physics="heat",
        grid={"cells": [3, 2, "edges"], "size": [0.02, 0.01, "edges"], "edges": {"z": {"start": 0.0, "segments": [
            {"length": L[0], "cells": 5, "growth": 1.3},
            {"length": L[1], "cells": 8, "last": 0.0002},
            {"length": L[2], "cells": 4, "growth": 0.8}]}}},
        material={"value": k[0], "region": [
            {"box": {"min": [0, 0, z1], "max": [1, 1, z2]}, "value": k[1]},
            {"box": {"min": [0, 0, z2], "max": [1, 1, 1]}, "value": k[2]}]},
        boundary={"z_min": {"type": "dirichlet", "value": T0}, "z_max": {"type": "dirichlet", "value": T1}},
        contact=[{"axis": "z", "at": z1, "resistance": R[0], "name": "bond"},
                 {"axis": "z", "at": z2, "resistance": R[1]}],
    )
    u, problem = _solve(spec, method)
    return u, problem, L, k, R, (T0, T1)


def test_composite_wall_with_two_contact_resistances() -> None:
    """Series thermal resistances per unit area (Incropera and DeWitt, the composite wall and
    thermal contact resistance; from memory): q'' = (T0 - T1) / (L1/k1 + R1 + L2/k2 + R2 + L3/k3),
    and the temperature is linear in each layer and jumps by q'' R at each contact. The
    cell-centred scheme is exact for this piecewise-linear profile on any grading."""
    u, problem, L, k, R, (T0, T1) = _wall()
    resistance = L[0] / k[0] + R[0] + L[1] / k[1] + R[1] + L[2] / k[2]
    q = (T0 - T1) / resistance
    z = problem.grid.centres(2)
    z1, z2 = L[0], L[0] + L[1]
    exact = np.where(z < z1, T0 - q * z / k[0],
             np.where(z < z2, T0 - q * (L[0] / k[0] + R[0] + (z - z1) / k[1]),
                      T0 - q * (L[0] / k[0] + R[0] + L[1] / k[1] + R[1] + (z - z2) / k[2])))
    np.testing.assert_allclose(u, np.broadcast_to(exact, u.shape), rtol=0, atol=1e-9 * (T0 - T1))
    bal = compute_balance(problem, u, "W")
    area = 0.02 * 0.01
    assert bal.faces["z_max"] == pytest.approx((T0 - T1) / (resistance / area), rel=1e-9)
    assert -bal.faces["z_min"] == pytest.approx((T0 - T1) / (resistance / area), rel=1e-9)
    # the derived heat flux sees the contacts too: q'' along +z on every cell (1D conduction)
    from sevenfold.derived import flux

    qx, qy, qz = flux(problem, u)
    np.testing.assert_allclose(qz, q, rtol=1e-9)
    assert np.abs(qx).max() < 1e-9 * q and np.abs(qy).max() < 1e-9 * q


@pytest.mark.parametrize("method", ["gmg", "amg"])
def test_composite_wall_by_the_iterative_solvers(method: str) -> None:
    u, problem, *_ = _wall(method)
    u_direct, *_ = _wall("direct")
    np.testing.assert_allclose(u, u_direct, rtol=1e-9)


def test_contact_conductances_are_the_same_in_every_slab() -> None:
    """operator.conductances on x slabs tiles the whole grid's conductances, contacts included
    (the balance sums large grids slab by slab)."""
    spec = make_spec(grid=GRADED, material={"value": "1 + x*y"},
                     boundary={"x_min": {"type": "dirichlet", "value": 0.0}},
                     contact=[{"axis": "x", "at": float(build_problem(make_spec(grid=GRADED)).grid.edges[0][3]),
                               "resistance": 0.3},
                              {"axis": "y", "at": 0.45, "resistance": 0.1,
                               "box": {"min": [0.2, 0.0, 0.0], "max": [0.8, 1.0, 0.3]}},
                              {"axis": "z", "at": 0.2, "resistance": 0.2}])
    problem = build_problem(spec)
    full = conductances(problem)
    plain = conductances(build_problem(make_spec(grid=GRADED, material={"value": "1 + x*y"},
                                                 boundary={"x_min": {"type": "dirichlet", "value": 0.0}})))
    for a in range(3):
        assert np.count_nonzero(full[a] != plain[a]) > 0
    # the y contact touches only faces between y cells 2 and 3, with x and z centres in its box
    changed = np.argwhere(full[1] != plain[1])
    assert set(changed[:, 1]) == {2}
    for i0, i1 in ((0, 2), (2, 3), (3, 7)):
        part = conductances(problem, i0, i1)
        for a in range(3):
            np.testing.assert_array_equal(part[a], full[a][i0:i1])


# ---------------------------------------------------------------- all together
def test_solvers_agree_with_patches_exchange_and_contacts() -> None:
    spec = make_spec(
        grid=GRADED, material={"value": 10.0, "region": [{"box": {"min": [0, 0, 0], "max": [1, 1, 0.2]}, "value": 2.0}]},
        source={"value": 0.0},
        boundary={"z_min": {"type": "robin", "coefficient": 200.0, "reference": 300.0}},
        patch=[{"face": "z_max", "box": {"min": [0.3, 0.25, 0.6], "max": [0.7, 0.7, 0.6]},
                "type": "neumann", "total": 40.0, "name": "chip"},
               {"face": "z_max", "box": {"min": [0.0, 0.0, 0.6], "max": [0.2, 1.0, 0.6]},
                "type": "robin", "coefficient": 10.0, "reference": 310.0, "name": "air"}],
        exchange=[{"cylinder": {"center": [0.5, 0.5, 0.4], "radius": 0.2, "axis": "x", "length": 1.0},
                   "coefficient": 5.0e3, "reference": 290.0, "name": "channel"}],
        contact=[{"axis": "z", "at": 0.2, "resistance": 1e-3}],
    )
    u_direct, problem = _solve(spec, "direct")
    bal = compute_balance(problem, u_direct, "W")
    assert bal.relative_imbalance < 1e-10
    chip, air = bal.patches
    assert chip.outflow == pytest.approx(-40.0, rel=1e-13)
    assert air.outflow != 0.0 and bal.exchanges[0].outflow > 0
    for method in ("gmg", "amg"):
        u, _ = _solve(spec, method, rtol=1e-11)
        np.testing.assert_allclose(u, u_direct, rtol=0, atol=1e-7 * np.ptp(u_direct))


# ---------------------------------------------------------------- converge and report
WALL_JOB = """
name = "wall"
physics = "heat"
[grid]
cells = [2, 2, "edges"]
size = [0.02, 0.01, "edges"]
[grid.edges.z]
start = 0.0
segments = [{ length = 0.0016, cells = 2, growth = 1.3 }, { length = 0.003, cells = 3 },
            { length = 0.001, cells = 2, growth = 0.8 }]
[material]
value = 200.0
[[material.region]]
box = { min = [0.0, 0.0, 0.0016], max = [0.02, 0.01, 0.0046] }
value = 15.0
[[material.region]]
box = { min = [0.0, 0.0, 0.0046], max = [0.02, 0.01, 0.0056] }
value = 1.2
[boundary]
z_min = { type = "dirichlet", value = 350.0 }
z_max = { type = "neumann" }
[[patch]]
name = "cold"
face = "z_max"
box = { min = [0.0, 0.0, 0.0056], max = [0.02, 0.01, 0.0056] }
type = "dirichlet"
value = 300.0
[[contact]]
name = "bond"
axis = "z"
at = 0.0016
resistance = 2.5e-4
[[contact]]
axis = "z"
at = 0.0046
resistance = 7.0e-5
[solver]
method = "direct"
"""


def test_converge_keeps_patches_and_contacts_on_a_graded_grid(tmp_path) -> None:
    """Each level splits every cell in two, so the contact planes stay cell edges and the patch
    keeps its faces; the composite wall's heat flow is exact on every level (series closed
    form, as above), so the study finds the patch's outflow unchanged between levels."""
    from sevenfold.study import run_study

    job = tmp_path / "wall.toml"
    job.write_text(WALL_JOB)
    study = run_study(job, levels=3, ratio=2.0, folder=tmp_path / "study")
    assert [lv.cells[2] for lv in study.levels] == [7, 14, 28]
    resistance = 0.0016 / 200 + 2.5e-4 + 0.003 / 15 + 7.0e-5 + 0.001 / 1.2
    flow = 50.0 / resistance * 0.02 * 0.01
    for lv in study.levels:
        assert lv.values["outflow_patch_cold"] == pytest.approx(flow, rel=1e-9)
        assert lv.values["outflow_z_max"] == pytest.approx(flow, rel=1e-9)
    assert study.results["outflow_patch_cold"].f1 == pytest.approx(flow, rel=1e-9)


def test_converge_with_a_total_patch_and_an_exchange(tmp_path) -> None:
    """A uniform grid refined by 2: the total patch's outflow is the total on every level and
    the exchange's outflow converges (observed order near 2: a second-order scheme)."""
    from sevenfold.study import run_study

    job = tmp_path / "spot.toml"
    job.write_text("""
name = "spot"
[grid]
cells = [4, 4, 4]
size = [1.0, 1.0, 1.0]
[material]
value = 1.0
[boundary]
z_min = { type = "dirichlet", value = 0.0 }
[[patch]]
name = "heater"
face = "z_max"
box = { min = [0.25, 0.25, 1.0], max = [0.75, 0.75, 1.0] }
type = "neumann"
total = 5.0
[[exchange]]
name = "sink"
box = { min = [0.0, 0.0, 0.5], max = [1.0, 1.0, 1.0] }
conductance = 20.0
reference = 0.0
[solver]
method = "direct"
""")
    study = run_study(job, levels=3, ratio=2.0, folder=tmp_path / "study")
    for lv in study.levels:
        assert lv.values["outflow_patch_heater"] == pytest.approx(-5.0, rel=1e-12)
    r = study.results["outflow_exchange_sink"]
    assert 0 < r.f1 < 5.0 and r.order == pytest.approx(2.0, abs=0.5)


def test_report_draws_patches_and_exchanges(tmp_path) -> None:
    from sevenfold.report import write_report
    from sevenfold.report_slices import placed_outlines
    from sevenfold.runner import run_job

    job = tmp_path / "spread.toml"
    job.write_text("""
name = "spread"
physics = "heat"
[grid]
cells = [8, 16, 4]
size = [0.04, 0.04, 0.004]
[material]
value = 390.0
[boundary]
z_min = { type = "robin", coefficient = 2500.0, reference = 300.0 }
[[patch]]
name = "module"
face = "z_max"
box = { min = [0.01, 0.01, 0.004], max = [0.03, 0.03, 0.004] }
type = "neumann"
total = 20.0
[[exchange]]
name = "channel"
cylinder = { center = [0.02, 0.02, 0.002], radius = 0.0015, axis = "x", length = 0.04 }
coefficient = 1e5
reference = 290.0
""")
    result = run_job(job)
    index = write_report(result.output, tmp_path / "report")
    page = index.read_text()
    assert "of which through patch module" in page and "out into exchange channel" in page
    spec = result.plan.spec
    # on the z mid-plane: the module patch seen from above (a rectangle) and the channel cut
    # along its axis (a rectangle); on the x mid-plane: the patch as a segment on z = top and
    # the channel as a circle
    z_plane = placed_outlines(spec, 2, 0.002, result_bounds := [(0.0, 0.04), (0.0, 0.04), (0.0, 0.004)])
    kinds = {(o.label, o.kind) for o in z_plane}
    assert kinds == {("module", "rectangle"), ("channel", "rectangle")}
    x_plane = placed_outlines(spec, 0, 0.02, result_bounds)
    assert {(o.label, o.kind) for o in x_plane} == {("module", "segment"), ("channel", "circle")}
    assert (tmp_path / "report" / "slices.png").stat().st_size > 10_000


# ---------------------------------------------------------------- drains (only = "outflow")
DRAIN = dict(
    grid=GRADED, material={"value": 2.0},
    source={"value": "40*x"},
    boundary={"x_min": {"type": "dirichlet", "value": 0.0}},
    exchange=[{"box": {"min": [0, 0, 0], "max": [1, 1, 0.3]}, "coefficient": 30.0,
               "reference": 1.0, "only": "outflow", "name": "drain"}],
)


def test_a_drain_acts_only_where_u_exceeds_its_reference() -> None:
    """The solution must satisfy A u = b - G max(u - reference, 0) cell by cell, with A and b
    the operator without the drain (assembled and checked with scipy); the drain acts in part
    of its region only, so the switch is really exercised."""
    import scipy.sparse as sp
    import scipy.sparse.linalg as sla

    from sevenfold.conditions import settle_drains
    from sevenfold.operator import assemble

    spec = make_spec(**DRAIN)
    problem = build_problem(spec)
    solver = spec.solver.model_copy(update={"method": "direct"})
    final, u, record, rounds = settle_drains(problem, lambda p: solve_problem(p, solver, "direct"))
    assert rounds >= 2 and "settled after" in record.notes
    e, e0 = final.exchanges[0], problem.exchanges[0]
    above = u.reshape(-1)[e.cells] > e.reference
    assert above.any() and not above.all()
    np.testing.assert_array_equal(e.active, above)
    plain = assemble(build_problem(make_spec(**{k: v for k, v in DRAIN.items() if k != "exchange"})))
    g = np.zeros(problem.grid.size)
    g[e0.cells] = e0.conductance
    ref = np.zeros(problem.grid.size)
    ref[e0.cells] = e0.reference
    x = u.reshape(-1)
    F = plain.matrix @ x - plain.rhs + g * np.maximum(x - ref, 0.0)
    assert np.abs(F).max() < 1e-10 * np.abs(plain.rhs).max()
    # the same as a linear solve with the final acting cells (scipy's own LU)
    acting = np.zeros(g.size)
    acting[e.cells[e.active]] = 1.0
    y = sla.spsolve((plain.matrix + sp.diags(g * acting)).tocsc(), plain.rhs + g * acting * ref)
    np.testing.assert_allclose(x, y, rtol=1e-10, atol=1e-12)
    bal = compute_balance(final, u)
    assert bal.exchanges[0].acting == int(above.sum()) and bal.exchanges[0].outflow > 0
    assert bal.relative_imbalance < 1e-10


def test_a_drain_through_the_runner_with_gmg(tmp_path) -> None:
    import json

    from sevenfold.queue.tomlwrite import dumps
    from sevenfold.runner import run_job

    table = make_table(**DRAIN, solver={"method": "gmg", "rtol": 1e-10})
    job = tmp_path / "drain.toml"
    job.write_text(dumps(table))
    result = run_job(job)
    import zarr

    attrs = zarr.open_group(str(result.output), mode="r").attrs
    assert attrs["solver"]["drain_solves"] >= 2
    u_gmg = np.asarray(zarr.open_group(str(result.output), mode="r")["u"][...])
    spec = make_spec(**DRAIN)
    solver = spec.solver.model_copy(update={"method": "direct"})
    from sevenfold.conditions import settle_drains

    _, u_direct, _, _ = settle_drains(build_problem(spec), lambda p: solve_problem(p, solver, "direct"))
    np.testing.assert_allclose(u_gmg, u_direct, rtol=1e-7)
    drain = json.loads(json.dumps(attrs["balance"]))["exchanges"][0]
    assert drain["acting"] > 0


def test_a_drain_alone_cannot_fix_the_problem() -> None:
    with pytest.raises(JobError, match="cannot be the only condition"):
        build_problem(make_spec(**{**DRAIN, "boundary": {}}))


def test_check_lists_what_each_table_selected(tmp_path, capsys) -> None:
    from sevenfold.cli import main

    job = tmp_path / "wall.toml"
    job.write_text(WALL_JOB)
    assert main(["check", str(job)]) == 0
    text = " ".join(capsys.readouterr().out.split())
    assert "cold: 4 faces of z_max, 0.0002 m^2" in text
    assert "bond: 4 faces on z = 0.0016, 0.0002 m^2" in text
