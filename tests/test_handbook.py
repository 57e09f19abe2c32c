"""Textbook heat conduction results: plane walls in series, with convection, with generation.

Sources: Incropera & DeWitt, Fundamentals of Heat and Mass Transfer, section 3.1 (the plane
wall, thermal resistance L/(kA) per layer and 1/(hA) for convection, resistances in series)
and section 3.5 (plane wall with uniform generation), both from memory.
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import centres, make_spec, make_table, solve_spec

# Three layers along x, interfaces at 0.10 m and 0.35 m: on cell faces for h = 0.01 m.
LAYERS = [(0.10, 0.8), (0.25, 45.0), (0.15, 3.2)]  # (thickness L_i in m, k_i in W/(m K))
H = 0.01
T_HOT, T_COLD = 400.0, 300.0


def wall_table(boundary: dict) -> dict:
    """Insulated sides, so the field depends on x only; a few cells across to be 3D."""
    total = sum(L for L, _ in LAYERS)
    n = round(total / H)
    regions, start = [], LAYERS[0][0]
    for L, k in LAYERS[1:]:
        regions.append({"box": {"min": [start, -1.0, -1.0], "max": [start + L, 1.0, 1.0]}, "value": k})
        start += L
    return make_table(
        physics="heat",
        grid={"cells": [n, 3, 2], "size": [total, 0.03, 0.02]},
        material={"value": LAYERS[0][1], "region": regions},
        boundary=boundary,
    )


def layer_of(x: np.ndarray) -> np.ndarray:
    edges = np.cumsum([L for L, _ in LAYERS])
    return np.searchsorted(edges, x)


def exact_series(T_left: float, q: float) -> callable:
    """Piecewise-linear T(x) for flux q entering at x = 0 with face temperature T_left."""

    def T(x):
        out = np.empty_like(x)
        start, T_start = 0.0, T_left
        for i, (L, k) in enumerate(LAYERS):
            inside = layer_of(x) == i
            out[inside] = T_start - q * (x[inside] - start) / k
            start, T_start = start + L, T_start - q * L / k
        return out

    return T


# Round-off bound for fluxes taken from differences of temperatures: the direct solve leaves
# ~1e-12 relative round-off in u (seen up to 5e-13, i.e. 2e-10 K), and in the steel layer a
# cell's drop is only q h / k ~ 0.1 K, so a flux carries up to ~1e-9 relative round-off.
# A discretisation error would be O(h), i.e. of order 1e-2 here.
FLUX_RTOL = 1e-9


def face_flux(u: np.ndarray, k: np.ndarray) -> np.ndarray:
    """Flux in +x through each interior face, from the discrete solution (two half cells in series)."""
    line, kl = u[:, 0, 0], k[:, 0, 0]
    conductance = 1.0 / (H / (2 * kl[:-1]) + H / (2 * kl[1:]))
    return conductance * (line[:-1] - line[1:])


def test_layers_between_two_temperatures():
    """q = dT / sum(L_i/k_i); interface temperatures T_1 - q sum_{j<=i} L_j/k_j; exact to round-off."""
    table = wall_table(
        {"x_min": {"type": "dirichlet", "value": T_HOT}, "x_max": {"type": "dirichlet", "value": T_COLD}}
    )
    u, problem = solve_spec(make_spec(**table))
    k = problem.coefficient[0]
    resistance = sum(L / kk for L, kk in LAYERS)  # per unit area, Incropera 3.1
    q = (T_HOT - T_COLD) / resistance
    assert np.unique(k).size == 3  # the layers are really there

    x, _, _ = centres(table)
    assert np.allclose(u, exact_series(T_HOT, q)(x), rtol=0, atol=1e-11 * T_HOT)
    # the same heat flux through the hot face, every interior face and the cold face
    q_hot = 2 * k[0, 0, 0] / H * (T_HOT - u[0, 0, 0])
    q_cold = 2 * k[-1, 0, 0] / H * (u[-1, 0, 0] - T_COLD)
    assert q_hot == pytest.approx(q, rel=FLUX_RTOL)
    assert q_cold == pytest.approx(q, rel=FLUX_RTOL)
    assert np.allclose(face_flux(u, k), q, rtol=FLUX_RTOL, atol=0)
    # interface temperatures from the cells on either side of each interface
    T_interface = T_HOT - q * np.cumsum([L / kk for L, kk in LAYERS])[:-1]
    for edge, expected in zip(np.cumsum([L for L, _ in LAYERS])[:-1], T_interface):
        left = round(edge / H) - 1  # last cell of the layer before the interface
        from_left = u[left, 0, 0] - q * (H / 2) / k[left, 0, 0]
        from_right = u[left + 1, 0, 0] + q * (H / 2) / k[left + 1, 0, 0]
        assert from_left == pytest.approx(expected, abs=1e-11 * T_HOT)
        assert from_right == pytest.approx(expected, abs=1e-11 * T_HOT)


@pytest.mark.parametrize("both_sides", [False, True])
def test_layers_with_convection(both_sides):
    """Convection faces add 1/h in series: q = (T_hot - T_inf) / (sum L_i/k_i + 1/h [+ 1/h_hot])."""
    h_cold, h_hot, T_air = 25.0, 60.0, 290.0
    boundary = {"x_max": {"type": "robin", "coefficient": h_cold, "reference": T_air}}
    if both_sides:
        boundary["x_min"] = {"type": "robin", "coefficient": h_hot, "reference": T_HOT}
    else:
        boundary["x_min"] = {"type": "dirichlet", "value": T_HOT}
    table = wall_table(boundary)
    u, problem = solve_spec(make_spec(**table))
    k = problem.coefficient[0]

    resistance = sum(L / kk for L, kk in LAYERS) + 1 / h_cold + (1 / h_hot if both_sides else 0.0)
    q = (T_HOT - T_air) / resistance  # Incropera 3.1, resistances in series
    T_wall_hot = T_HOT - q / h_hot if both_sides else T_HOT
    T_wall_cold = T_air + q / h_cold

    x, _, _ = centres(table)
    assert np.allclose(u, exact_series(T_wall_hot, q)(x), rtol=0, atol=1e-11 * T_HOT)
    assert np.allclose(face_flux(u, k), q, rtol=FLUX_RTOL, atol=0)
    # the cold surface temperature, half a cell beyond the last cell centre
    surface = u[-1, 0, 0] - q * (H / 2) / k[-1, 0, 0]
    assert surface == pytest.approx(T_wall_cold, abs=1e-11 * T_HOT)
    # convective flux at that surface equals the conducted flux
    assert h_cold * (surface - T_air) == pytest.approx(q, rel=FLUX_RTOL)


GEN_Q, GEN_K, GEN_L = 2.0e6, 15.0, 0.02  # W/m^3, W/(m K), half thickness in m


@pytest.mark.parametrize("T_left, T_right", [(320.0, 320.0), (310.0, 360.0)])
@pytest.mark.parametrize("n", [10, 20, 40])
def test_wall_with_generation(n, T_left, T_right):
    """Uniform generation q in -L < x < L between two fixed temperatures.

    Exact (Incropera 3.5, from memory): T = q L^2/(2k) (1 - x^2/L^2) + (T2 - T1)/2 x/L + (T1 + T2)/2.
    The cell-centred solution is that quadratic shifted up by exactly q h^2 / (8k): interior
    rows are exact for a quadratic, and in each end row the ghost-cell closure leaves a
    residual of q/4 (the wall-face flux 2k (u_P - T_s)/h misses q h/4), which the uniform
    shift d cancels because it adds 2 k d / h^2 to exactly those rows: d = q h^2 / (8k).
    """
    h = 2 * GEN_L / n
    table = make_table(
        physics="heat",
        grid={"cells": [n, 1, 2], "size": [2 * GEN_L, 0.01, 0.01], "origin": [-GEN_L, 0.0, 0.0]},
        material={"value": GEN_K},
        source={"value": GEN_Q},
        boundary={
            "x_min": {"type": "dirichlet", "value": T_left},
            "x_max": {"type": "dirichlet", "value": T_right},
        },
    )
    u, _ = solve_spec(make_spec(**table))
    x, _, _ = centres(table)
    exact = (
        GEN_Q * GEN_L**2 / (2 * GEN_K) * (1 - (x / GEN_L) ** 2)
        + (T_right - T_left) / 2 * x / GEN_L
        + (T_left + T_right) / 2
    )
    offset = GEN_Q * h**2 / (8 * GEN_K)
    assert offset > 1e-3  # the shift is far above round-off on these grids
    assert np.allclose(u - exact, offset, rtol=0, atol=1e-9 * exact.max())
