"""Practitioner units in job files: a ``[units]`` table converted to SI on reading.

The conversion works on the raw TOML table before validation (as ``[sweep]`` does), so
everything after it - the spec, the solve, the result - is SI. ``parse_job`` removes the
``[units]`` table, converts, validates, and keeps a note of each conversion on the spec
(:func:`unit_notes`) for ``check`` to echo and the result's ``input_units`` attribute::

    [units]
    length = "mm"                       # m (default), cm, mm, um
    temperature = "degC"                # K (default), degC           - heat only
    hydraulic_conductivity = "m/day"    # m/s (default), cm/s, m/day  - groundwater only
    recharge = "mm/year"                # m/s (default), mm/day, mm/year - groundwater only

Which keys each one converts (and nothing else):

* ``length``: ``grid.size``, ``grid.spacing``, ``grid.origin``, ``grid.edges.x/y/z`` (edge
  lists; segments' ``start``, ``length``, ``first``, ``last``); every shape (``box.min/max``,
  ``sphere.center/radius``, ``cylinder.center/radius/length``) of ``material.region``,
  ``source.region``, ``hold`` and ``exchange``; ``patch.box``, ``contact.box``, ``contact.at``;
  ``well.x/y/top/bottom/radius``; ``probe.point`` and ``probe.line.start/end``; and in every
  expression the coordinates x, y, z mean that unit (``x`` is rewritten to ``(x * 1000.0)``
  for mm). Coefficients, sources and fluxes keep their SI units per metre.
* ``temperature``: ``boundary.<face>.value`` of dirichlet faces, ``boundary.<face>.reference``
  of robin faces, the same of dirichlet and robin patches, ``hold.value``,
  ``exchange.reference``; expressions become ``(expr) + 273.15``. Conductivity,
  Robin coefficients and fluxes are per kelvin and need no change.
* ``hydraulic_conductivity``: ``material.value``, ``material.expression`` and
  ``material.region.value`` (numbers, expressions and [kx, ky, kz] lists).
* ``recharge``: ``boundary.<face>.flux`` of neumann faces and ``patch.flux`` of neumann
  patches (a flux per unit area, m/s).

Everything else stays SI: totals, rates, exchange coefficients and conductances, contact
resistances, and groundwater heads (``well.head``, dirichlet values, hold values).

A year is the Julian year, 365.25 days. Arrays read from files (``material.file``, a
``.npy`` of edges) cannot be converted here: under a non-SI unit for them the job is refused.
Nothing here does I/O.
"""

from __future__ import annotations

import ast
import copy
from typing import Any, Callable

from .errors import JobError

DAY = 86_400.0  # s
YEAR = 365.25 * DAY  # s, Julian year
CELSIUS_OFFSET = 273.15  # K

# unit -> (factor, offset): SI = value * factor + offset
UNITS: dict[str, dict[str, tuple[float, float]]] = {
    "length": {"m": (1.0, 0.0), "cm": (1e-2, 0.0), "mm": (1e-3, 0.0), "um": (1e-6, 0.0)},
    "temperature": {"K": (1.0, 0.0), "degC": (1.0, CELSIUS_OFFSET)},
    "hydraulic_conductivity": {"m/s": (1.0, 0.0), "cm/s": (1e-2, 0.0), "m/day": (1.0 / DAY, 0.0)},
    "recharge": {"m/s": (1.0, 0.0), "mm/day": (1e-3 / DAY, 0.0), "mm/year": (1e-3 / YEAR, 0.0)},
}
SI = {"length": "m", "temperature": "K", "hydraulic_conductivity": "m/s", "recharge": "m/s"}
PHYSICS_OF = {"temperature": "heat", "hydraulic_conductivity": "groundwater", "recharge": "groundwater"}
SHAPE_LENGTHS = {"box": ("min", "max"), "sphere": ("center", "radius"), "cylinder": ("center", "radius", "length")}
FACES = ("x_min", "x_max", "y_min", "y_max", "z_min", "z_max")


