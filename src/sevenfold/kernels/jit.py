"""numba's ``njit`` for sevenfold's kernels, with an on-disk cache that loads compiled kernels
without first loading all of numba's compiler.

Before numba's cache hands back a kernel's machine code, it refreshes the target context: it
imports and installs every lowering registry numba has (its linear algebra, random
generators, polynomials, typed containers, jitclass and more), which a compiler needs and
machine code does not. In a fresh process that is paid once, at the first kernel: a profile of
a 128^3 gmg run spent 0.63 of its 0.82 s of loading 14 kernels there (cProfile, 2026-12-04).
Loading needs numba's runtime (NRT), whose functions compiled code calls, and nothing else.
:class:`KernelCache` starts the runtime and loads; a kernel that is not in the cache compiles
as always (numba's compiler refreshes the context itself), and if the lean load raises (a
numba whose internals moved), numba's own load runs instead. benchmarks/load_bench.py measures
it against numba's own load.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from numba import njit as _numba_njit
from numba.core.caching import FunctionCache


class KernelCache(FunctionCache):
    """numba's cache of one kernel, loading its machine code without refreshing the target
    context (the compile path is numba's own)."""

    def load_overload(self, sig: Any, target_context: Any) -> Any:
        try:
            from numba.core.runtime import rtsys

            rtsys.initialize(target_context)
            with self._guard_against_spurious_io_errors():
                return self._load_overload(sig, target_context)
            return None  # the guard swallowed an I/O error: numba compiles
        except Exception:  # another numba's internals: its own load, refresh included
            return super().load_overload(sig, target_context)


def njit(**options: Any) -> Callable[[Callable], Any]:
    """``numba.njit(**options)``; with ``cache=True`` the kernel is cached in a
    :class:`KernelCache` (same files, same folder as numba's own cache)."""

    def decorate(function: Callable) -> Any:
        dispatcher = _numba_njit(**options)(function)
        if options.get("cache"):
            dispatcher._cache = KernelCache(function)
        return dispatcher

    return decorate
