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

Each function in a kernel's machine code comes with an environment that holds its module's
globals, and unpickling it imports that module. The globals are read only by object-mode code
(``numba.core.pylowering``); sevenfold's kernels are all nopython. Yet a kernel that allocates
(``np.empty``) or reduces in a ``prange`` carries numba's own helpers, whose environments
import ``numba.np.arrayobj`` and ``numba.np.npyimpl`` (19 numba modules in all) for modules of
numba's compiler. The lean load gives an environment of a numba module not yet imported its
name alone instead: whole `sevenfold run` processes took 0.85x (32^3) and 0.91x (128^3) the
time of numba's rebuild, 0.11-0.12 s less (benchmarks/RESULTS_ENVIRONMENTS_ALONE.md).

A cached kernel also carries its whole LLVM bitcode, which numba parses on every load, then
walks for the names the machine code defines. The bitcode serves only a later compile that
links the kernel into another function, which a run that finds its kernels cached never does.
:class:`LazyLibrary` keeps the bytes and parses them on first use, and reads the names from
the machine code's ELF symbol table instead (:func:`elf_defined_symbols`); other object
formats load as numba loads them.
"""

from __future__ import annotations

import struct
import sys
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import Any

from numba import njit as _numba_njit
from numba.core import environment
from numba.core.caching import FunctionCache
from numba.core.codegen import JITCodeLibrary


_rebuild_env = environment._rebuild_env  # numba's own, restored after every lean load


def _lean_environment(modname: str, consts: list, env_name: str) -> environment.Environment:
    """``numba.core.environment._rebuild_env``, without importing a numba module for the
    globals that nopython code never reads (its name stands for them)."""
    if (modname in sys.modules or not modname.startswith("numba.")
            or environment.lookup_environment(env_name) is not None):
        return _rebuild_env(modname, consts, env_name)
    env = environment.Environment({"__name__": modname})
    env.consts[:] = consts
    env.env_name = env_name
    environment.Environment._memo[env_name] = env
    return env


@contextmanager
def _lean_environments() -> Iterator[None]:
    """Unpickled environments rebuilt by :func:`_lean_environment` (pickle looks the rebuild
    function up by name; numba loads under its compiler lock, one load at a time)."""
    environment._rebuild_env = _lean_environment
    try:
        yield
    finally:
        environment._rebuild_env = _rebuild_env


def elf_defined_symbols(object_code: bytes) -> frozenset[str] | None:
    """The names of the functions and data a 64-bit little-endian ELF relocatable object
    defines (every symbol table entry with a section, sections and file names left out), or
    None for any other object format. Layouts: the ELF-64 object file format (the System V
    ABI's gABI, "Sections" and "Symbol Table")."""
    if object_code[:6] != b"\x7fELF\x02\x01":  # magic, 64-bit, little-endian
        return None
    shoff, = struct.unpack_from("<Q", object_code, 0x28)
    shentsize, shnum = struct.unpack_from("<HH", object_code, 0x3A)
    sections = [struct.unpack_from("<IIQQQQIIQQ", object_code, shoff + i * shentsize)
                for i in range(shnum)]
    names: set[str] = set()
    for _, kind, _, _, offset, size, link, _, _, entsize in sections:
        if kind != 2:  # SHT_SYMTAB
            continue
        strings = sections[link]
        table = object_code[strings[4]:strings[4] + strings[5]]
        for name, info, _, shndx, _, _ in struct.iter_unpack(
                "<IBBHQQ", object_code[offset:offset + size - size % (entsize or 24)]):
            if shndx and name and info & 0xF not in (3, 4):  # defined; not SECTION, FILE
                names.add(table[name:table.index(b"\0", name)].decode())
    return frozenset(names)


class LazyLibrary(JITCodeLibrary):
    """numba's library of JIT-compiled code, whose bitcode for linking (``_shared_module``),
    when loaded from the cache, is parsed on first use."""

    _bitcode: bytes | None = None

    @property
    def _shared_module(self) -> Any:
        if self._bitcode is not None:
            import llvmlite.binding as ll

            self.__dict__["_module"] = ll.parse_bitcode(self._bitcode)
            self._bitcode = None
        return self.__dict__.get("_module")

    @_shared_module.setter
    def _shared_module(self, module: Any) -> None:
        self.__dict__["_module"] = module
        self._bitcode = None

    @classmethod
    def _unserialize(cls, codegen: Any, state: tuple) -> Any:
        """numba's ``CPUCodeLibrary._unserialize`` for object code, with the bitcode kept
        unparsed and the defined names read from the object."""
        name, kind, data = state
        symbols = elf_defined_symbols(data[0]) if kind == "object" else None
        if symbols is None:
            return super()._unserialize(codegen, state)
        library = cls(codegen, name)
        library.enable_object_caching()
        library._set_compiled_object(data[0])
        library._bitcode = data[1]
        library._finalize_final_module()
        codegen._engine._defined_symbols |= symbols
        return library


@contextmanager
def _lazy_libraries(codegen: Any) -> Iterator[None]:
    """Libraries that ``codegen`` loads from the cache are :class:`LazyLibrary` ones."""
    before = vars(codegen).get("_library_class")
    codegen._library_class = LazyLibrary
    try:
        yield
    finally:
        if before is None:
            del codegen._library_class  # numba's class attribute again
        else:
            codegen._library_class = before


class KernelCache(FunctionCache):
    """numba's cache of one kernel, loading its machine code without refreshing the target
    context (the compile path is numba's own)."""

    def load_overload(self, sig: Any, target_context: Any) -> Any:
        try:
            from numba.core.runtime import rtsys

            rtsys.initialize(target_context)
            with (self._guard_against_spurious_io_errors(), _lean_environments(),
                  _lazy_libraries(target_context.codegen())):
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
