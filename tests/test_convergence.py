"""Manufactured solutions in 3D: observed order of accuracy with variable k and every face type.

u, k and their derivatives are written by hand as expression strings; f = -div(k grad u)
and the face data are put together from them and checked against finite differences in
``test_manufactured_data``. The grid spacing differs per axis (hx : hy : hz = 1 : 0.6 : 0.8).

With stronger anisotropy the max-norm order approaches 2 more slowly: with hy : hz = 1 : 4
and all faces Dirichlet it was 1.35, 1.59, 1.76 from 8 -> 16 -> 32 -> 64 cells (RMS 1.74, 1.88,
1.95). That comes from the ghost-cell closure itself (its wall-face flux is only first order,
which leaves an O(h^2) offset near each face, u_nn h^2 / 8 in 1D); the same grids with a
second-order one-sided closure show order >= 2. Not a fault of the assembly, which
test_operator checks entry by entry.
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import FACES, centres, make_spec, make_table, np_eval

from sevenfold.operator import assemble, scatter
from sevenfold.problem import build_problem
from sevenfold.solvers.amg import solve_amg


def _prod(*factors: str) -> str:
    return "*".join(f"({s})" for s in factors)


# u = X(x) Y(y) Z(z) with first and second derivatives
X, X1, X2 = "exp(0.5*x)", "0.5*exp(0.5*x)", "0.25*exp(0.5*x)"
Y, Y1, Y2 = "sin(2*y + 0.3)", "2*cos(2*y + 0.3)", "-4*sin(2*y + 0.3)"
Z, Z1, Z2 = "cos(1.3*z + 0.2)", "-1.3*sin(1.3*z + 0.2)", "-1.69*cos(1.3*z + 0.2)"
U = _prod(X, Y, Z)
GRAD_U = {"x": _prod(X1, Y, Z), "y": _prod(X, Y1, Z), "z": _prod(X, Y, Z1)}
LAPLACE_U = " + ".join([_prod(X2, Y, Z), _prod(X, Y2, Z), _prod(X, Y, Z2)])

# k = 2 + S(x) C(y) W(z), between 0.5 and 3.5 on the domain
S, S1 = "sin(pi*x + 0.4)", "pi*cos(pi*x + 0.4)"
C, C1 = "cos(2*y)", "-2*sin(2*y)"
W, W1 = "1 + 0.5*z", "0.5"
K = f"2 + {_prod(S, C, W)}"
GRAD_K = {"x": _prod(S1, C, W), "y": _prod(S, C1, W), "z": _prod(S, C, W1)}

# f = -div(k grad u) = -(k lap u + grad k . grad u)
F = f"-(({K})*({LAPLACE_U}) + " + " + ".join(f"({GRAD_K[a]})*({GRAD_U[a]})" for a in "xyz") + ")"

ROBIN_COEFFICIENT = "3 + x + y"
ORIGIN = [0.1, -0.2, 0.3]
SIZE = [1.0, 0.6, 0.8]


def inflow(face: str) -> str:
    """Flux into the domain through ``face``: -k grad u . n_outward."""
    sign = "-" if face.endswith("min") else ""
    return f"{sign}({K})*({GRAD_U[face[0]]})"


def condition(kind: str, face: str) -> dict:
    if kind == "D":
        return {"type": "dirichlet", "value": U}
    if kind == "N":
        return {"type": "neumann", "flux": inflow(face)}
    # Robin: inward flux = c (reference - u)  =>  reference = u + inflow / c
    return {
        "type": "robin",
        "coefficient": ROBIN_COEFFICIENT,
        "reference": f"({U}) + ({inflow(face)})/({ROBIN_COEFFICIENT})",
    }


def table_for(n: int, kinds: str) -> dict:
    """n cells per axis on the box SIZE; ``kinds`` gives x_min..z_max as D, N or R."""
    return make_table(
        grid={"cells": [n, n, n], "size": SIZE, "origin": ORIGIN},
        material={"value": K},
        source={"value": F},
        boundary={face: condition(kind, face) for face, kind in zip(FACES, kinds)},
    )


def errors(n: int, kinds: str) -> tuple[float, float]:
    """(volume-weighted RMS, max) of u_h - u at the cell centres."""
    table = table_for(n, kinds)
    problem = build_problem(make_spec(**table))
    system = assemble(problem)
    result = solve_amg(system.matrix, system.rhs, rtol=1e-12, max_iterations=300)
    assert result.converged and result.final_relative_residual < 1e-10
    u = scatter(system, problem, result.x)
    e = u - np_eval(U, *centres(table))
    volume = np.full(e.shape, np.prod([s / n for s in SIZE]))
    rms = float(np.sqrt(np.sum(volume * e**2) / np.sum(volume)))
    return rms, float(np.abs(e).max())


def test_manufactured_data():
    """The hand-derived f, grad u and grad k agree with central differences of u and k."""
    rng = np.random.default_rng(7)
    p = np.asarray(ORIGIN)[:, None] + rng.random((3, 50)) * np.asarray(SIZE)[:, None]
    x, y, z = p
    d = 1e-4

    def shifted(text, axis, step):
        q = [x, y, z]
        q[axis] = q[axis] + step
        return np_eval(text, *q)

    def diff(text, axis):
        return (shifted(text, axis, d) - shifted(text, axis, -d)) / (2 * d)

    for axis, name in enumerate("xyz"):
        assert np.allclose(np_eval(GRAD_U[name], x, y, z), diff(U, axis), rtol=1e-6, atol=1e-7)
        assert np.allclose(np_eval(GRAD_K[name], x, y, z), diff(K, axis), rtol=1e-6, atol=1e-7)
    # -div(k grad u) as differences of face fluxes, second order in d
    div = 0.0
    for axis in range(3):
        k_plus = 0.5 * (np_eval(K, x, y, z) + shifted(K, axis, d))
        k_minus = 0.5 * (np_eval(K, x, y, z) + shifted(K, axis, -d))
        div = div + (
            k_plus * (shifted(U, axis, d) - np_eval(U, x, y, z))
            - k_minus * (np_eval(U, x, y, z) - shifted(U, axis, -d))
        ) / d**2
    assert np.allclose(np_eval(F, x, y, z), -div, rtol=1e-5, atol=1e-5)
    k = np_eval(K, *centres(table_for(32, "DDDDDD")))
    assert k.min() > 0.4 and k.max() < 3.6


CASES = {
    "dirichlet": "DDDDDD",
    "neumann": "DNNNNN",  # one Dirichlet face fixes the constant
    "robin": "RRRRRR",
    "mixed": "DNRNRD",
    "mixed-rotated": "RNDDNR",
}


@pytest.mark.parametrize("name", CASES)
def test_second_order(name):
    """On 8, 16, 32 cells per axis the error falls at order 2 in the RMS and max norms."""
    e = np.array([errors(n, CASES[name]) for n in (8, 16, 32)])
    assert np.all(e[1:] < e[:-1])
    order = np.log2(e[-2] / e[-1])  # finest pair, (RMS, max)
    assert abs(order[0] - 2.0) <= 0.15, f"RMS order {order[0]:.3f}, errors {e[:, 0]}"
    assert abs(order[1] - 2.0) <= 0.15, f"max order {order[1]:.3f}, errors {e[:, 1]}"
