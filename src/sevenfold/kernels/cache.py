"""Whether a method's compiled kernels are already in numba's on-disk cache, so that the first
run can say, before it starts, that it compiles them once and roughly how long that takes.

numba compiles each kernel on its first call and keeps the machine code on disk (every kernel
has ``cache=True``): under ``NUMBA_CACHE_DIR`` when it is set, else in
``kernels/__pycache__`` when the package folder is writable, else in the user's cache folder.
Queue workers use the same cache as `sevenfold run`, so an install compiles once. After a
method's first solve, :func:`mark_warm` writes an empty marker file into that same folder. Its
name carries a key made of numba's and Python's versions and the size and modification time
of every kernel module, which is what numba itself checks before reusing code: a new install,
another numba or an edited kernel makes the method cold again, and deleting the cache deletes
the marker with it. The test costs one ``stat``; numba is imported to ask it where its cache
is (every method but fft needs numba anyway).
"""

from __future__ import annotations

import hashlib
import sys
from collections.abc import Iterable
from pathlib import Path

# Seconds of compiling on a first run, measured from an empty cache (2 cores; cold minus warm
# wall time, benchmarks/start_bench.py --cold, RESULTS_START.md): gmg 10.9-11.4 on the Intel
# host at load 1 (2026-12-05 14:15; compiled in two processes at once, kernels/warmup.py,
# 22 s of CPU), the AMD host's compiles about 1.25 times as long (2026-12-04); amg 18.6,
# direct 13.4 and fft 1.3 (2026-12-02, compiled single-threaded). A busy machine takes
# longer, hence "about".
COMPILE_SECONDS = {"gmg": 13, "amg": 19, "direct": 13, "fft": 1}
# A queue worker's first start compiles every method at once: the kernels the methods share
# (operator, vector updates, assembly) once, not once per method as the sum above counts
# them, and gmg's for float32 and for float64 levels (queue/child.py's warm-up jobs). Measured
# from an empty cache (its slot's "kernels warm in" line, `sevenfold demo`): 20.9-24.4 s on the
# Intel host at load 1.0-1.5 (2026-12-05; 15.7-16.1 s before the warm-up had float64 levels,
# which the demo's first job, aquifer-lens, then compiled for 7.2-7.8 s); the AMD host's
# compiles take about 1.25 times as long, a busy machine's longer.
ALL_METHODS_SECONDS = 30
# What the other methods still compile once gmg's kernels are cached (the face arrays, the
# operator and CG's vector updates they share), as after a first `sevenfold run`: measured
# 2026-12-03 from a cache holding a 128^3 gmg run's kernels, load 0.6: amg 4.1 s, direct 3.8 s
# alone; a worker's whole warm-up then took 5.5 s (4.4 s more than with everything cached),
# amg and direct sharing the CSR assembly, so together they count once; fft nothing to speak of.
AFTER_GMG_SECONDS = {"amg": 4, "direct": 4, "fft": 0}


def _kernel_files() -> list[Path]:
    return sorted(f for f in Path(__file__).parent.glob("*.py") if f.name != Path(__file__).name)


def key() -> str:
    """What the cached code depends on: numba, Python, and each kernel module's stamp."""
    import numba

    h = hashlib.sha256(f"{numba.__version__} {sys.version_info[:3]}".encode())
    for f in _kernel_files():
        st = f.stat()
        h.update(f"{f.name} {st.st_mtime_ns} {st.st_size}".encode())
    return h.hexdigest()[:16]


def _probe() -> None:
    """Stands for a kernel of this folder when numba is asked where their cache lives."""


def cache_dir() -> Path:
    """The folder where numba keeps this folder's kernels' compiled code (numba's own choice:
    its cache locators depend only on the source file's folder), found without importing or
    compiling any kernel module."""
    from numba.core.caching import FunctionCache

    return Path(FunctionCache(_probe)._cache_path)


def marker(method: str, signature: str | None = None) -> Path:
    """The marker of ``method``, or of one of its kernel signatures (``item[tag]``, from
    :func:`.warmup.signatures`)."""
    what = method if signature is None else f"{method}-{signature.replace('[', '.').rstrip(']')}"
    return cache_dir() / f"sevenfold-{what}-{key()}.warm"


def missing(method: str, needs: Iterable[str] = ()) -> frozenset[str]:
    """Those of ``needs`` (kernel signatures of ``method``) not compiled yet. Never raises:
    when the cache cannot be located the answer is none (no notice)."""
    try:
        return frozenset(s for s in needs if not marker(method, s).exists())
    except Exception:  # a numba without the attribute, an unreadable folder: say nothing
        return frozenset()


def is_cold(method: str, needs: Iterable[str] = ()) -> bool:
    """True when ``method`` has not run with the kernels as they are now, or has not yet
    compiled every signature in ``needs`` (gmg: which ones depend on the grid's size). Never
    raises: when the cache cannot be located the answer is False (no notice)."""
    if method not in COMPILE_SECONDS:
        return False
    try:
        return not marker(method).exists() or bool(missing(method, needs))
    except Exception:  # a numba without the attribute, an unreadable folder: say nothing
        return False


def mark_warm(method: str, needs: Iterable[str] = ()) -> None:
    """Record that ``method``'s kernels, with the signatures ``needs``, are compiled (after a
    solve that used them)."""
    if method not in COMPILE_SECONDS:
        return
    try:
        for path in [marker(method), *(marker(method, s) for s in needs)]:
            path.parent.mkdir(parents=True, exist_ok=True)
            path.touch()
    except Exception:  # a read-only cache: the notice just shows again next time
        pass


def notice(methods: list[str] | tuple[str, ...], seconds: float | None = None) -> str:
    """The sentence said before a first run compiles the kernels of ``methods`` (``seconds``:
    the estimate, when known better than the methods' whole compile)."""
    if seconds is None:
        seconds = (ALL_METHODS_SECONDS if set(methods) >= set(COMPILE_SECONDS)
                   else sum(COMPILE_SECONDS.get(m, 0) for m in methods))
    which = ", ".join(methods)
    return (f"first run of {which} here: compiling the numerical kernels once, about "
            f"{max(round(seconds), 1)} s on a 2-core machine (later runs load them from the cache)")


def cold_notice(method: str, needs: frozenset[str] = frozenset()) -> str | None:
    """The notice for a run with ``method`` that needs the signatures ``needs``, or None when
    its kernels are cached. With ``needs``, the estimate covers the missing signatures only."""
    if method not in COMPILE_SECONDS:
        return None
    try:
        ran = marker(method).exists()
    except Exception:  # a numba without the attribute, an unreadable folder: say nothing
        return None
    lacking = missing(method, needs)  # each marker looked at once
    if ran and not lacking:
        return None
    if not lacking:
        return notice([method])
    from .warmup import estimate

    return notice([method], estimate(lacking))


def warm_up_seconds(needs: dict[str, frozenset[str]]) -> float | None:
    """The estimate for compiling every method at once (a worker's warm-up) with the
    signatures ``needs`` per method, given what the cache holds; None to let :func:`notice`
    use the methods' measured wholes (nothing of gmg's cached)."""
    try:
        if not marker("gmg").exists():
            return None
        from .warmup import estimate

        others = [AFTER_GMG_SECONDS.get(m, COMPILE_SECONDS.get(m, 0))
                  for m in needs if m != "gmg" and is_cold(m, needs[m])]
        return estimate(missing("gmg", needs.get("gmg", frozenset()))) + max(others, default=0)
    except Exception:  # an unreadable cache: the methods' wholes
        return None
