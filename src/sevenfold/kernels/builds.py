"""Serial builds of the threaded setup kernels, for grids where threads do not pay.

A kernel that runs once per solve (the face conductances, the finest level's diagonal and
right-hand side, the Galerkin coarse operators, the z-line pivots) gains nothing from threads on
a small grid, but its ``parallel=True`` build compiles three to four times slower (2-5 s against
0.3-1.7 s each, benchmarks/RESULTS_START.md), which a first run pays. Below
``vector.PARALLEL_FROM`` cells the callers take a serial build: the same Python function
compiled without ``parallel`` (``prange`` runs as ``range``), so every cell gets the same
arithmetic in the same order and the results are identical. The serial copy has its own name,
so numba's on-disk cache keeps it apart from the threaded build.
"""

from __future__ import annotations

import types
from importlib import import_module

from numba import njit

# The same size as vector.PARALLEL_FROM (tests/test_warmup.py checks it), not imported from
# there so that a run without CG (fft) does not load the vector kernels
PARALLEL_FROM = 100_000
# kernel name -> the module that defines its threaded build
SETUP_KERNELS = {"transmissibility": "stencil", "fine_stencil": "stencil",
                 "galerkin_scaled": "multigrid", "line_factor": "multigrid"}
_serial: dict[str, object] = {}


def threaded(name: str):
    """The ``parallel=True`` build of setup kernel ``name``."""
    return getattr(import_module(f"{__package__}.{SETUP_KERNELS[name]}"), name)


def serial(name: str):
    """The serial build of setup kernel ``name`` (compiled, or loaded from the cache, on first use)."""
    if name not in _serial:
        kernel = threaded(name)
        f = kernel.py_func
        copy = types.FunctionType(f.__code__, f.__globals__, f"{name}_serial", f.__defaults__,
                                  f.__closure__)
        copy.__qualname__ = f"{f.__qualname__}_serial"  # numba's cache names its files by this
        copy.__module__, copy.__doc__ = f.__module__, f.__doc__
        options = {k: v for k, v in kernel.targetoptions.items()
                   if k not in ("parallel", "nopython", "cache")}
        _serial[name] = njit(cache=True, **options)(copy)
    return _serial[name]


def is_threaded(cells: int) -> bool:
    """Whether a setup kernel on ``cells`` cells takes the threaded build."""
    return cells >= PARALLEL_FROM


def setup_kernel(name: str, cells: int):
    """The build of setup kernel ``name`` for a grid (or level) of ``cells`` cells."""
    return threaded(name) if is_threaded(cells) else serial(name)
