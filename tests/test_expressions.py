"""Expressions in x, y, z: evaluated part by part on the coordinates they need, with the
numbers numexpr gives for the whole expression on the whole grid."""

from __future__ import annotations

import numexpr
import numpy as np
import pytest

from sevenfold import expressions
from sevenfold.expressions import ExpressionError, evaluate
from sevenfold.grid import Grid

CASES = [
    "sin(pi*x)*sin(pi*y)*sin(pi*z)",
    "1 + 100*(z > 0.5)",
    "x*y + z",
    "where(x > 0.5, y**2, sqrt(x**2 + y**2) + z)",
    "arctan2(y, x) * exp(-z) - cos(2*pi*y) / (1 + x)",
    "(x > 0.2) & (y < 0.7) | ~(z > 0.9)",
    "(z > 0.5) * 3 + x % 0.3",
    "-x**3 + log1p(y) * tanh(x*z)",
    "2.5e-3 * e**(-x/0.1)",
    "3.0",
    "y",
]


def _grid() -> Grid:
    """A grid graded along x, with a different cell count on each axis."""
    return Grid((np.cumsum([0.0, 0.05, 0.07, 0.1, 0.14, 0.2, 0.28, 0.16]), np.linspace(0.0, 2.0, 6),
                 np.linspace(-0.25, 0.25, 7)))


def _whole(text: str, x, y, z) -> np.ndarray:
    """numexpr on the whole expression, the coordinates broadcast to the grid: the reference."""
    shape = np.broadcast_shapes(x.shape, y.shape, z.shape)
    x, y, z = (np.broadcast_to(a, shape) for a in (x, y, z))
    local = {"x": x, "y": y, "z": z, "pi": np.pi, "e": np.e}
    return np.broadcast_to(np.asarray(numexpr.evaluate(text, local_dict=local), dtype=np.float64), shape)


@pytest.mark.parametrize("text", CASES)
def test_parts_give_numexprs_numbers_bit_for_bit(text: str) -> None:
    grid = _grid()
    for coords in [grid.mesh()] + [grid.face_mesh(f) for f in ("x_min", "y_max", "z_min")]:
        got = evaluate(text, *coords)
        want = _whole(text, *coords)
        assert got.shape == want.shape and got.dtype == np.float64
        assert np.array_equal(got, want, equal_nan=True), text


@pytest.mark.parametrize("text", CASES)
def test_evaluated_into_an_array_gives_the_same_numbers(text: str) -> None:
    """With ``out`` the values land in that array (the one returned), the same bit for bit."""
    grid = _grid()
    for coords in [grid.mesh(), grid.face_mesh("y_max")]:
        want = _whole(text, *coords)
        out = np.full(want.shape, np.nan)
        got = evaluate(text, *coords, out=out)
        assert got is out
        assert np.array_equal(out, want, equal_nan=True), text


def test_a_product_of_sines_takes_one_sine_per_cell_of_each_axis(monkeypatch) -> None:
    """Each sine is evaluated on its own axis's centres (nx, ny or nz values), not once per cell
    of the grid; only the product is evaluated on the whole grid."""
    calls: list[tuple[str, int]] = []
    real = numexpr.evaluate

    def recorded(source, *args, **kwargs):
        out = real(source, *args, **kwargs)
        calls.append((source, np.size(out)))
        if kwargs.get("out") is not None:
            assert out is kwargs["out"]
        return out

    monkeypatch.setattr(numexpr, "evaluate", recorded)
    grid = _grid()
    evaluate("sin(pi*x)*sin(pi*y)*sin(pi*z)", *grid.mesh())
    sines = [size for source, size in calls if "sin" in source]
    assert sorted(sines) == sorted(grid.cells), calls
    assert calls[-1][1] == int(np.prod(grid.cells))
    # into a field: the product is evaluated straight into it, no other grid-sized array
    calls.clear()
    field = np.empty(grid.shape)
    evaluate("sin(pi*x)*sin(pi*y)*sin(pi*z)", *grid.mesh(), out=field)
    assert calls[-1][1] == field.size and all(size < field.size for _, size in calls[:-1]), calls


def test_a_malformed_expression_is_still_an_expression_error() -> None:
    x, y, z = _grid().mesh()
    for text in ("x > 0.5 and y < 0.5", "z * (x > 0.5 or y < 0.5)", "not x"):
        with pytest.raises(ExpressionError, match="cannot be evaluated"):
            evaluate(text, x, y, z)
    with pytest.raises(ExpressionError, match="uses Attribute"):
        expressions.check_expression("x.real")
