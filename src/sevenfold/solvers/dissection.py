"""Nested dissection of a box of cells: the elimination order and the fronts of the coarsest
level's sparse Cholesky factor (:mod:`sevenfold.kernels.fronts`).

The box is cut in two by a plane of cells across its longest side, each half likewise, down
to boxes of at most LEAF cells (A. George, "Nested dissection of a regular finite element
mesh", SIAM J. Numer. Anal. 10 (1973); from memory). Halves are eliminated before the plane
that separates them. A front is a node of that tree: a leaf box, or a plane with the two
halves below it; its own cells (the leaf's, the plane's) are eliminated when everything
below is, and its columns of the factor reach exactly the cells just outside its box, which
all lie on planes cut earlier and are eliminated later (a box is connected; the 7-point
stencil couples face neighbours only). At 17 x 17 x 16 cells the fronts take 56 million
multiply-adds (their own cells' blocks dense) against 158 million for the band (the level
numbered longest axis outermost), counted from the fronts' sizes (tests/test_coarsest.py);
the factor's true columns (scipy's LU of the reordered matrix) hold 46 million.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

# Largest box left whole (a dense front of its own); 8 to 125 gave 46-49 million
# multiply-adds at 17 x 17 x 16
LEAF = 64


@dataclass(frozen=True)
class Fronts:
    """The tree as the kernels take it (:mod:`sevenfold.kernels.fronts` for the layout)."""

    index: np.ndarray  # int64: each front's cells, own first, in the order of elimination
    start: np.ndarray  # int64 (fronts + 1,): where each front's cells begin in ``index``
    own: np.ndarray  # int64 (fronts,): cells each front eliminates
    children: np.ndarray  # int64 (fronts,): updates each front takes (0 to 2)
    first: np.ndarray  # int64 (fronts,): the first front of each front's subtree (first[f] .. f)
    factor_start: np.ndarray  # int64 (fronts + 1,): own x size entries of the factor each
    stack: int  # entries the updates waiting at once need at most
    # The root's two subtrees, fronts 0 .. m - 1 and m .. root - 1, factored at once each on a
    # stack of its own: (m, the first's stack entries, the second's), together more than
    # ``stack`` (283 against 216 thousand at 17 x 17 x 16); None when the root has fewer
    halves: tuple[int, int, int] | None

    @property
    def entries(self) -> int:
        """Float64 entries the factor needs: the factor, the waiting updates (the two
        subtrees' stacks together where they are factored at once), the largest front."""
        waiting = self.stack if self.halves is None else max(self.stack, sum(self.halves[1:]))
        return int(self.factor_start[-1]) + waiting + int(np.diff(self.start).max()) ** 2


def _cells(lo: tuple[int, ...], hi: tuple[int, ...], shape: tuple[int, int, int]) -> np.ndarray:
    """C-order numbers of the cells of the box [lo, hi)."""
    i, j, k = (np.arange(a, b) for a, b in zip(lo, hi))
    return ((i[:, None, None] * shape[1] + j[None, :, None]) * shape[2] + k[None, None, :]).ravel()


def _outside(lo: tuple[int, ...], hi: tuple[int, ...], shape: tuple[int, int, int]) -> list[np.ndarray]:
    """The cells just outside the box [lo, hi) across each of its faces, inside the grid."""
    planes = []
    for axis in range(3):
        for side, inside in ((lo[axis] - 1, lo[axis] > 0), (hi[axis], hi[axis] < shape[axis])):
            if inside:
                a, b = list(lo), list(hi)
                a[axis], b[axis] = side, side + 1
                planes.append(_cells(tuple(a), tuple(b), shape))
    return planes


@lru_cache(maxsize=16)
def fronts(shape: tuple[int, int, int]) -> Fronts:
    """The fronts of a box of ``shape`` cells, children before parents (cached per shape:
    every level of one shape has the same tree)."""
    shape = tuple(int(s) for s in shape)
    nodes: list[tuple[tuple[int, ...], tuple[int, ...], np.ndarray, int, int]] = []

    def visit(lo: tuple[int, ...], hi: tuple[int, ...]) -> bool:
        sides = [b - a for a, b in zip(lo, hi)]
        if min(sides) <= 0:
            return False
        first = len(nodes)
        if sides[0] * sides[1] * sides[2] <= LEAF:
            nodes.append((lo, hi, _cells(lo, hi, shape), 0, first))
            return True
        axis = int(np.argmax(sides))
        cut = lo[axis] + sides[axis] // 2
        below, above = list(hi), list(lo)
        below[axis], above[axis] = cut, cut + 1
        plane_lo, plane_hi = list(lo), list(hi)
        plane_lo[axis], plane_hi[axis] = cut, cut + 1
        children = int(visit(lo, tuple(below))) + int(visit(tuple(above), hi))
        nodes.append((lo, hi, _cells(tuple(plane_lo), tuple(plane_hi), shape), children, first))
        return True

    visit((0, 0, 0), shape)
    order = np.concatenate([node[2] for node in nodes])
    position = np.empty(order.size, dtype=np.int64)
    position[order] = np.arange(order.size)
    index, start, own_count, children, first, factor_start, updates = [], [0], [], [], [], [0], []
    for lo, hi, own, taken, begin in nodes:
        later = np.concatenate([own[:0], *_outside(lo, hi, shape)])
        later = later[np.argsort(position[later], kind="stable")]
        index += [own, later]
        start.append(start[-1] + own.size + later.size)
        own_count.append(own.size)
        children.append(taken)
        first.append(begin)
        factor_start.append(factor_start[-1] + own.size * (own.size + later.size))
        updates.append(later.size ** 2)
    root = len(nodes) - 1
    halves = None
    if children[root] == 2:
        middle = first[root - 1]
        halves = (middle, _stack(updates, children, 0, middle),
                  _stack(updates, children, middle, root))
    as_array = lambda v: np.asarray(v, dtype=np.int64)  # noqa: E731
    return Fronts(np.concatenate(index).astype(np.int64), as_array(start), as_array(own_count),
                  as_array(children), as_array(first), as_array(factor_start),
                  _stack(updates, children, 0, len(nodes)), halves)


def _stack(updates: list[int], children: list[int], begin: int, end: int) -> int:
    """Entries the waiting updates need at most while fronts begin .. end - 1 (whole
    subtrees, ``updates`` entries each) are factored in order from an empty stack."""
    waiting: list[int] = []
    used = peak = 0
    for f in range(begin, end):
        for _ in range(children[f]):
            used -= waiting.pop()
        if updates[f]:
            waiting.append(updates[f])
            used += updates[f]
            peak = max(peak, used)
    return peak
