"""Write a TOML document from the kind of table ``tomllib`` reads (the stdlib only reads).

Tables become ``[section]`` headers, lists of tables ``[[section]]``, everything else an
inline value; ``tomllib.loads(dumps(t)) == t`` for every table ``tomllib`` can produce.
"""

from __future__ import annotations

import datetime as _dt
import math
import re
from typing import Any

_BARE_KEY = re.compile(r"[A-Za-z0-9_-]+")
INLINE_WIDTH = 72  # characters
_ESCAPES = {'"': '\\"', "\\": "\\\\", "\b": "\\b", "\t": "\\t", "\n": "\\n", "\f": "\\f", "\r": "\\r"}


def _string(s: str) -> str:
    out = []
    for ch in s:
        if ch in _ESCAPES:
            out.append(_ESCAPES[ch])
        elif ord(ch) < 0x20 or ord(ch) == 0x7F:
            out.append(f"\\u{ord(ch):04X}")
        else:
            out.append(ch)
    return '"' + "".join(out) + '"'


def _key(k: str) -> str:
    return k if _BARE_KEY.fullmatch(k) else _string(k)


def _value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        return _string(v)
    if isinstance(v, (_dt.datetime, _dt.date, _dt.time)):
        return v.isoformat()
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{_key(str(k))} = {_value(x)}" for k, x in v.items()) + "}"
    raise TypeError(f"cannot write {type(v).__name__} as TOML")


def _is_table_array(v: Any) -> bool:
    return isinstance(v, list) and len(v) > 0 and all(isinstance(x, dict) for x in v)


def _inline(v: Any, depth: int) -> bool:
    """Small sub-tables below the top level read best inline: ``box = {min = [...], ...}``."""
    if not isinstance(v, dict):
        return not _is_table_array(v)
    return depth > 0 and all(_inline(x, depth) for x in v.values()) and len(_value(v)) <= INLINE_WIDTH


def _emit(table: dict[str, Any], path: list[str], lines: list[str], header: str | None) -> None:
    depth = len(path)
    plain = [(k, v) for k, v in table.items() if _inline(v, depth)]
    tables = [(k, v) for k, v in table.items() if isinstance(v, dict) and not _inline(v, depth)]
    arrays = [(k, v) for k, v in table.items() if _is_table_array(v)]
    if header is not None:
        if lines:
            lines.append("")
        lines.append(header)
    for k, v in plain:
        lines.append(f"{_key(k)} = {_value(v)}")
    for k, v in tables:
        sub = path + [k]
        _emit(v, sub, lines, "[" + ".".join(_key(p) for p in sub) + "]")
    for k, items in arrays:
        sub = path + [k]
        for item in items:
            _emit(item, sub, lines, "[[" + ".".join(_key(p) for p in sub) + "]]")


def dumps(table: dict[str, Any]) -> str:
    """The TOML text of ``table``."""
    lines: list[str] = []
    _emit(table, [], lines, None)
    return "\n".join(lines) + "\n"