def _is_number(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


class _Converter:
    """Converts values in place in a table, recording the dotted keys it touched."""

    def __init__(self, factor: float, offset: float, coordinates: float | None) -> None:
        self.factor, self.offset, self.coordinates = factor, offset, coordinates
        self.keys: list[str] = []

    def value(self, v: Any) -> Any:
        """A number, an expression, or a list of them, converted."""
        if _is_number(v):
            return v * self.factor + self.offset
        if isinstance(v, str):
            return wrap_expression(v, self.factor, self.offset)
        if isinstance(v, list):
            return [self.value(c) for c in v]
        return v  # anything else is left for validation to refuse

    def at(self, table: Any, key: Any, where: str) -> None:
        if isinstance(table, dict) and key in table:
            table[key] = self.value(table[key])
            self.keys.append(where)


def wrap_expression(text: str, factor: float = 1.0, offset: float = 0.0,
                    coordinates: float | None = None) -> str:
    """``text`` with x, y, z replaced by ``(x * coordinates)`` (coordinates given in a unit of
    1/``coordinates`` metres), then scaled to ``(expr) * factor + offset``. Text that does not
    parse is returned unchanged, for validation to refuse with the user's own words."""
    try:
        tree = ast.parse(text.strip(), mode="eval")
    except SyntaxError:
        return text
    if coordinates is not None and coordinates != 1.0:
        class _Scale(ast.NodeTransformer):
            def visit_Name(self, node: ast.Name) -> ast.AST:
                if node.id in ("x", "y", "z"):
                    return ast.BinOp(ast.Name(node.id, ast.Load()), ast.Mult(), ast.Constant(coordinates))
                return node

        tree = ast.fix_missing_locations(_Scale().visit(tree))
    out = ast.unparse(tree)
    if factor != 1.0:
        out = f"({out}) * {factor!r}"
    if offset != 0.0:
        out = f"({out}) + {offset!r}"
    return out


def _regions(table: dict[str, Any]) -> list[tuple[str, dict[str, Any]]]:
    """(dotted key, table) of every shaped thing: material and source regions, holds."""
    out = []
    for section in ("material", "source"):
        sub = table.get(section)
        regions = sub.get("region") if isinstance(sub, dict) else None
        if isinstance(regions, list):
            out += [(f"{section}.region.{i}", r) for i, r in enumerate(regions) if isinstance(r, dict)]
    for key in ("hold", "exchange"):
        items = table.get(key)
        if isinstance(items, list):
            out += [(f"{key}.{i}", h) for i, h in enumerate(items) if isinstance(h, dict)]
    return out


def _items(table: dict[str, Any], key: str) -> list[tuple[str, dict[str, Any]]]:
    """(dotted key, table) of each entry of an array of tables (``[[patch]]``, ...)."""
    items = table.get(key)
    return [(f"{key}.{i}", t) for i, t in enumerate(items) if isinstance(t, dict)] if isinstance(items, list) else []


def _expression_sites(table: dict[str, Any]) -> list[tuple[dict[str, Any], str, str]]:
    """(container, key, dotted key) of every value that may be an expression in x, y, z."""
    out = []
    for section in ("material", "source"):
        sub = table.get(section)
        if not isinstance(sub, dict):
            continue
        for key in ("value", "expression"):
            if key in sub:
                out.append((sub, key, f"{section}.{key}"))
        for where, r in _regions({section: sub}):
            if "value" in r:
                out.append((r, "value", f"{where}.value"))
    boundary = table.get("boundary")
    if isinstance(boundary, dict):
        for face in FACES:
            cond = boundary.get(face)
            if isinstance(cond, dict):
                for key in ("value", "flux", "coefficient", "reference"):
                    if key in cond:
                        out.append((cond, key, f"boundary.{face}.{key}"))
    for where, t in _items(table, "patch") + _items(table, "exchange"):
        for key in ("value", "flux", "coefficient", "reference"):
            if key in t:
                out.append((t, key, f"{where}.{key}"))
    return out


def _map_strings(v: Any, fn: Callable[[str], str]) -> Any:
    if isinstance(v, str):
        return fn(v)
    if isinstance(v, list):
        return [_map_strings(c, fn) for c in v]
    return v


def _lengths(table: dict[str, Any], unit: str, factor: float) -> list[str]:
    conv = _Converter(factor, 0.0, None)
    grid = table.get("grid")
    if isinstance(grid, dict):
        for key in ("size", "spacing", "origin"):
            if isinstance(grid.get(key), list):
                grid[key] = [c * factor if _is_number(c) else c for c in grid[key]]
                conv.keys.append(f"grid.{key}")
        edges = grid.get("edges")
        if isinstance(edges, dict):
            for axis in ("x", "y", "z"):
                e = edges.get(axis)
                where = f"grid.edges.{axis}"
                if isinstance(e, str):
                    raise JobError(f"edges read from a file are in metres; with units.length = {unit!r} "
                                   "give them as a list or segments, or write the file in metres and "
                                   "drop units.length", where)
                if isinstance(e, list):
                    edges[axis] = [c * factor if _is_number(c) else c for c in e]
                    conv.keys.append(where)
                elif isinstance(e, dict):
                    conv.at(e, "start", f"{where}.start")
                    for i, seg in enumerate(e.get("segments") or []):
                        for key in ("length", "first", "last"):
                            conv.at(seg, key, f"{where}.segments.{i}.{key}")
    for where, region in _regions(table):
        for shape, keys in SHAPE_LENGTHS.items():
            s = region.get(shape)
            if isinstance(s, dict):
                for key in keys:
                    if key in s:
                        s[key] = conv.value(s[key])
                conv.keys.append(f"{where}.{shape}")
    for where, t in _items(table, "patch") + _items(table, "contact"):
        box = t.get("box")
        if isinstance(box, dict):
            for key in ("min", "max"):
                if key in box:
                    box[key] = conv.value(box[key])
            conv.keys.append(f"{where}.box")
        if where.startswith("contact"):
            conv.at(t, "at", f"{where}.at")
    for where, t in _items(table, "well"):
        for key in ("x", "y", "top", "bottom", "radius"):
            conv.at(t, key, f"{where}.{key}")
    probes = table.get("probe")
    if isinstance(probes, list):
        for i, p in enumerate(probes):
            if not isinstance(p, dict):
                continue
            conv.at(p, "point", f"probe.{i}.point")
            line = p.get("line")
            if isinstance(line, dict):
                for key in ("start", "end"):
                    conv.at(line, key, f"probe.{i}.line.{key}")
    scale = 1.0 / factor
    for container, key, where in _expression_sites(table):
        before = container[key]
        container[key] = _map_strings(before, lambda t: wrap_expression(t, coordinates=scale))
        if container[key] != before:
            conv.keys.append(f"{where} (x, y, z in {unit})")
    return conv.keys


def _temperatures(table: dict[str, Any], factor: float, offset: float) -> list[str]:
    conv = _Converter(factor, offset, None)
    boundary = table.get("boundary")
    if isinstance(boundary, dict):
        for face in FACES:
            cond = boundary.get(face)
            if not isinstance(cond, dict):
                continue
            if cond.get("type") == "dirichlet":
                conv.at(cond, "value", f"boundary.{face}.value")
            elif cond.get("type") == "robin":
                conv.at(cond, "reference", f"boundary.{face}.reference")
    holds = table.get("hold")
    if isinstance(holds, list):
        for i, h in enumerate(holds):
            conv.at(h, "value", f"hold.{i}.value")
    for where, t in _items(table, "patch"):
        if t.get("type") == "dirichlet":
            conv.at(t, "value", f"{where}.value")
        elif t.get("type") == "robin":
            conv.at(t, "reference", f"{where}.reference")
    for where, t in _items(table, "exchange"):
        conv.at(t, "reference", f"{where}.reference")
    return conv.keys


def _conductivities(table: dict[str, Any], unit: str, factor: float) -> list[str]:
    conv = _Converter(factor, 0.0, None)
    material = table.get("material")
    if not isinstance(material, dict):
        return []
    if "file" in material:
        raise JobError(f"an array read from a file is in m/s; with units.hydraulic_conductivity = {unit!r} "
                       "give the material by value or expression, or write the file in m/s and drop "
                       "units.hydraulic_conductivity", "material.file")
    for key in ("value", "expression"):
        conv.at(material, key, f"material.{key}")
    for where, region in _regions({"material": material}):
        conv.at(region, "value", f"{where}.value")
    return conv.keys


def _recharges(table: dict[str, Any], factor: float) -> list[str]:
    conv = _Converter(factor, 0.0, None)
    boundary = table.get("boundary")
    if isinstance(boundary, dict):
        for face in FACES:
            cond = boundary.get(face)
            if isinstance(cond, dict) and cond.get("type") == "neumann":
                conv.at(cond, "flux", f"boundary.{face}.flux")
    for where, t in _items(table, "patch"):
        if t.get("type") == "neumann":
            conv.at(t, "flux", f"{where}.flux")
    return conv.keys


def convert_units(table: dict[str, Any]) -> tuple[dict[str, Any], tuple[str, ...]]:
    """The job table in SI, without its ``[units]`` table, and one note per converted unit
    (``"length: mm -> m (x 0.001): grid.size, hold.0.box"``). The input is not changed.
    Raises JobError (key ``units.<name>`` or the key that cannot be converted)."""
    if not isinstance(table, dict) or "units" not in table:
        return table, ()
    declared = table["units"]
    if not isinstance(declared, dict):
        raise JobError("must be a table, e.g. [units] with length = \"mm\"", "units")
    table = copy.deepcopy(table)
    del table["units"]
    physics = table.get("physics", "generic")
    notes = []
    for name, unit in declared.items():
        where = f"units.{name}"
        if name not in UNITS:
            raise JobError(f"unknown key; units may set {', '.join(UNITS)}", where)
        if not isinstance(unit, str) or unit not in UNITS[name]:
            raise JobError(f"{unit!r} is not a {name.replace('_', ' ')} unit sevenfold converts; use one of "
                           f"{', '.join(repr(u) for u in UNITS[name])}", where)
        need = PHYSICS_OF.get(name)
        if need is not None and isinstance(physics, str) and physics != need:
            raise JobError(f"applies to physics {need!r}, this job is {physics!r}; remove it", where)
        factor, offset = UNITS[name][unit]
        if (factor, offset) == (1.0, 0.0):
            continue
        if name == "length":
            keys = _lengths(table, unit, factor)
        elif name == "temperature":
            keys = _temperatures(table, factor, offset)
        elif name == "hydraulic_conductivity":
            keys = _conductivities(table, unit, factor)
        else:
            keys = _recharges(table, factor)
        how = f"+ {offset:g}" if offset else f"x {factor:.6g}"
        notes.append(f"{name}: {unit} -> {SI[name]} ({how}): " + (", ".join(keys) if keys else "no value given"))
    return table, tuple(notes)


def unit_notes(spec: Any) -> tuple[str, ...]:
    """The conversions a spec was read with (empty for SI jobs and specs not read from a file)."""
    return tuple(getattr(spec, "_unit_notes", None) or ())
