"""Loading compiled kernels from numba's cache with their bitcode left unparsed
(kernels/jit.py, LazyLibrary): the names read from the machine code are the ones numba reads
from the bitcode, and a lazily loaded kernel still links into a function compiled later."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from sevenfold.kernels.jit import elf_defined_symbols


SYMBOLS = """
import json
import llvmlite.binding as ll
import numpy as np
from sevenfold.kernels import stencil, vector
from sevenfold.kernels.jit import elf_defined_symbols

x = np.arange(64.0)
out = {}
for name, kernel, args in (("threaded dot", vector.dot, (x, x)), ("serial dot", vector.dot_serial, (x, x)),
                           ("starts", stencil.starts, (np.array([0, 0, 1, 2, 2]), 3))):
    kernel(*args)  # compiled here (an empty cache): the library still holds its object code
    overload = kernel.overloads[kernel.signatures[-1]]
    _, kind, (object_code, bitcode) = overload.library.serialize_using_object_code()
    module = ll.parse_bitcode(bitcode)
    # what numba's JitEngine._load_defined_symbols records, private symbols (compiler-local
    # labels, never in an object's symbol table) left out
    defined = {v.name for values in (module.functions, module.global_variables) for v in values
               if not v.is_declaration and v.linkage != ll.Linkage.private}
    names = elf_defined_symbols(object_code)
    out[name] = {"kind": kind, "count": len(defined), "equal": names == defined,
                 "entry": overload.fndesc.llvm_cpython_wrapper_name in names}
print(json.dumps(out))
"""


@pytest.mark.skipif(sys.platform != "linux", reason="ELF objects are Linux's")
def test_the_objects_symbols_are_the_bitcodes_definitions(tmp_path: Path) -> None:
    """For a threaded kernel (a reduction over prange), a serial one and a small integer one,
    the names read from the object's symbol table are those numba reads from the bitcode,
    and the entry point numba asks the engine for is among them."""
    proc = subprocess.run([sys.executable, "-c", SYMBOLS], capture_output=True, text=True, timeout=300,
                          env={**os.environ, "NUMBA_CACHE_DIR": str(tmp_path)})
    assert proc.returncode == 0, proc.stderr
    found = json.loads(proc.stdout.splitlines()[-1])
    assert set(found) == {"threaded dot", "serial dot", "starts"}
    for name, info in found.items():
        assert info == {"kind": "object", "count": info["count"], "equal": True, "entry": True}, name
        assert info["count"] >= 2, name  # the function and its Python wrapper at least


def test_other_object_formats_are_left_to_numba() -> None:
    assert elf_defined_symbols(b"\xcf\xfa\xed\xfe" + bytes(60)) is None  # Mach-O
    assert elf_defined_symbols(b"\x7fELF\x01\x01" + bytes(58)) is None  # 32-bit ELF


HELPER = '''
from sevenfold.kernels.jit import njit

@njit(cache=True)
def scaled_sum(x, a):
    s = 0.0
    for v in x:
        s += a * v
    return s
'''

LINK = """
import json, sys
import numpy as np
sys.path.insert(0, {folder!r})
from numba import njit
import helper
from sevenfold.kernels.jit import LazyLibrary
x = np.arange(10.0)
first = helper.scaled_sum(x, 2.0)
library = helper.scaled_sum.overloads[helper.scaled_sum.signatures[0]].library
lazy = isinstance(library, LazyLibrary) and library._bitcode is not None

@njit
def outer(x):  # compiled here: links the cached helper's bitcode into its own module
    return helper.scaled_sum(x, 3.0) + 1.0

print(json.dumps({{"first": first, "outer": outer(x), "lazy_before_link": lazy,
                  "parsed_after_link": getattr(library, "_bitcode", None) is None,
                  "hits": sum(helper.scaled_sum._cache_hits.values())}}))
"""


def test_a_lazily_loaded_kernel_links_into_a_function_compiled_later(tmp_path: Path) -> None:
    """The helper compiles and is cached in one process; in the next it loads with its bitcode
    unparsed, and a function compiled there that calls it (numba links the helper's module
    into the caller's) parses it and computes 3 * 45 + 1 (sum of 0..9 = 45)."""
    (tmp_path / "helper.py").write_text(HELPER)
    env = {**os.environ, "NUMBA_CACHE_DIR": str(tmp_path / "cache")}

    def run() -> dict:
        proc = subprocess.run([sys.executable, "-c", LINK.format(folder=str(tmp_path))],
                              capture_output=True, text=True, env=env, timeout=300)
        assert proc.returncode == 0, proc.stderr
        return json.loads(proc.stdout.splitlines()[-1])

    compiled = run()
    assert compiled["hits"] == 0 and not compiled["lazy_before_link"]
    loaded = run()
    assert loaded["hits"] == 1 and loaded["lazy_before_link"] and loaded["parsed_after_link"]
    assert loaded["first"] == compiled["first"] == 90.0
    assert loaded["outer"] == compiled["outer"] == 136.0
