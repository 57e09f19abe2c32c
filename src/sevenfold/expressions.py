"""Safe arithmetic expressions in x, y, z (metres) for coefficients, sources and boundary data.

An expression is parsed with :mod:`ast` and accepted only when it is arithmetic on numbers,
the coordinates ``x``, ``y``, ``z``, the constants ``pi`` and ``e``, and a short list of
mathematical functions. Anything else (attribute access, strings, subscripts, other calls)
is refused before numexpr ever sees it; Python's ``eval`` is never used.
"""

from __future__ import annotations

import ast
import math
from collections.abc import Callable

import numpy as np

VARIABLES = ("x", "y", "z")
CONSTANTS = {"pi": math.pi, "e": math.e}
FUNCTIONS = frozenset(
    {
        "sin", "cos", "tan", "arcsin", "arccos", "arctan", "arctan2",
        "sinh", "cosh", "tanh", "exp", "expm1", "log", "log10", "log1p",
        "sqrt", "abs", "where",
    }
)
_NODES = (
    ast.Expression, ast.BinOp, ast.UnaryOp, ast.Compare, ast.BoolOp,
    ast.Add, ast.Sub, ast.Mult, ast.Div, ast.Pow, ast.Mod, ast.USub, ast.UAdd,
    ast.Lt, ast.LtE, ast.Gt, ast.GtE, ast.Eq, ast.NotEq, ast.BitAnd, ast.BitOr, ast.Invert,
    ast.And, ast.Or, ast.Not,
    ast.Name, ast.Load, ast.Constant, ast.Call,
)
MAX_LENGTH = 2000


class ExpressionError(ValueError):
    """An expression that is not safe arithmetic in x, y, z."""


def check_expression(text: str) -> str:
    """Return ``text`` if it is an allowed expression, else raise :class:`ExpressionError`."""
    if len(text) > MAX_LENGTH:
        raise ExpressionError(f"expression longer than {MAX_LENGTH} characters")
    try:
        tree = ast.parse(text.strip(), mode="eval")
    except SyntaxError as exc:
        raise ExpressionError(f"expression {text!r} is not valid: {exc.msg}") from None
    for node in ast.walk(tree):
        if not isinstance(node, _NODES):
            raise ExpressionError(
                f"expression {text!r} uses {type(node).__name__}; only arithmetic on x, y, z, "
                "pi, e and the functions " + ", ".join(sorted(FUNCTIONS)) + " is allowed"
            )
        if isinstance(node, ast.Constant) and (
            isinstance(node.value, bool) or not isinstance(node.value, (int, float))
        ):
            raise ExpressionError(f"expression {text!r} contains {node.value!r}; only numbers are allowed")
        if isinstance(node, ast.Call):
            name = node.func.id if isinstance(node.func, ast.Name) else None
            if name not in FUNCTIONS or node.keywords:
                shown = name or ast.unparse(node.func)
                raise ExpressionError(
                    f"expression {text!r} calls {shown!r}; allowed functions are "
                    + ", ".join(sorted(FUNCTIONS))
                )
        if isinstance(node, ast.Name) and not (
            node.id in VARIABLES or node.id in CONSTANTS or node.id in FUNCTIONS
        ):
            raise ExpressionError(f"expression {text!r} names {node.id!r}; use x, y, z, pi or e")
    return text


def _coordinates(node: ast.AST) -> frozenset[str]:
    """The coordinates (x, y, z) that ``node``'s value depends on."""
    return frozenset(n.id for n in ast.walk(node) if isinstance(n, ast.Name) and n.id in VARIABLES)


def _hoist(node: ast.AST, local: dict, run: Callable[[str], np.ndarray]) -> ast.AST:
    """``node`` with each part that depends on fewer coordinates than the part holding it
    evaluated on its own (by ``run``, into ``local`` under a new name) and replaced by that
    name. On broadcast coordinates such a part has a smaller shape: sin(pi * x) takes nx
    sines instead of one per cell. Every operation is still numexpr's, on the same numbers in
    the same order, so the result is the same bit for bit."""
    outer = _coordinates(node)
    for field, value in ast.iter_fields(node):
        if isinstance(value, ast.expr):
            setattr(node, field, _part(value, outer, local, run))
        elif isinstance(value, list):
            setattr(node, field, [_part(v, outer, local, run) if isinstance(v, ast.expr) else v
                                  for v in value])
    return node


def _part(node: ast.expr, outer: frozenset[str], local: dict,
          run: Callable[[str], np.ndarray]) -> ast.expr:
    """``node``, a part of an expression on the coordinates ``outer``, hoisted inside; itself
    replaced by the name of its value when it needs some but not all of ``outer``."""
    inner = _coordinates(node)
    node = _hoist(node, local, run)
    if not inner or inner == outer or isinstance(node, ast.Name):
        return node
    name = f"part{len(local)}"
    local[name] = run(ast.unparse(node))
    return ast.Name(id=name, ctx=ast.Load())


def evaluate(text: str, x: np.ndarray, y: np.ndarray, z: np.ndarray,
             out: np.ndarray | None = None) -> np.ndarray:
    """Evaluate a checked expression on broadcastable coordinate arrays (metres).

    Returns a float64 array of the broadcast shape of ``x``, ``y`` and ``z``, or writes it into
    ``out`` (float64, that shape) and returns ``out``: an expression on every coordinate is then
    evaluated straight into it, on numexpr's threads, with no array of the whole grid besides.
    Parts that depend on fewer coordinates than the whole are evaluated first on their own,
    smaller shapes (:func:`_hoist`).
    """
    import numexpr  # on first use: a job without expressions never loads it

    check_expression(text)
    shape = np.broadcast_shapes(np.shape(x), np.shape(y), np.shape(z))
    local = {"x": x, "y": y, "z": z, **CONSTANTS}

    def run(source: str, into: np.ndarray | None = None) -> np.ndarray:
        return numexpr.evaluate(source, local_dict=local, global_dict={}, out=into)

    try:
        tree = _hoist(ast.parse(text.strip(), mode="eval").body, local, run)
        if out is not None and _shape(tree, local) == out.shape and out.flags.c_contiguous:
            return run(ast.unparse(tree), out)
        result = run(ast.unparse(tree))
    except Exception as exc:  # numexpr raises several types for malformed input
        raise ExpressionError(f"expression {text!r} cannot be evaluated: {exc}") from None
    result = np.broadcast_to(np.asarray(result, dtype=np.float64), shape)
    if out is None:
        return result
    out[...] = result
    return out


def _shape(node: ast.AST, local: dict) -> tuple[int, ...]:
    """The broadcast shape of the arrays that ``node`` names."""
    return np.broadcast_shapes(*(np.shape(local[n.id]) for n in ast.walk(node)
                                 if isinstance(n, ast.Name) and n.id in local))
