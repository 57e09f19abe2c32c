"""Grid Convergence Index from three grids (Roache's method).

Sources: P. J. Roache, *Verification and Validation in Computational Science and
Engineering*, Hermosa, 1998 (the GCI, Fs = 1.25 for three-grid studies); ASME V&V 20-2009,
*Standard for Verification and Validation in Computational Fluid Dynamics and Heat
Transfer*, section 2-4 (from memory: the estimate of the numerical uncertainty by the GCI).
The fixed-point iteration for the observed order when the refinement ratio differs between
the two grid pairs follows I. B. Celik et al., "Procedure for estimation and reporting of
uncertainty due to discretization in CFD applications", J. Fluids Eng. 130 (2008) 078001
(from memory).

Grids are numbered fine to coarse: h1 < h2 < h3, r21 = h2/h1, r32 = h3/h2,
e21 = f2 - f1, e32 = f3 - f2. Nothing here does I/O.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

SAFETY_FACTOR = 1.25  # Roache's Fs for a three-grid study


@dataclass(frozen=True)
class GCIResult:
    """Observed order, extrapolated value and GCI of one quantity on three grids.

    ``gci`` is the band half-width in the quantity's units around the finest value:
    the exact value is estimated to lie in ``f1 +- gci``; ``gci_relative`` = gci / ``scale``,
    by default |f1|. A quantity with an arbitrary offset (a temperature in K, a head above a
    datum, an offset potential) is measured against a scale that does not include the offset
    (the solution's range over the domain, or its distance from a named datum); ``relative_to``
    says which, in words.
    ``convergence`` is ``monotone`` (0 < e21/e32 < 1), ``oscillatory`` (e21/e32 < 0),
    ``divergent`` (e21/e32 >= 1) or ``exact`` (no change between grids). p, extrapolated
    value and GCI are NaN when not defined (no change, or divergence).
    """

    f1: float
    f2: float
    f3: float
    r21: float
    r32: float
    order: float
    extrapolated: float
    gci: float
    gci_relative: float
    convergence: str
    safety_factor: float = SAFETY_FACTOR
    scale: float = float("nan")  # what gci_relative divides by
    relative_to: str = "|f1|"

    def to_dict(self) -> dict:
        return asdict(self)


def observed_order(e21: float, e32: float, r21: float, r32: float,
                   iterations: int = 100, tol: float = 1e-12) -> float:
    """p from |ln|e32/e21| + q(p)| / ln r21, q(p) = ln((r21^p - s)/(r32^p - s)), by fixed point."""
    s = math.copysign(1.0, e32 / e21)
    ratio = math.log(abs(e32 / e21))
    p = abs(ratio) / math.log(r21)
    for _ in range(iterations):
        num, den = r21**p - s, r32**p - s
        q = math.log(num / den) if num > 0 and den > 0 else 0.0
        p_new = abs(ratio + q) / math.log(r21)
        if abs(p_new - p) <= tol * max(1.0, p):
            return p_new
        p = p_new
    return p


def gci_three_grids(f1: float, f2: float, f3: float, r21: float, r32: float,
                    safety_factor: float = SAFETY_FACTOR, scale: float | None = None,
                    relative_to: str = "|f1|") -> GCIResult:
    """Roache's GCI on the finest grid from values ``f1`` (fine), ``f2``, ``f3`` (coarse).

    ``scale`` (default |f1|) is what the relative GCI is measured against, ``relative_to`` its
    description for tables."""
    nan = float("nan")
    against = abs(f1) if scale is None else abs(scale)
    tail = (against, relative_to)
    if not (r21 > 1 and r32 > 1):
        raise ValueError("refinement ratios must exceed 1")
    e21, e32 = f2 - f1, f3 - f2
    scale = max(abs(f1), abs(f2), abs(f3), 1e-300)
    if abs(e21) <= 1e-14 * scale or abs(e32) <= 1e-14 * scale:
        kind = "exact" if abs(e21) <= 1e-14 * scale and abs(e32) <= 1e-14 * scale else "undetermined"
        return GCIResult(f1, f2, f3, r21, r32, nan, f1 if kind == "exact" else nan,
                         0.0 if kind == "exact" else nan, 0.0 if kind == "exact" else nan, kind, safety_factor,
                         *tail)
    R = e21 / e32
    kind = "monotone" if 0 < R < 1 else "oscillatory" if R < 0 else "divergent"
    if kind == "divergent":
        return GCIResult(f1, f2, f3, r21, r32, nan, nan, nan, nan, kind, safety_factor, *tail)
    p = observed_order(e21, e32, r21, r32)
    rp = r21**p
    extrapolated = (rp * f1 - f2) / (rp - 1.0)
    gci = safety_factor * abs(e21) / (rp - 1.0)
    relative = gci / against if against > 0 else nan
    return GCIResult(f1, f2, f3, r21, r32, p, extrapolated, gci, relative, kind, safety_factor, *tail)
