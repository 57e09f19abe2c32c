"""[units] tables: conversions to SI on reading, the echo by check, plausibility warnings."""

from __future__ import annotations

import copy
from pathlib import Path

import numpy as np
import pytest
import zarr
from conftest import make_spec, make_table

from sevenfold.cautions import plausibility_warnings
from sevenfold.cli import main
from sevenfold.problem import build_problem
from sevenfold.runner import run_job
from sevenfold.spec import parse_job
from sevenfold.units import YEAR, convert_units, unit_notes, wrap_expression


def test_lengths_in_mm_are_metres_after_reading() -> None:
    table = make_table(
        units={"length": "mm"},
        grid={"cells": [4, 2, "edges"], "size": [40, 2.0, "edges"], "origin": [-10, 0, "edges"],
              "edges": {"z": {"start": 0.0, "segments": [{"length": 1.5, "cells": 3},
                                                         {"length": 2.0, "cells": 2, "first": 0.8}]}}},
        material={"value": 1.0, "region": [{"sphere": {"center": [0, 1, 1], "radius": 0.5}, "value": 2.0}]},
        hold=[{"cylinder": {"center": [5, 1, 1], "radius": 0.4, "axis": "z", "length": 1.0}, "value": 1.0}],
        probe=[{"name": "p", "point": [1, 1, 1]},
               {"name": "l", "line": {"start": [-10, 0, 0], "end": [30, 2, 3.5], "points": 3}}],
    )
    spec = parse_job(table)
    assert spec.grid.size == (pytest.approx(0.04), pytest.approx(0.002), "edges")
    assert spec.grid.origin == (pytest.approx(-0.01), 0.0, "edges")
    z = spec.grid.edges.z
    assert z.segments[0].length == pytest.approx(1.5e-3)
    assert z.segments[1].first == pytest.approx(0.8e-3)
    assert spec.material.region[0].sphere.radius == pytest.approx(5e-4)
    assert spec.hold[0].cylinder.center == pytest.approx((5e-3, 1e-3, 1e-3))
    assert spec.hold[0].cylinder.length == pytest.approx(1e-3)
    assert spec.probe[0].point == pytest.approx((1e-3, 1e-3, 1e-3))
    assert spec.probe[1].line.end == pytest.approx((0.03, 0.002, 0.0035))
    assert spec.grid.cells == (4, 2, "edges") and spec.probe[1].line.points == 3  # counts unchanged
    (note,) = unit_notes(spec)
    assert note.startswith("length: mm -> m (x 0.001): grid.size, grid.origin, grid.edges.z.start")
    assert "hold.0.cylinder" in note and "probe.1.line.end" in note
    assert "units" not in spec.model_dump()  # the spec is SI; the stored job has no [units]
    assert table["grid"]["size"] == [40, 2.0, "edges"]  # the caller's table is left alone


def test_an_expression_in_mm_is_the_same_field_as_its_si_form() -> None:
    mm = make_spec(units={"length": "mm"}, grid={"cells": [5, 4, 3], "size": [50, 40, 30]},
                   material={"expression": "1 + x/10 + y*z/100"},
                   boundary={"x_min": {"type": "dirichlet", "value": "sin(y/40)"}})
    si = make_spec(grid={"cells": [5, 4, 3], "size": [0.05, 0.04, 0.03]},
                   material={"expression": "1 + 1000*x/10 + 1000*y*1000*z/100"},
                   boundary={"x_min": {"type": "dirichlet", "value": "sin(1000*y/40)"}})
    a, b = build_problem(mm), build_problem(si)
    assert np.allclose(a.coefficient[0], b.coefficient[0], rtol=1e-12)
    assert np.allclose(a.faces["x_min"].value, b.faces["x_min"].value, rtol=1e-12)
    assert "material.expression (x, y, z in mm)" in unit_notes(mm)[0]


def test_wrap_expression_keeps_function_names() -> None:
    assert wrap_expression("sin(x) + exp(-z)", coordinates=1000.0) == "sin(x * 1000.0) + exp(-(z * 1000.0))"
    assert wrap_expression("20 + x", 1.0, 273.15) == "(20 + x) + 273.15"
    assert wrap_expression("x +", coordinates=1000.0) == "x +"  # left for validation to refuse


