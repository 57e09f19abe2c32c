"""``[sweep]`` tables: one job file, one job per combination of the listed values.

The expansion works on the raw TOML table, before validation::

    [sweep]
    mode = "product"                           # or "zip"; default "product"
    "material.region.0.value" = [5.0, 10.0, 20.0]
    "solver.rtol" = [1e-6, 1e-8]

Each key is a dotted path into the job table; an integer part indexes an array of tables
(``material.region.0`` is the first ``[[material.region]]``) or an array (``grid.cells.0``).
Unquoted dotted keys (``material.value = [...]`` inside ``[sweep]``) mean the same. ``product``
makes every combination, ``zip`` pairs the i-th values of lists of equal length. The
``[sweep]`` table itself is removed; each variant is then validated as an ordinary job.
"""

from __future__ import annotations

import copy
import itertools
import json
import re
from dataclasses import dataclass
from typing import Any

from ..errors import JobError

MODES = ("product", "zip")
_INDEX = re.compile(r"[0-9]+")
MAX_VARIANTS = 10_000
NAME_LENGTH = 120  # characters of the derived variant name, at most


@dataclass(frozen=True)
class Variant:
    """One job table of a sweep: its index, the swept values by dotted key, the table."""

    index: int | None
    values: dict[str, Any] | None
    table: dict[str, Any]

    @property
    def label(self) -> str:
        """``key=value, ...`` for messages."""
        if not self.values:
            return ""
        return ", ".join(f"{k}={_text(v)}" for k, v in self.values.items())


@dataclass(frozen=True)
class SweepInfo:
    mode: str
    keys: tuple[str, ...]
    size: int


def _flatten(table: dict[str, Any], prefix: str = "") -> list[tuple[str, Any]]:
    out: list[tuple[str, Any]] = []
    for k, v in table.items():
        key = f"{prefix}{k}"
        if isinstance(v, dict):
            out.extend(_flatten(v, key + "."))
        else:
            out.append((key, v))
    return out


def _text(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        return f"{v:g}"
    if isinstance(v, (int, str)):
        return str(v)
    return json.dumps(v, separators=(",", ":"), default=str)


def set_dotted(table: dict[str, Any], key: str, value: Any) -> None:
    """Set ``table[a][b][0]...`` named by ``key`` = "a.b.0..." to ``value``.

    Missing tables along the way are created (a key the file leaves at its default);
    raises ``ValueError`` with the reason when the path cannot be followed.
    """
    parts = key.split(".")
    if any(not p for p in parts):
        raise ValueError(f"key {key!r} has an empty part")
    cur: Any = table
    for i, part in enumerate(parts):
        last = i == len(parts) - 1
        here = ".".join(parts[:i]) or "the job"
        if isinstance(cur, list):
            if not _INDEX.fullmatch(part):
                raise ValueError(f"{here} is an array; index it with a number, not {part!r}")
            idx = int(part)
            if idx >= len(cur):
                raise ValueError(f"{here} has {len(cur)} entries, so there is no entry {idx}")
            if last:
                cur[idx] = value
            else:
                cur = cur[idx]
        elif isinstance(cur, dict):
            if last:
                cur[part] = value
            elif part in cur:
                cur = cur[part]
            elif _INDEX.fullmatch(parts[i + 1]):
                raise ValueError(f"the job has no {'.'.join(parts[: i + 1])} to index")
            else:
                cur[part] = {}
                cur = cur[part]
        else:
            raise ValueError(f"{here} is a single value, not a table or an array")


def _short(keys: list[str]) -> dict[str, str]:
    """Each key's last non-numeric part when those are unique, else the whole key."""
    def last(k: str) -> str:
        named = [p for p in k.split(".") if not _INDEX.fullmatch(p)]
        return named[-1] if named else k

    shorts = [last(k) for k in keys]
    unique = len(set(shorts)) == len(shorts)
    return {k: (s if unique else k) for k, s in zip(keys, shorts)}


def _safe(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9._=+,-]+", "_", text).strip("_")


def expand(table: dict[str, Any], source: str = "") -> tuple[list[Variant], SweepInfo | None]:
    """The job tables a job file's table stands for: itself, or one per sweep combination.

    Variants are named ``<name>-<index>-<key>=<value>...`` unless ``name`` is swept.
    """
    if "sweep" not in table:
        return [Variant(None, None, table)], None
    sweep = table["sweep"]
    if not isinstance(sweep, dict):
        raise JobError("must be a table: [sweep] with dotted keys mapping to lists", "sweep", source)
    sweep = dict(sweep)
    mode = sweep.pop("mode", "product")
    if mode not in MODES:
        raise JobError(f"mode must be 'product' or 'zip', got {mode!r}", "sweep.mode", source)
    entries = _flatten(sweep)
    if not entries:
        raise JobError("lists no keys to sweep; add e.g. \"material.value\" = [1.0, 2.0]", "sweep", source)
    for key, values in entries:
        if not isinstance(values, list) or not values:
            raise JobError("must be a non-empty list of the values to sweep over", f"sweep.{key}", source)
        if key == "sweep" or key.startswith("sweep."):
            raise JobError("a sweep cannot sweep itself", f"sweep.{key}", source)
    keys = [k for k, _ in entries]
    lists = [v for _, v in entries]
    if mode == "zip":
        lengths = {len(v) for v in lists}
        if len(lengths) > 1:
            detail = ", ".join(f"{k} has {len(v)}" for k, v in entries)
            raise JobError(f"mode 'zip' needs lists of equal length; {detail}", "sweep", source)
        combos = list(zip(*lists))
    else:
        size = 1
        for v in lists:
            size *= len(v)
        if size > MAX_VARIANTS:
            raise JobError(f"makes {size:,} jobs; at most {MAX_VARIANTS:,} per file", "sweep", source)
        combos = list(itertools.product(*lists))
    if len(combos) > MAX_VARIANTS:
        raise JobError(f"makes {len(combos):,} jobs; at most {MAX_VARIANTS:,} per file", "sweep", source)

    base = {k: v for k, v in table.items() if k != "sweep"}
    name = base.get("name")
    shorts = _short(keys)
    width = len(str(len(combos) - 1))
    variants = []
    for index, combo in enumerate(combos):
        t = copy.deepcopy(base)
        values = dict(zip(keys, (copy.deepcopy(c) for c in combo)))
        for key, value in values.items():
            try:
                set_dotted(t, key, copy.deepcopy(value))
            except ValueError as exc:
                raise JobError(str(exc), f"sweep.{key}", source) from None
        if isinstance(name, str) and "name" not in values:
            prefix = f"{name}-{index:0{width}d}"
            desc = _safe("_".join(f"{shorts[k]}={_text(v)}" for k, v in values.items()))
            desc = desc[: max(0, NAME_LENGTH - len(prefix) - 1)].rstrip("_.")
            t["name"] = f"{prefix}-{desc}" if desc else prefix
        variants.append(Variant(index, values, t))
    return variants, SweepInfo(mode, tuple(keys), len(variants))
