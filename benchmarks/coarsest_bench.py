"""The coarsest level without scipy: nested dissection with dense fronts in numpy, against
the sparse LU gmg uses (a prototype, measured; not in the product).

    python benchmarks/coarsest_bench.py [--n 128] [--repeats 7] [--rounds 8]

Why: a gmg run imports ``scipy.sparse.linalg`` only for ``splu`` of its coarsest level (at most
16^3 cells), and that import is a fixed cost of every ``sevenfold run`` in its own process.
A coarser coarsest level (8^3, where a dense inverse is cheap) costs layered media 12
iterations against 5 (`cycle_bench.py` variants "2048-cell coarsest" and "8^3 coarsest"), so the
16^3 level has to be solved exactly, without scipy.

The prototype, :class:`NestedDissection`: the box of cells is cut in two by a plane one cell
thick across its longest axis, each half again, down to boxes of at most ``leaf_cells`` cells
(nested dissection: A. George, "Nested dissection of a regular finite element mesh", SIAM J.
Numer. Anal. 10, 1973). The cells are eliminated leaves first, each cut plane after the two
halves it separates, with dense frontal matrices (the multifrontal method: I. S. Duff and J. K.
Reid, ACM TOMS 9, 1983):

* a node's front holds its own cells S (a leaf's box, or a cut plane) and the cells just
  outside its box G (the boundary shell, which later nodes eliminate); the level's own
  couplings of S to S and to G go in, and the update matrices its children left on their
  shells are added;
* eliminating S stores F_SS^-1 and F_GS, and leaves F_GG - F_GS F_SS^-1 F_SG for the parent (at
  a leaf each shell cell couples to one cell of the box, so both products are gathers);
* the solve runs forward through the fronts stacked by height (fronts of one height are
  independent: one batched product per step), then back.

Measured, all in one invocation: for the coarsest level of each case's real hierarchy
(`cycle_bench.problem_level` at ``--n``), the factorisation and one solve by ``splu`` (as
`gmg.Hierarchy` calls it, CSR assembly included) and by the prototype, alternating, best of
``--repeats``, and the largest difference of the two solutions; then whole fresh processes,
alternating for ``--rounds`` rounds, importing what a gmg run imports with and without
``scipy.sparse.linalg``. Writes benchmarks/RESULTS_COARSEST.md.
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent

LEAF_CELLS = 64  # largest box eliminated as a whole


@dataclass(frozen=True)
class _Front:
    height: int  # 0 for a leaf, else one more than its higher child
    cells: np.ndarray  # S: flat indices eliminated at this node
    shell: np.ndarray  # G: flat indices of the cells next to the node's box, still unknown
    inverse: np.ndarray  # F_SS^-1 (|S| x |S|)
    coupling: np.ndarray  # F_GS (|G| x |S|)
    back: np.ndarray  # F_SS^-1 F_SG (|S| x |G|)


@dataclass(frozen=True)
class _Stage:
    """The fronts of one height, stacked (independent of each other: disjoint cells, shells
    only in fronts of greater height), padded with the spare index n and zero blocks."""
    cells: np.ndarray  # (fronts, s)
    shell: np.ndarray  # (fronts, g)
    inverse: np.ndarray  # (fronts, s, s)
    coupling: np.ndarray  # (fronts, g, s)
    back: np.ndarray  # (fronts, s, g)


def _stack(fronts: list[_Front], spare: int) -> _Stage:
    s = max(f.cells.size for f in fronts)
    g = max(f.shell.size for f in fronts)
    k = len(fronts)
    stage = _Stage(np.full((k, s), spare), np.full((k, g), spare), np.zeros((k, s, s)),
                   np.zeros((k, g, s)), np.zeros((k, s, g)))
    for n, f in enumerate(fronts):
        a, b = f.cells.size, f.shell.size
        stage.cells[n, :a] = f.cells
        stage.shell[n, :b] = f.shell
        stage.inverse[n, :a, :a] = f.inverse
        stage.coupling[n, :b, :a] = f.coupling
        stage.back[n, :a, :b] = f.back
    return stage


class NestedDissection:
    """A factorised level: :meth:`solve` returns A^-1 b for the level's operator.

    ``tx``, ``ty``, ``tz``, ``diag``: the level's face arrays (:mod:`sevenfold.kernels.stencil`:
    (A u)_P = diag_P u_P - sum_N t_PN u_N); they are read once, in float64.
    """

    def __init__(self, tx: np.ndarray, ty: np.ndarray, tz: np.ndarray, diag: np.ndarray,
                 leaf_cells: int = LEAF_CELLS) -> None:
        self.shape = tuple(int(n) for n in diag.shape)
        self._diag = np.asarray(diag, dtype=np.float64).ravel()
        self._t = [np.asarray(t, dtype=np.float64).ravel() for t in (tx, ty, tz)]
        self._strides = (self.shape[1] * self.shape[2], self.shape[2], 1)
        self._coords = np.unravel_index(np.arange(self._diag.size), self.shape)
        self._local = np.full(self._diag.size, -1, dtype=np.int64)
        self._index = np.arange(self._diag.size).reshape(self.shape)
        self._leaf = max(1, leaf_cells)
        self.fronts: list[_Front] = []
        self._eliminate((0, 0, 0), self.shape)
        del self._coords, self._local, self._index, self._t, self._diag
        n = int(np.prod(self.shape))
        heights = sorted({f.height for f in self.fronts})
        self._stages = [_stack([f for f in self.fronts if f.height == h], n) for h in heights]

    def _box(self, lo: tuple[int, ...], hi: tuple[int, ...]) -> np.ndarray:
        """Flat indices of the cells in [lo, hi)."""
        return self._index[lo[0]:hi[0], lo[1]:hi[1], lo[2]:hi[2]].ravel()

    def _shell(self, lo: tuple[int, ...], hi: tuple[int, ...]) -> np.ndarray:
        """Flat indices of the cells outside [lo, hi) that share a face with a cell inside."""
        parts = []
        for axis in range(3):
            for plane in (lo[axis] - 1, hi[axis]):
                if 0 <= plane < self.shape[axis]:
                    a, b = list(lo), list(hi)
                    a[axis], b[axis] = plane, plane + 1
                    parts.append(self._box(a, b))
        return np.concatenate(parts) if parts else np.empty(0, dtype=np.int64)

    def _couplings(self, cells: np.ndarray):
        """(row cell, neighbour cell, coupling t) for every face of ``cells`` to a neighbour
        inside the level (both directions)."""
        rows, cols, vals = [], [], []
        for axis, (t, stride) in enumerate(zip(self._t, self._strides)):
            c = self._coords[axis][cells]
            up = cells[c < self.shape[axis] - 1]
            down = cells[c > 0]
            rows += [up, down]
            cols += [up + stride, down - stride]
            vals += [t[up], t[down - stride]]
        return np.concatenate(rows), np.concatenate(cols), np.concatenate(vals)

    def _eliminate(self, lo: tuple[int, ...], hi: tuple[int, ...]):
        """Eliminate the box [lo, hi) (its subtree first); return its shell and the update
        matrix it leaves there (None for an empty box)."""
        extent = [b - a for a, b in zip(lo, hi)]
        if min(extent) <= 0:
            return None
        updates, height = [], 0
        if int(np.prod(extent)) <= self._leaf:
            cells = self._box(lo, hi)
        else:
            axis = int(np.argmax(extent))
            cut = lo[axis] + extent[axis] // 2
            left_hi, right_lo = list(hi), list(lo)
            left_hi[axis], right_lo[axis] = cut, cut + 1
            updates = [self._eliminate(lo, tuple(left_hi)), self._eliminate(tuple(right_lo), hi)]
            height = 1 + max(child[2] for child in updates if child is not None)
            plane_lo, plane_hi = list(lo), list(hi)
            plane_lo[axis], plane_hi[axis] = cut, cut + 1
            cells = self._box(plane_lo, plane_hi)
        shell = self._shell(lo, hi)
        front = np.concatenate([cells, shell])
        self._local[front] = np.arange(front.size)
        F = np.zeros((front.size, front.size))
        s = np.arange(cells.size)
        F[s, s] = self._diag[cells]
        rows, cols, vals = self._couplings(cells)
        r, c = self._local[rows], self._local[cols]
        keep = c >= 0  # (a cut plane's couplings into its halves went into the halves' fronts)
        r, c, vals = r[keep], c[keep], vals[keep]
        F[r, c] -= vals  # (each (row, neighbour) pair once: no repeated index)
        outward = c >= cells.size  # S-to-G couplings: the symmetric G-to-S entry too
        F[c[outward], r[outward]] -= vals[outward]
        for child in updates:
            if child is not None:
                pos = self._local[child[0]]
                F[np.ix_(pos, pos)] += child[1]
        self._local[front] = -1
        m = cells.size
        inverse = np.linalg.inv(F[:m, :m])
        if updates:
            back = inverse @ F[:m, m:]
            update = F[m:, m:] - F[m:, :m] @ back
        else:
            # a leaf: each shell cell couples to one cell of the box, so F_SG has one entry
            # per column, F_GG is 0, and both products are gathers
            src = np.empty(shell.size, dtype=np.int64)
            t = np.empty(shell.size)
            src[c[outward] - m], t[c[outward] - m] = r[outward], vals[outward]
            back = inverse[:, src] * -t
            update = t[:, None] * back[src, :]
        self.fronts.append(_Front(height, cells, shell, inverse, F[m:, :m].copy(), back))
        return shell, update, height

    def solve(self, b: np.ndarray) -> np.ndarray:
        """x with A x = b (b flat or of the level's shape; x flat float64)."""
        n = int(np.prod(self.shape))
        r = np.zeros(n + 1)  # (the last entry is the padding's)
        r[:n] = np.ravel(b)
        z = []
        for st in self._stages:
            zs = np.matmul(st.inverse, r[st.cells][..., None])
            r -= np.bincount(st.shell.ravel(), np.matmul(st.coupling, zs).ravel(), minlength=n + 1)
            z.append(zs[..., 0])
        x = np.zeros(n + 1)
        for st, zs in zip(reversed(self._stages), reversed(z)):
            x[st.cells] = zs - np.matmul(st.back, x[st.shell][..., None])[..., 0]
            x[n] = 0.0
        return x[:n]


CASES = ("layered", "inclusions", "column", "graded job")
WITHOUT = "import numpy, numba, zarr, pydantic, rich.console"  # what a gmg run imports besides
WITH = WITHOUT + ", scipy.sparse.linalg"


def level_rows(n: int, repeats: int) -> list[dict]:
    import scipy.sparse.linalg as sla

    sys.path.insert(0, str(HERE))
    import cycle_bench as cb
    import timing

    from sevenfold.solvers import gmg

    rows = []
    for case in CASES:
        fine, b = cb.problem_level(n, case)
        lv = gmg.Hierarchy(fine, **{k: v for k, v in gmg.DEFAULTS.items() if k != "start"}).levels[-1]
        rhs = np.random.default_rng(7).standard_normal(lv.shape)

        def lu():
            return sla.splu(lv.to_csr().tocsc(), permc_spec="MMD_AT_PLUS_A",
                            options={"SymmetricMode": True})

        def nd():
            return NestedDissection(lv.tx, lv.ty, lv.tz, lv.diag)

        times = {"lu factor": [], "nd factor": [], "lu solve": [], "nd solve": []}
        for _ in range(repeats):
            times["lu factor"].append(timing.best(lu, 1))
            times["nd factor"].append(timing.best(nd, 1))
        f_lu, f_nd = lu(), nd()
        for _ in range(repeats):
            times["lu solve"].append(timing.best(lambda: f_lu.solve(rhs.ravel()), 5))
            times["nd solve"].append(timing.best(lambda: f_nd.solve(rhs), 5))
        x_lu, x_nd = f_lu.solve(rhs.ravel()), f_nd.solve(rhs)
        rows.append({"case": case, "shape": "x".join(map(str, lv.shape)), "fronts": len(f_nd.fronts),
                     **{k: min(v) for k, v in times.items()},
                     "difference": float(np.abs(x_lu - x_nd).max() / np.abs(x_lu).max())})
        print(rows[-1], flush=True)
    return rows


def import_rows(rounds: int) -> dict[str, list[float]]:
    sys.path.insert(0, str(HERE))
    from start_bench import timed

    walls: dict[str, list[float]] = {WITHOUT: [], WITH: []}
    for code in walls:  # one unmeasured round: file cache
        timed([sys.executable, "-c", code], dict(os.environ))
    for _ in range(rounds):
        for code in walls:
            walls[code].append(timed([sys.executable, "-c", code], dict(os.environ))[0])
    return walls


def report(rows: list[dict], walls: dict[str, list[float]], info: dict, command: str,
           load: tuple[str, str]) -> str:
    ms = 1e3
    lines = ["# The coarsest level without scipy (benchmarks/coarsest_bench.py)", "",
             f"Written by `{command}` on {info['date']}; every number below comes from that run. "
             "Do not edit by hand: run the command again.", "",
             f"Machine: {info['cpu']}, {info['cores']} cores, {info['memory']}; numpy "
             f"{info['numpy']}, scipy {info['scipy']}. Load average at start {load[0]}, at end "
             f"{load[1]} (shared machine: compare within this file).", "",
             "## The coarsest level of each case's hierarchy",
             "",
             "Milliseconds, best of the repeats, the two alternating. *sparse LU* is what "
             "`gmg.Hierarchy` does (`Level.to_csr`, then `splu` with MMD_AT_PLUS_A); *nested "
             "dissection* the prototype above (leaves of at most "
             f"{LEAF_CELLS} cells); *difference* = max |x_LU - x_ND| / max |x_LU| for one random "
             "right-hand side.", "",
             "| case | coarsest level | fronts | sparse LU factor | nested dissection factor | ratio "
             "| sparse LU solve | nested dissection solve | ratio | difference |",
             "|---|---|---|---|---|---|---|---|---|---|"]
    for r in rows:
        lines.append(f"| {r['case']} | {r['shape']} | {r['fronts']} | {ms * r['lu factor']:.1f} | "
                     f"{ms * r['nd factor']:.1f} | {r['nd factor'] / r['lu factor']:.2f} | "
                     f"{ms * r['lu solve']:.2f} | {ms * r['nd solve']:.2f} | "
                     f"{r['nd solve'] / r['lu solve']:.2f} | {r['difference']:.1e} |")
    lines += ["", "## What the import costs a fresh process", "",
              f"Whole processes, {len(walls[WITH])} rounds alternating (after one unmeasured round), "
              "wall seconds.", "",
              "| command | min | median |", "|---|---|---|"]
    for code, w in walls.items():
        lines.append(f"| `python -c \"{code}\"` | {min(w):.3f} | {statistics.median(w):.3f} |")
    saved = [a - b for a, b in zip(walls[WITH], walls[WITHOUT])]
    lines.append(f"| difference, round by round | {min(saved):.3f} | {statistics.median(saved):.3f} |")
    return "\n".join(lines) + "\n"


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=128, help="cells per axis of the cases' finest level")
    parser.add_argument("--repeats", type=int, default=7)
    parser.add_argument("--rounds", type=int, default=8)
    parser.add_argument("--results", default=str(HERE / "RESULTS_COARSEST.md"))
    args = parser.parse_args(argv)
    sys.path.insert(0, str(HERE))
    import run as engine
    from start_bench import load_average

    command = "python benchmarks/coarsest_bench.py " + " ".join(argv if argv is not None else sys.argv[1:])
    start = load_average()
    rows = level_rows(args.n, args.repeats)
    walls = import_rows(args.rounds)
    text = report(rows, walls, engine.machine(), command.strip(), (start, load_average()))
    Path(args.results).write_text(text)
    print(text)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
