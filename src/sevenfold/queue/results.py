"""The numbers of finished results side by side: ``sevenfold table`` (a sweep's parameters
against what each job's result holds).

Everything comes from the result's group attributes, read robustly: the solver's iterations
and final residual, the balance (source, outflow per face, inflow or charge per hold,
imbalance), each probe (a point's value, a line's min and max), and any other numeric
attribute a result carries (``<key>.<path>``, e.g. headline numbers), so results written by
other versions still give what they have. The solution's minimum and maximum are read from
the array itself, a slab at a time. Only zarr is imported, never the solver.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

# Attributes that are not results, or are read by their own rule below.
_SKIP = {"job", "units", "seconds", "queue", "sevenfold_version", "complete", "gauge", "physics", "solution",
         "solver", "balance", "probes"}
_SLAB_CELLS = 1 << 22  # cells read at a time for the solution's minimum and maximum


def _number(value: Any) -> float | None:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    return float(value)


def _flatten(prefix: str, value: Any, out: dict[str, float]) -> None:
    """Numeric leaves of nested attributes as ``prefix.key...``; a list of named tables is
    keyed by their names."""
    v = _number(value)
    if v is not None:
        out[prefix] = v
    elif isinstance(value, dict):
        for k, item in value.items():
            if k != "index":
                _flatten(f"{prefix}.{k}", item, out)
    elif isinstance(value, list):
        for i, item in enumerate(value):
            name = item.get("name") if isinstance(item, dict) else None
            _flatten(f"{prefix}.{name if isinstance(name, str) else i}", item, out)


def _extremes(array: Any) -> tuple[float, float] | None:
    shape = tuple(array.shape)
    if not shape or 0 in shape:
        return None
    per = max(1, math.prod(shape[1:]))
    step = max(1, _SLAB_CELLS // per)
    lo, hi = math.inf, -math.inf
    for i0 in range(0, shape[0], step):
        block = array[i0:i0 + step]
        lo, hi = min(lo, float(block.min())), max(hi, float(block.max()))
    return lo, hi


def result_numbers(output: str | Path) -> dict[str, float] | None:
    """The numbers of the finished result at ``output`` by column name; None when there is
    no complete result there."""
    import zarr

    try:
        group = zarr.open_group(store=str(output), mode="r")
        attrs = dict(group.attrs)
    except Exception:  # missing, unreadable or not a zarr group: no numbers
        return None
    if not attrs.get("complete"):
        return None
    out: dict[str, float] = {}
    solution = attrs.get("solution")
    if isinstance(solution, str):
        try:
            ext = _extremes(group[solution])
        except Exception:
            ext = None
        if ext is not None:
            out[f"{solution}.min"], out[f"{solution}.max"] = ext
    solver = attrs.get("solver") or {}
    for key in ("iterations", "final_relative_residual"):
        v = _number(solver.get(key)) if isinstance(solver, dict) else None
        if v is not None:
            out[key] = v
    balance = attrs.get("balance")
    if isinstance(balance, dict):
        if _number(balance.get("source")) is not None:
            out["source"] = float(balance["source"])
        for face, v in (balance.get("faces") or {}).items():
            if _number(v) is not None:
                out[f"out.{face}"] = float(v)
        for h in balance.get("holds") or []:
            if not isinstance(h, dict):
                continue
            charge, inflow = _number(h.get("charge")), _number(h.get("inflow"))
            if charge is not None:
                out[f"charge.{h.get('name')}"] = charge
            elif inflow is not None:
                out[f"into.{h.get('name')}"] = inflow
        for key in ("imbalance", "relative_imbalance"):
            if _number(balance.get(key)) is not None:
                out[key] = float(balance[key])
    for p in attrs.get("probes") or []:
        if not isinstance(p, dict) or not isinstance(p.get("name"), str):
            continue
        lo, hi = _number(p.get("min")), _number(p.get("max"))
        if p.get("kind") == "point" and lo is not None:
            out[f"probe.{p['name']}"] = lo
        else:
            if lo is not None:
                out[f"probe.{p['name']}.min"] = lo
            if hi is not None:
                out[f"probe.{p['name']}.max"] = hi
    for key, value in attrs.items():
        if key not in _SKIP:
            _flatten(key, value, out)
    return out


def sweep_table(jobs: list[Any]) -> tuple[list[str], list[dict[str, Any]]]:
    """Columns and rows of ``sevenfold table``: id, name, state, each swept key, then every
    number any finished job's result has (first seen first). ``jobs`` are queue Jobs."""
    keys: dict[str, None] = {}
    numbers: dict[str, None] = {}
    rows = []
    for j in jobs:
        for k in (j.variant or {}):
            keys.setdefault(k)
        nums = result_numbers(j.output) if j.state == "done" else None
        for k in nums or {}:
            numbers.setdefault(k)
        rows.append({"id": j.id, "name": j.name, "state": j.state, **(j.variant or {}), **(nums or {})})
    columns = ["id", "name", "state", *keys, *(n for n in numbers if n not in keys)]
    return columns, rows
