"""The float type of gmg's preconditioner levels, chosen from the problem (no numba here:
`sevenfold check` asks it for the memory estimate)."""

from __future__ import annotations

# Coefficient contrast (largest k over smallest, any direction) above which the
# preconditioner's levels run in float64. A float32 level rounds each diagonal to about 6e-8 of
# itself; where the strong material borders the weak one that error rivals the couplings
# through the weak material, which carry the slowest errors, and the cycle stops reducing them.
# Layers across the flow (benchmarks/RESULTS_PRECISION.md): 1e5:1 and below take the same
# iterations in float32 as in float64; 1e6:1 at 128^3 took 29 against 5, and 1e8:1 at 64^3
# stagnated at 1.7e-2 against 5. The switch sits a decade below the last contrast measured safe.
FLOAT32_CONTRAST = 1e4


def coefficient_contrast(problem) -> float:
    """Largest k over smallest, any direction (infinite where k reaches 0). Contact
    resistances are not counted: a 1e8:1 contact plane took the same iterations with float32
    levels as with float64 (17 where it cut through coarse cells, 5 where it did not; 64^3,
    one-off), unlike weak layers of material."""
    k_min, k_max = problem.coefficient_range
    return k_max / k_min if k_min > 0 else float("inf")


def preconditioner_precision(contrast: float) -> str:
    """The levels' float type for a problem of this :func:`coefficient_contrast`."""
    return "float32" if contrast <= FLOAT32_CONTRAST else "float64"


def precision_note(contrast: float) -> str:
    """What the solve's notes and `sevenfold check` say of levels in float64 ("" for float32)."""
    if preconditioner_precision(contrast) == "float32":
        return ""
    return (f"float64 preconditioner (coefficient contrast {contrast:.1e} > {FLOAT32_CONTRAST:.0e}: "
            "float32 levels would lose the weak material)")