def test_celsius_in_heat_jobs() -> None:
    spec = make_spec(physics="heat", units={"temperature": "degC"},
                     boundary={"x_min": {"type": "dirichlet", "value": 20},
                               "x_max": {"type": "robin", "coefficient": 10.0, "reference": "25 + 0*y"},
                               "z_min": {"type": "neumann", "flux": 100.0}},
                     hold=[{"box": {"min": [0, 0, 0], "max": [0.3, 0.3, 0.3]}, "value": 85.0}])
    assert spec.boundary.x_min.value == pytest.approx(293.15)
    assert spec.boundary.x_max.coefficient == 10.0  # W/(m^2 K) = W/(m^2 degC)
    assert spec.boundary.z_min.flux == 100.0
    assert spec.hold[0].value == pytest.approx(358.15)
    problem = build_problem(spec)
    assert np.allclose(problem.faces["x_max"].value, 298.15)
    assert unit_notes(spec) == ("temperature: degC -> K (+ 273.15): boundary.x_min.value, "
                                "boundary.x_max.reference, hold.0.value",)


def test_groundwater_units() -> None:
    spec = make_spec(physics="groundwater", units={"hydraulic_conductivity": "m/day", "recharge": "mm/year"},
                     material={"value": [8.64, 8.64, 0.864], "region": [
                         {"box": {"min": [0, 0, 0], "max": [0.5, 1, 1]}, "value": "86.4 + 0*x"}]},
                     boundary={"x_min": {"type": "dirichlet", "value": 10.0},
                               "z_max": {"type": "neumann", "flux": 300.0}})
    assert spec.material.value == pytest.approx((1e-4, 1e-4, 1e-5))
    assert spec.boundary.z_max.flux == pytest.approx(0.3 / YEAR)  # 300 mm/year
    assert spec.boundary.x_min.value == 10.0  # heads are lengths of the physics, never converted
    problem = build_problem(spec)
    assert problem.coefficient[0][0, 0, 0] == pytest.approx(1e-3)


def test_a_swept_job_converts_each_variant() -> None:
    from sevenfold.queue.sweep import expand

    table = make_table(physics="heat", units={"temperature": "degC"},
                       boundary={"x_min": {"type": "dirichlet", "value": 20.0}},
                       sweep={"boundary.x_min.value": [20.0, 40.0]})
    variants, _ = expand(table, "test")
    assert [parse_job(v.table).boundary.x_min.value for v in variants] == pytest.approx([293.15, 313.15])


JOB_MM = """
name = "units-job"
physics = "heat"
[units]
length = "mm"
temperature = "degC"
[grid]
cells = [10, 4, 4]
size = [100, 20, 20]
[material]
value = 15.0
[source]
value = 0.0
[[source.region]]
box = { min = [0, 0, 0], max = [10, 20, 20] }
total = 5.0
[boundary]
x_max = { type = "robin", coefficient = 200.0, reference = 25 }
[[probe]]
name = "mid"
point = [50, 10, 10]
[output]
path = "{name}.zarr"
"""


def test_check_echoes_and_the_result_is_si(tmp_path: Path, capsys) -> None:
    job = tmp_path / "job.toml"
    job.write_text(JOB_MM)
    assert main(["check", str(job)]) == 0
    text = " ".join(capsys.readouterr().out.split())
    assert "units length: mm -> m (x 0.001): grid.size, source.region.0.box, probe.0.point" in text
    assert "units temperature: degC -> K (+ 273.15): boundary.x_max.reference" in text
    result = run_job(job)
    attrs = zarr.open_group(str(result.output), mode="r").attrs
    assert attrs["units"]["solution"] == "K" and attrs["units"]["length"] == "m"
    assert attrs["job"]["grid"]["size"] == pytest.approx([0.1, 0.02, 0.02])
    assert len(attrs["input_units"]) == 2
    si = JOB_MM.replace('length = "mm"\ntemperature = "degC"\n', "").replace("[100, 20, 20]", "[0.1, 0.02, 0.02]")
    si = si.replace("[10, 20, 20]", "[0.01, 0.02, 0.02]").replace("[50, 10, 10]", "[0.05, 0.01, 0.01]")
    si = si.replace("reference = 25", "reference = 298.15").replace("{name}.zarr", "si.zarr")
    (tmp_path / "si.toml").write_text(si)
    ref = run_job(tmp_path / "si.toml")
    a = zarr.open_group(str(result.output), mode="r")["temperature"][...]
    b = zarr.open_group(str(ref.output), mode="r")["temperature"][...]
    assert np.allclose(a, b, rtol=1e-12)
    # the heat leaves at 298.15 K: the headline's resistance from the heated end to the face
    # is L'/(kA) + 1/(hA) with L' = 0.1 - 0.005 m (plane wall, from memory)
    (r,) = attrs["headline"]["thermal_resistances"]
    A = 0.02 * 0.02
    assert r["resistance"] == pytest.approx(0.095 / (15 * A) + 1 / (200 * A), rel=1e-6)


