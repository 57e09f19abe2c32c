"""The multigrid hierarchy and its cycle: levels built by aggregation and Galerkin products
down to a factorised coarsest level, smoothing, transfers, and full multigrid.

The design and the measurements behind it are in :mod:`.gmg`'s docstring; this module is the
preconditioner alone (no CG, no problem).
"""

from __future__ import annotations

import numba
import numpy as np

from ..kernels import lines, multigrid, stencil
from .coarsest import CoarsestSolver
from .levels import Level, aggregates, coarsening_step, material_walls, plain_pairs, strong_z

# The coarsest level is factorised (coarsest.py); 16^3 keeps the aggregation levels where
# thin 1000:1 layers are still resolved (coarser aggregates of layered media slowed the cycle
# from 8 to 20 iterations at 128^3; benchmarks/RESULTS_CYCLE.md)
COARSEST_CELLS = 4096
# Levels smaller than this run their kernels on one thread: there the cost of waking and
# joining threads exceeds the work, and it grows sharply when another process holds a core.
SERIAL_BELOW = 32_768


class Hierarchy:
    """The levels, from the finest face arrays down to a factorised coarsest level.

    ``transfer``: "linear" (cell-centred linear interpolation, its transpose as restriction,
    and per-axis scaled aggregation Galerkin coarse operators) or "constant" (piecewise-
    constant aggregation with plain Galerkin operators and an overcorrected coarse correction).
    ``smoother``: "line" (zebra z-line Gauss-Seidel), "point" (red-black Gauss-Seidel) or
    "auto" (lines on the levels where z is strong, :func:`strong_z`, points elsewhere; measured
    no faster than lines everywhere, benchmarks/RESULTS_CYCLE_SMOOTHERS.md, so not the default).
    ``precision``: float type of the levels the preconditioner runs on; the caller's fine
    operator is not touched (float32 keeps a float32 copy of it for smoothing).
    ``coarsest_cells``: the level size that is factorised (default COARSEST_CELLS).
    ``finest``: "copy" smooths the finest level on a copy of its face arrays in ``precision``;
    "operator" smooths on the caller's float64 arrays themselves (no copy and, with float32,
    the pivots in ``out``: 24 bytes per cell less, for slightly slower sweeps).
    ``out``: a float64 array of the fine grid's size whose bytes hold the finest level's
    work arrays and :meth:`precondition`'s result (CG lends the operator's product buffer,
    which is free while it preconditions).
    ``planes``: per axis, the cell boundaries (b: between cells b - 1 and b) that should lie
    between aggregates on every level (contact resistances, :func:`aggregates`); not with
    the linear transfer, whose interpolation assumes plain pairs.
    ``walls``: also keep the conductivity's walls across x and y, read from the operator
    (:func:`.levels.material_walls`), between aggregates while they are few (not with the
    linear transfer).
    """

    def __init__(self, fine: Level, overcorrection: float | None = None, cycle: str = "V",
                 smoothing: int = 1, smoother: str = "line", transfer: str = "linear",
                 precision: str = "float64", coarsest_cells: int | None = None,
                 finest: str = "copy", out: np.ndarray | None = None,
                 planes: tuple[tuple[int, ...], ...] = ((), (), ()),
                 walls: bool = True) -> None:
        if transfer not in ("linear", "constant", "scaled") or smoother not in ("line", "point", "auto"):
            raise ValueError(f"unknown transfer {transfer!r} or smoother {smoother!r}")
        self.dtype = np.dtype(precision)
        self.transfer = transfer
        self.smoother = smoother
        self.overcorrection = (overcorrection if overcorrection is not None
                               else (1.8 if transfer == "constant" else 1.0))
        self.gamma = 2 if cycle == "W" else 1
        self.sweeps = (smoothing, smoothing)  # before and after the coarse correction
        if finest not in ("copy", "operator"):
            raise ValueError(f"unknown finest {finest!r}")
        if transfer == "linear" and any(planes):
            raise ValueError("planes need piecewise-constant transfers")
        if fine.diag.dtype == self.dtype or finest == "operator":
            top = Level(fine.tx, fine.ty, fine.tz, fine.diag, fine.free, fine.step.copy(),
                        fine.spacing)
        else:
            top = fine.astype(self.dtype)
        top.boost = np.ones(3)
        self.levels = [top]
        # the coarsest level is the first whose size with plain pairs is small enough, so that
        # cells left alone for contact planes (an aggregate more each) do not add a level
        nominal = top.shape
        self._whole_z: list[int] = []  # levels whose z stays whole for contact planes
        coarsened = int(np.prod(nominal)) > (coarsest_cells or COARSEST_CELLS)
        found = (material_walls(fine) if walls and transfer != "linear" and coarsened
                 else ((), (), ()))
        kept = [name for name, there in (("contact planes", any(planes)),
                                         ("walls in the conductivity", any(found))) if there]
        self._kept = " and ".join(kept)  # what the arranged pairs keep between aggregates
        while True:
            lv = self.levels[-1]
            if int(np.prod(nominal)) <= (coarsest_cells or COARSEST_CELLS):
                break
            lv.lines = strong_z(lv) if smoother == "auto" else smoother == "line"
            wanted = coarsening_step(lv, lv.lines)
            if not (wanted > 1).any():
                break
            step, lv.agg, planes, found = aggregates(lv.shape, planes, wanted, lv.lines, found)
            lv.step = step
            if step[2] < wanted[2]:
                self._whole_z.append(len(self.levels) - 1)
            nominal = tuple(int((n + s - 1) // s) for n, s in zip(nominal, step))
            cshape = tuple(int(a[-1]) + 1 for a in lv.agg)
            arrays = [np.empty(cshape, dtype=self.dtype) for _ in range(4)]
            freec = np.empty(cshape, dtype=np.bool_)
            source = lv  # (from a float32 copy the finest Galerkin product compiles once)
            if transfer in ("linear", "scaled"):
                multigrid.galerkin_scaled(source.tx, source.ty, source.tz, source.diag, lv.free,
                                          lv.agg, *arrays, freec)
                boost = lv.boost
            else:
                stencil.galerkin(source.tx, source.ty, source.tz, source.diag, lv.free, lv.agg,
                                 *arrays, freec)
                boost = lv.boost * step
            coarse = Level(*arrays, freec, np.ones(3, dtype=np.int64), boost=boost)
            coarse.e, coarse.b = (np.empty(cshape, dtype=self.dtype) for _ in range(2))
            self.levels.append(coarse)
        self._out = out.reshape(fine.shape) if out is not None else np.empty(fine.shape)
        # The finest level's work arrays live in the output buffer's bytes where they fit
        # (CG is done with A p when it preconditions, and takes z in the levels' type): its
        # correction e, which is z itself, in the second half; in the first half, when the
        # finest level smooths on the float64 operator and takes CG's residual as it is, the
        # z-line pivots, refactored at the start of every cycle (pivots and correction then
        # cost no memory of their own: 8 bytes per cell less where memory is short). The
        # right-hand side in the levels' type is an array of its own: CG writes it in the
        # pass that updates r, while it reads A p from the buffer (``rhs_buffer``). A float64
        # hierarchy's e is the whole buffer. A stored fine residual only for the linear
        # restriction (the others fuse residual and restriction).
        halves = self._out.reshape(-1).view(np.float32)
        n = top.diag.size
        if self.dtype == np.float32:
            top.e = halves[n:].reshape(top.shape)
        else:
            top.e = self._out.view(self.dtype)
        self._refactor = False
        if len(self.levels) > 1 and self.dtype == np.float32:  # (the LU takes float64)
            if top.diag.dtype == np.float32:
                top.b = np.empty(top.shape, dtype=np.float32)  # one signature per level kernel
            elif top.lines:
                top.inv_w = halves[:n].reshape(top.shape)
                self._refactor = True
        if transfer == "linear":
            for lv in self.levels[:-1]:
                lv.r = np.empty(lv.shape, dtype=self.dtype)
        for lv in self.levels[:-1]:
            if lv.lines and lv.inv_w is None:
                lv.inv_w = np.empty(lv.shape, dtype=self.dtype)
                lines.line_factor(lv.tz, lv.diag, lv.inv_w)
        self.coarsest = CoarsestSolver(self.levels[-1])

    def smoothing_note(self) -> str:
        on_lines = [lv.lines for lv in self.levels[:-1]]
        if all(on_lines) or not on_lines:
            return "z-line"
        if not any(on_lines):
            return "point"
        return "z-line (levels " + ", ".join(str(i) for i, x in enumerate(on_lines) if x) + ") and point"

    def planes_note(self) -> str:
        """What the levels do for contact planes and walls (empty when nothing)."""
        def on(levels: list[int]) -> str:
            return "level" + ("s " if len(levels) > 1 else " ") + ", ".join(map(str, levels))
        arranged = [i for i, lv in enumerate(self.levels[:-1]) if not plain_pairs(lv)]
        note = ""
        if arranged:
            note += f", pairs arranged on {on(arranged)} to keep {self._kept} between aggregates"
        if self._whole_z:
            note += f", z not coarsened on {on(self._whole_z)} to keep contact planes of both parities"
        return note

    @property
    def shapes(self) -> list[tuple[int, int, int]]:
        return [lv.shape for lv in self.levels]

    def _smooth(self, lv: Level, b: np.ndarray, u: np.ndarray, first: int,
                zero: bool = False) -> None:
        """The sweeps before (``first`` = 0: red then black) or after (1: black then red) the
        coarse correction; ``zero``: from u = 0, whatever u holds."""
        if lv.lines:
            lines.line_gauss_seidel(lv.tx, lv.ty, lv.tz, lv.inv_w, b, u, first,
                                    self.sweeps[first], numba.get_num_threads(), zero)
            return
        if zero:
            u[...] = 0.0
        for _ in range(self.sweeps[first]):
            for colour in (first, 1 - first):
                stencil.gauss_seidel_colour(lv.tx, lv.ty, lv.tz, lv.diag, b, u, colour)

    def _restrict(self, lv: Level, r: np.ndarray, rc: np.ndarray) -> None:
        if self.transfer == "linear":
            multigrid.restrict_linear(r, lv.free, lv.step, rc)
        else:
            stencil.restrict(r, lv.step, lv.agg, rc)

    def _prolong_add(self, lv: Level, ec: np.ndarray, scale: float, u: np.ndarray) -> None:
        if self.transfer == "linear":
            multigrid.prolong_linear_add(ec, lv.free, lv.step, scale, u)
        else:
            stencil.prolong_add(ec, lv.free, lv.step, lv.agg, scale, u)

    def cycle(self, level: int, b: np.ndarray, u: np.ndarray, zero: bool = False) -> None:
        """Improve u for A_level u = b in place; ``zero``: start from u = 0, whatever u holds
        (the z-line sweeps then skip both the zeroing and the first colour's reads of u)."""
        lv = self.levels[level]
        threads = numba.get_num_threads()
        if threads > 1 and lv.diag.size < SERIAL_BELOW:
            numba.set_num_threads(1)
            try:
                self.cycle(level, b, u, zero)
            finally:
                numba.set_num_threads(threads)
            return
        if level == len(self.levels) - 1:
            self.coarsest.solve(b, u)  # (writes every cell of u)
            return
        coarse = self.levels[level + 1]
        self._smooth(lv, b, u, 0, zero)
        if self.transfer == "linear":
            stencil.residual(lv.tx, lv.ty, lv.tz, lv.diag, b, u, lv.r)
            multigrid.restrict_linear(lv.r, lv.free, lv.step, coarse.b)
        else:
            stencil.residual_restrict(lv.tx, lv.ty, lv.tz, lv.diag, b, u, lv.step, lv.agg,
                                      coarse.b)
        # one coarse cycle (V) or two in a row (W), the first from zero; each is symmetric, so
        # the pair is too
        for k in range(self.gamma if level + 2 < len(self.levels) else 1):
            self.cycle(level + 1, coarse.b, coarse.e, k == 0)
        self._prolong_add(lv, coarse.e, self.overcorrection, u)
        self._smooth(lv, b, u, 1)

    def precondition(self, r: np.ndarray) -> np.ndarray:
        """One cycle from zero for A z = r (r float64, z in the levels' float type). The
        returned array is reused by the next call."""
        return self.precondition_dot(r)[0]

    __call__ = precondition

    @property
    def rhs_buffer(self) -> np.ndarray | None:
        """The finest level's float32 right-hand side (flat), which CG may fill with r in its
        own pass (then ``precondition_dot(r, filled=True)``); None where the level takes r
        as it is."""
        b = self.levels[0].b
        return None if b is None else b.reshape(-1)

    def _rhs(self, r: np.ndarray, filled: bool = False) -> np.ndarray:
        """The finest level's right-hand side for the float64 vector ``r`` (flat);
        ``filled``: :attr:`rhs_buffer` already holds r."""
        top = self.levels[0]
        if top.b is None:
            return r.reshape(top.shape)
        if not filled:
            multigrid.narrow(r, top.b.ravel())
        return top.b

    def precondition_dot(self, r: np.ndarray, filled: bool = False) -> tuple[np.ndarray, float]:
        """:meth:`precondition`, and r . z (z in the levels' float type: widening it to
        float64 is exact, so CG takes it as it is, and no float64 z is stored); ``filled``:
        :attr:`rhs_buffer` already holds r."""
        from ..kernels.vector import vector_ops

        top = self.levels[0]
        if self._refactor:
            lines.line_factor(top.tz, top.diag, top.inv_w)
        self.cycle(0, self._rhs(r, filled), top.e, zero=True)
        z = top.e.reshape(-1)
        return z, vector_ops(z.size).dot(r, z)

    def full_multigrid(self, b: np.ndarray, cycles: int = 1, cycle: str = "V",
                       sweeps: tuple[int, int] = (2, 1)) -> np.ndarray:
        """A start near discretisation accuracy: restrict b to every level, solve the coarsest,
        then on each finer level interpolate (linear, cell-centred) and run ``cycles`` cycles
        of type ``cycle`` ("V", the usual choice in full multigrid, or "W") with ``sweeps``
        smoothing sweeps before and after each coarse correction. V(2,1) is the cheapest
        measured whose algebraic error stays below the discretisation error
        (benchmarks/RESULTS_CYCLE_SWEEP.md; at 128^3 V(1,1) leaves 3.3 times it, and V(1,2) reaches it
        only through cancellation with the discretisation error); full multigrid is not a
        preconditioner, so it need not be symmetric.

        Returns the finest level's u as a new flat float64 array. The finest level works in
        the hierarchy's own arrays.
        """
        if not all(plain_pairs(lv) for lv in self.levels[:-1]):
            raise ValueError("full multigrid interpolates between plain pairs (no planes)")
        top = self.levels[0]
        rhs = [self._rhs(b)]
        for lv, coarse in zip(self.levels[:-1], self.levels[1:]):
            rc = np.empty(coarse.shape, dtype=self.dtype)
            self._restrict(lv, rhs[-1], rc)
            rhs.append(rc)
        u = np.empty(self.levels[-1].shape, dtype=self.dtype)
        self.coarsest.solve(rhs[-1], u)
        kept = self.gamma, self.sweeps
        self.gamma, self.sweeps = (2 if cycle == "W" else 1), tuple(sweeps)
        try:
            for level in range(len(self.levels) - 2, -1, -1):
                lv = self.levels[level]
                fine_u = top.e if level == 0 else np.empty(lv.shape, dtype=self.dtype)
                fine_u[...] = 0.0
                multigrid.prolong_linear_add(u, lv.free, lv.step, self.overcorrection, fine_u)
                for _ in range(cycles):
                    self.cycle(level, rhs[level], fine_u)
                u = fine_u
        finally:
            self.gamma, self.sweeps = kept
        return u.astype(np.float64).reshape(-1)
