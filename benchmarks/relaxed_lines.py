"""Over-relaxed zebra z-line sweeps, built from ``sevenfold.kernels.lines`` itself (a prototype
for cycle_bench.py, not product code).

Each column's exact line solve v replaces u by (1 - omega) u + omega v (line SOR; omega = 1 is the
kept sweep). The same omega before and after the coarse correction, in reverse colour order,
keeps the cycle symmetric, so CG stays valid for 0 < omega < 2. The kernel is the kept one's
source with the back substitution's store relaxed, so the two cannot drift apart: every
replacement below must apply once or the import fails, and :func:`check` asserts that
omega = 1 gives the kept sweep's numbers bit for bit. A sweep from zero takes a column's old
value as 0 for the first two colour passes (the kept kernel never reads it; u is not zeroed).
"""

from __future__ import annotations

import re
import types
from pathlib import Path

import numpy as np

import sevenfold.kernels.lines as kept

BACKWARD = '''    v = r[o + m] + l[o + m] * nxt
    u[i, j, m] = v
    return v'''
RELAXED_BACKWARD = '''    v = r[o + m] + l[o + m] * nxt
    _store(u, i, j, m, v, w, z)
    return v'''
STORE = '''@njit(inline="always")
def _store(u, i, j, m, v, w, z):
    """u = (1 - w) u + w v (exactly v at w = 1), the old u taken as 0 when ``z``."""
    if z:
        u[i, j, m] = w * v
    else:
        u[i, j, m] = (1.0 - w) * u[i, j, m] + w * v


'''


def _source() -> str:
    src = Path(kept.__file__).read_text()

    def once(old: str, new: str, count: int = 1, regex: bool = False) -> None:
        nonlocal src
        found = len(re.findall(old, src)) if regex else src.count(old)
        if found != count:
            raise RuntimeError(f"relaxed_lines: {old[:50]!r} found {found} times, not {count}: "
                               "kernels/lines.py changed; update this prototype")
        src = re.sub(old, new, src) if regex else src.replace(old, new)

    once("from .jit import njit", "from numba import njit")
    once("cache=True", "cache=False", count=src.count("cache=True"))
    once("def _backward(r, l, u, o, i, j, m, nxt):", "def _backward(r, l, u, o, i, j, m, nxt, w, z):")
    once(BACKWARD, RELAXED_BACKWARD)
    buffer = "@njit(cache=False, fastmath=CONTRACT, inline=\"always\")\ndef _line_buffer"
    once(buffer, STORE + buffer)
    once("def _line_plane(tx, ty, tz, inv_w, b, u, i, colour, zero, r):",
         "def _line_plane(tx, ty, tz, inv_w, b, u, i, colour, zero, r, w, z):")
    once(r"_backward\(r, lb, u, (o\d?), ui, (a\d?), (m|last - k), (p\d?)\)",
         r"_backward(r, lb, u, \1, ui, \2, \3, \4, w, z)", count=9, regex=True)
    once("u[ui, a0, last], u[ui, a1, last], u[ui, a2, last], u[ui, a3, last] = p0, p1, p2, p3\n"
         "            u[ui, a4, last], u[ui, a5, last], u[ui, a6, last], u[ui, a7, last] = p4, p5, p6, p7",
         "\n            ".join(f"_store(u, ui, a{c}, last, p{c}, w, z)" for c in range(8)))
    once("                u[ui, a, last] = p\n", "                _store(u, ui, a, last, p, w, z)\n")
    once("def line_gauss_seidel(tx, ty, tz, inv_w, b, u, first, sweeps, chunks, zero):",
         "def line_gauss_seidel(tx, ty, tz, inv_w, b, u, first, sweeps, chunks, zero, w):")
    once("zero and s == 0, r)", "zero and s == 0, r, w, zero and s < 2)", count=3)
    once("_line_plane(tx, ty, tz, inv_w, b, u, i, colour, False, r)",
         "_line_plane(tx, ty, tz, inv_w, b, u, i, colour, False, r, 1.0, False)")
    return src


module = types.ModuleType("relaxed_lines_kernels")
exec(compile(_source(), "<relaxed lines.py>", "exec"), module.__dict__)
line_gauss_seidel = module.line_gauss_seidel


def check(n: int = 20) -> None:
    """omega = 1 against the kept sweep, from zero and from a given u, both colour orders."""
    rng = np.random.default_rng(7)
    shape = (n, n + 3, n + 1)
    tx, ty, tz = (rng.uniform(0.1, 1.0, shape).astype(np.float32) for _ in range(3))
    tx[-1], ty[:, -1], tz[:, :, -1] = 0, 0, 0
    diag = (tx + ty + tz + 1.5).astype(np.float32)
    inv_w = np.empty_like(diag)
    kept.line_factor(tz, diag, inv_w)
    b = rng.standard_normal(shape).astype(np.float32)
    for first in (0, 1):
        for zero in (True, False):
            start = rng.standard_normal(shape).astype(np.float32)
            u1, u2 = start.copy(), start.copy()
            kept.line_gauss_seidel(tx, ty, tz, inv_w, b, u1, first, 2, 2, zero)
            line_gauss_seidel(tx, ty, tz, inv_w, b, u2, first, 2, 2, zero, 1.0)
            assert np.array_equal(u1, u2), "relaxed sweep at omega = 1 differs from the kept sweep"
            line_gauss_seidel(tx, ty, tz, inv_w, b, u2, first, 2, 2, zero, 1.1)
            assert not np.array_equal(u1, u2), "omega = 1.1 changed nothing"
