"""Run sevenfold on kernels compiled ahead of time, without importing numba (a prototype).

    python benchmarks/aot_launch.py AOTDIR run -q JOB.toml   # `sevenfold run` on the AOT kernels
    python benchmarks/aot_launch.py AOTDIR --load-only       # import the AOT module and exit

AOTDIR holds the extension module and its table (both written by ``aot_bench.py --build``).
Before sevenfold is imported, a stand-in ``numba`` module goes into ``sys.modules``: its
``njit`` hands each kernel module the AOT build of that kernel (chosen per call by the
arguments' types, as numba's dispatcher would) and any kernel without one a function that
raises, so nothing falls back to slow Python silently. It also provides what else sevenfold
asks of numba in a gmg run: ``prange``, ``get_num_threads`` (1: the AOT kernels are serial),
``set_num_threads`` and ``__version__``. ``kernels/cache.py`` finds no ``numba.core`` and so
says, as it does on any such failure, that nothing needs compiling. The process exits with
status 3 if the real numba or llvmlite was imported after all.

Imports only the standard library and numpy here, so that its own cost stays small.
"""

from __future__ import annotations

import importlib
import sys
import time
import types
from collections.abc import Callable
from pathlib import Path

import numpy as np

TABLE_MODULE = "sevenfold_aot_table"  # written by aot_bench.py next to the extension


def tag(value: object) -> str:
    """The type key of one argument, as aot_bench.py's ``type_tag`` writes it for numba types."""
    if isinstance(value, np.ndarray):
        layout = "C" if value.flags.c_contiguous else "F" if value.flags.f_contiguous else "A"
        return f"{value.dtype.str}{value.ndim}{layout}"
    if isinstance(value, (bool, np.bool_)):
        return "b"
    if isinstance(value, (int, np.integer)):
        return "i"
    if isinstance(value, (float, np.floating)):
        return "f"
    if isinstance(value, tuple):
        return "(" + ",".join(tag(v) for v in value) + ")"
    return type(value).__name__


def example(key: str) -> tuple:
    """Tiny arguments of the types a key (tags joined by ';') names: what aot_bench.py's
    loading child hands ``numba.typeof`` to load a jit kernel from the cache without running it."""
    def one(t: str) -> object:
        if t.startswith("("):
            return tuple(one(s) for s in t[1:-1].split(","))
        if t in ("b", "i", "f"):
            return {"b": False, "i": 1, "f": 1.0}[t]
        return np.zeros((2,) * int(t[3:-1]), dtype=t[:3])

    return tuple(one(t) for t in key.split(";"))


def dispatcher(name: str, builds: dict[str, Callable]) -> Callable:
    """One kernel: the AOT build matching the arguments' types."""
    def call(*args):
        key = ";".join(tag(a) for a in args)
        try:
            build = builds[key]
        except KeyError:
            raise TypeError(f"{name}: no ahead-of-time build for ({key})") from None
        return build(*args)

    call.__name__ = name.rsplit(".", 1)[1]
    call.__qualname__ = call.__name__
    return call


def missing(name: str) -> Callable:
    def call(*args):
        raise NotImplementedError(f"{name} was not compiled ahead of time")

    return call


def install(folder: Path) -> types.ModuleType:
    """Put the stand-in numba into sys.modules; returns the AOT extension module."""
    sys.path.insert(0, str(folder))
    table = importlib.import_module(TABLE_MODULE)
    ext = importlib.import_module(table.MODULE)
    kernels = {name: dispatcher(name, {key: getattr(ext, sym) for key, sym in builds.items()})
               for name, builds in table.TABLE.items()}

    def njit(*args, **options):
        def decorate(fn: Callable) -> Callable:
            name = f"{fn.__module__}.{fn.__name__}"
            return kernels.get(name) or missing(name)

        return decorate(args[0]) if args and callable(args[0]) else decorate

    numba = types.ModuleType("numba", "stand-in: kernels compiled ahead of time")
    numba.__version__ = f"aot-{table.MODULE}"
    numba.njit = njit
    numba.prange = range
    numba.get_num_threads = lambda: 1
    numba.set_num_threads = lambda n: None
    sys.modules["numba"] = numba
    # the kernels' own njit (kernels/jit.py) loads numba's cache machinery: the stand-in's instead
    jit = types.ModuleType("sevenfold.kernels.jit", "stand-in: kernels compiled ahead of time")
    jit.njit = njit
    sys.modules[jit.__name__] = jit
    return ext


def real_numba_loaded() -> list[str]:
    return [m for m in sys.modules if m.startswith(("numba.", "llvmlite"))]


def main(argv: list[str]) -> int:
    t0 = time.perf_counter()
    install(Path(argv[0]).resolve())
    if argv[1:] == ["--load-only"]:
        print(f"aot_import={time.perf_counter() - t0:.6f}")  # the AOT module and its table
        return 0
    from sevenfold.cli import main as sevenfold

    code = sevenfold(argv[1:])
    if real_numba_loaded():
        print("aot_launch: numba was imported:", real_numba_loaded(), file=sys.stderr)
        return 3
    return code


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