# ---------------------------------------------------------------- plausibility
def _warnings(**kw):
    spec = make_spec(**kw)
    return plausibility_warnings(spec, build_problem(spec))


def test_permittivity_below_one_is_flagged() -> None:
    base = dict(physics="electrostatics", boundary={"x_min": {"type": "dirichlet", "value": 0.0}})
    (w,) = _warnings(material={"value": 1.0, "region": [
        {"box": {"min": [0, 0, 0], "max": [0.5, 1, 1]}, "value": 8.85e-12}]}, **base)
    assert "relative permittivity 8.85e-12 is below 1" in w
    assert _warnings(material={"value": 1.0}, **base) == []


def test_hydraulic_conductivity_above_one_m_per_s_is_flagged() -> None:
    base = dict(physics="groundwater", boundary={"x_min": {"type": "dirichlet", "value": 0.0}})
    (w,) = _warnings(material={"value": 20.0}, **base)
    assert "hydraulic conductivity 20 m/s is above 1 m/s" in w and "m/day" in w
    assert _warnings(material={"value": 1e-3}, **base) == []


def test_celsius_reference_next_to_kelvin_holds_is_flagged() -> None:
    hold = [{"box": {"min": [0, 0, 0], "max": [0.3, 0.3, 0.3]}, "value": 350.0}]
    (w,) = _warnings(physics="heat", hold=hold,
                     boundary={"z_max": {"type": "robin", "coefficient": 10.0, "reference": 25.0}})
    assert w.startswith("boundary.z_max.reference: 25 K next to holds at up to 350 K looks like degrees Celsius")
    assert _warnings(physics="heat", hold=hold,
                     boundary={"z_max": {"type": "robin", "coefficient": 10.0, "reference": 298.15}}) == []
    # a temperature-rise job (everything near 0) is not flagged
    assert _warnings(physics="heat", hold=[dict(hold[0], value=40.0)],
                     boundary={"z_max": {"type": "robin", "coefficient": 10.0, "reference": 0.0}}) == []


def test_convert_units_without_a_units_table_returns_the_table() -> None:
    table = make_table()
    same, notes = convert_units(table)
    assert same is table and notes == ()
    si, notes = convert_units(dict(copy.deepcopy(table), units={"length": "m"}))
    assert "units" not in si and notes == ()


def test_patches_exchanges_contacts_and_wells_are_converted() -> None:
    heat = make_spec(physics="heat", units={"length": "mm", "temperature": "degC"},
                     grid={"cells": [4, 4, 4], "size": [100, 100, 100]},
                     boundary={"x_min": {"type": "dirichlet", "value": 20.0}},
                     patch=[{"face": "z_max", "box": {"min": [0, 0, 100], "max": [50, 50, 100]},
                             "type": "robin", "coefficient": 10.0, "reference": 30.0}],
                     exchange=[{"name": "ch", "cylinder": {"center": [50, 50, 50], "radius": 10, "axis": "x",
                                                         "length": 100}, "coefficient": 1e4, "reference": 15.0}],
                     contact=[{"axis": "z", "at": 50, "resistance": 1e-4}])
    assert heat.patch[0].box.max == pytest.approx((0.05, 0.05, 0.1))
    assert heat.patch[0].reference == pytest.approx(303.15) and heat.patch[0].coefficient == 10.0
    assert heat.exchange[0].cylinder.radius == pytest.approx(0.01) and heat.exchange[0].reference == pytest.approx(288.15)
    assert heat.exchange[0].coefficient == 1e4 and heat.contact[0].at == pytest.approx(0.05)
    assert heat.contact[0].resistance == 1e-4
    water = make_spec(physics="groundwater", units={"length": "cm", "recharge": "mm/day"},
                      grid={"cells": [4, 4, 4], "size": [1000, 1000, 1000]},
                      boundary={"x_min": {"type": "dirichlet", "value": 10.0}},
                      patch=[{"face": "z_max", "box": {"min": [0, 0, 1000], "max": [500, 1000, 1000]},
                              "type": "neumann", "flux": 2.0}],
                      well=[{"name": "w", "x": 370, "y": 370, "top": 900, "bottom": 300, "radius": 10,
                             "head": 9.0}])
    assert water.patch[0].flux == pytest.approx(2e-3 / 86400)
    w = water.well[0]
    assert (w.x, w.top, w.bottom, w.radius) == pytest.approx((3.7, 9.0, 3.0, 0.1)) and w.head == 9.0
