"""Peak-memory estimates per method, and what the machine has available."""

from __future__ import annotations

import os

# Peak resident memory of a whole `sevenfold run` process, fitted as BASE_BYTES plus bytes per
# cell from runs at 64^3 to 160^3 in fresh and in development installs on the reference machine
# (benchmarks/memory_fit.py prints the fit and its errors). The base alone varies by about
# 50 MiB between installs (how much of the shared libraries the kernel maps in), so small
# jobs are estimated to within that. Per cell, for the default outputs:
#   gmg:    float64 face arrays and rhs (40), CG's x, r, p and one buffer shared by A p and
#           the preconditioner's float32 correction (32), the float32 preconditioner's copy
#           of the finest face arrays (16) with its line pivots (4) and right-hand side (4,
#           written by CG's residual update), coarse levels (~4), and the cell fields k, f and the held values (about 15 of
#           their 28 at the peak). From LEAN_FROM_CELLS up the fields are dropped as soon as
#           the face arrays exist (solvers.select.FieldLease) and rebuilt after the solve,
#           and the finest level is smoothed on the float64 arrays themselves with the pivots
#           in the shared buffer (no copy, no pivots: COPY_BYTES_PER_CELL less); below it
#           only the copy goes, when it does not fit
#   amg:    CSR matrix, pyamg's smoothed-aggregation hierarchy, CG vectors
#   fft:    fields, the transformed right-hand side and the solution (a job with holds,
#           whose balance reads conductances slab by slab, cannot take fft)
#   direct: fields and CSR, plus the LU factors, which grow like n^(4/3) on a 3D grid
# Refitted 2026-12-02 after graded grids and the lease (fft 197/316/427, amg 343/1461 at
# 64/128, direct 624/1469 at 32/40^3); gmg after the pivots and z moved into the shared
# buffer: 111-113 bytes per cell above the base at 128 and 160^3 with the fields kept
# (memory_fit.py), lean with the fields lent 77.2-77.7 at 384 and 512^3
# (benchmarks/RESULTS_FINEST.md). fft refitted 2026-12-03 once the balance stopped reading
# conductances for jobs without holds: 211/295/386 MiB at 128/160/192^3, 28 bytes per cell
# over the base (estimates +21 %, +5 %, +1 %).
BASE_BYTES = 200 * 2**20  # interpreter, numpy, scipy, numba, pyamg, zarr, compiled kernels
LEAN_GMG_BYTES_PER_CELL = 78
COPY_BYTES_PER_CELL = 24  # the float32 copy of the finest face arrays, its pivots and right-hand side
# gmg's levels in float64 (a high-contrast coefficient, solvers/precision.FLOAT32_CONTRAST): no
# float32 copy of the finest level, but its line pivots in float64 (8; the shared buffer holds
# the float64 correction) and coarse levels of twice the bytes (4 more): measured 109 bytes per
# cell above the base at 256^3 with the fields kept (float32: 117) and 88.9 lean at 336^3
# (float32: 77.0), 1e8:1 layers against 1e3:1 (2026-12-04, one-offs)
FLOAT64_LEVELS_BYTES_PER_CELL = 12
# what the gmg solve still allocates once the face arrays exist, with the float32 copy: CG's
# four vectors (32), the copy (16), pivots (4), right-hand side (4), coarse levels (4)
GMG_SOLVE_BYTES_PER_CELL = 60
# From this many cells sevenfold spends time to save memory: gmg smooths its finest level on
# the float64 arrays whatever the memory, and every method lends k, f and the held values
# while it solves (rebuilt after). Whole gmg runs with and without the copy came out equal
# within the machine's noise from 128^3 to 512^3 (the lean solve is up to a quarter slower in
# some runs, its assembly and setup 1-3 s shorter; benchmarks/RESULTS_FINEST.md); rebuilding
# the fields costs about 8 % of a 128^3 job; above about 320^3 the 35 bytes per cell are what
# decides whether a grid fits.
LEAN_FROM_CELLS = 2**25
BYTES_PER_CELL = {"gmg": 117, "amg": 640, "fft": 28, "direct": 100}
LU_BYTES_PER_FILL = 520  # times unknowns^(4/3) (SuperLU with COLAMD fills faster at 40^3)
FIELD_BYTES_PER_CELL = 8  # each derived array stored with the result


def estimate_bytes(cells: int, unknowns: int, method: str, derived_arrays: int = 0,
                   float64_levels: bool = False) -> int:
    """Estimated peak resident memory of a job in bytes (``derived_arrays`` extra outputs);
    for gmg the lean variant's from LEAN_FROM_CELLS up or when the usual one would not fit in
    the available memory, and with ``float64_levels`` a preconditioner in float64."""
    per_cell = BYTES_PER_CELL.get(method, BYTES_PER_CELL["amg"]) + FIELD_BYTES_PER_CELL * derived_arrays
    if method == "gmg" and cells >= LEAN_FROM_CELLS:
        per_cell += LEAN_GMG_BYTES_PER_CELL - BYTES_PER_CELL["gmg"]
    elif method == "gmg" and float64_levels:  # no float32 copy to drop
        per_cell -= COPY_BYTES_PER_CELL
    if method == "gmg" and float64_levels:
        per_cell += FLOAT64_LEVELS_BYTES_PER_CELL
    total = BASE_BYTES + per_cell * cells
    if method == "gmg" and not float64_levels and cells < LEAN_FROM_CELLS and total > available_bytes():
        total -= COPY_BYTES_PER_CELL * cells
    if method == "direct":
        total += int(LU_BYTES_PER_FILL * unknowns ** (4 / 3))
    return int(total)


def gmg_finest(cells: int) -> str:
    """How gmg smooths its finest level, decided once its face arrays exist: on a float32
    copy ("copy", faster on smaller grids) below LEAN_FROM_CELLS when the rest of the solve
    fits in the available memory with a tenth to spare, else on the float64 arrays themselves
    ("operator", 24 bytes per cell less)."""
    if cells < LEAN_FROM_CELLS and 1.1 * GMG_SOLVE_BYTES_PER_CELL * cells <= available_bytes():
        return "copy"
    return "operator"


def _meminfo(key: str, pages: str) -> int:
    """A /proc/meminfo entry in bytes, else the sysconf page count ``pages`` times the page size."""
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith(key + ":"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    try:
        return os.sysconf(pages) * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):
        return 2**62


def available_bytes() -> int:
    """Memory available to a new process (MemAvailable where the kernel reports it)."""
    return _meminfo("MemAvailable", "SC_AVPHYS_PAGES")


def total_bytes() -> int:
    """The machine's physical memory in bytes."""
    return _meminfo("MemTotal", "SC_PHYS_PAGES")


def human(nbytes: float) -> str:
    for unit in ("B", "KiB", "MiB", "GiB", "TiB"):
        if abs(nbytes) < 1024 or unit == "TiB":
            return f"{nbytes:.1f} {unit}" if unit != "B" else f"{int(nbytes)} B"
        nbytes /= 1024
    return f"{nbytes:.1f} TiB"


# A slot process keeps the memory its jobs free (C library malloc, glibc): large arrays come
# from the heap instead of fresh mmaps, and freed ones stay mapped for the next job. A 256^3
# job maps about 2.3 GB of new arrays, and on a shared host the first touch of new memory is
# slow and uneven (more so with huge pages, which must be compacted); the next job of a sweep
# reuses the pages already touched (benchmarks/RESULTS_HEAP.md). Environment variables read
# when the process starts; elsewhere than glibc they are ignored.
KEEP_FREED_MEMORY = {"MALLOC_MMAP_MAX_": "0", "MALLOC_TRIM_THRESHOLD_": str(1 << 40)}


# glibc's mallopt parameters (malloc.h)
_M_TRIM_THRESHOLD, _M_MMAP_MAX, _M_ARENA_MAX = -1, -4, -8


def keeps_freed_memory(cells: int, environ=os.environ) -> bool:
    """Whether a `sevenfold run` of ``cells`` cells should keep the memory it frees
    (:func:`keep_freed_memory`): below :data:`LEAN_FROM_CELLS`, where a job's peak is not what
    limits it, and unless the user set glibc's malloc variables themselves."""
    return cells < LEAN_FROM_CELLS and not any(
        name in environ for name in (*KEEP_FREED_MEMORY, "MALLOC_ARENA_MAX"))


def keep_freed_memory() -> bool:
    """From now on in this process, malloc serves large arrays from its heap, keeps what is
    freed for the next array and uses one arena for every thread (glibc's mallopt), as a
    worker's slot does (:data:`KEEP_FREED_MEMORY`): the arrays a job frees (its cell fields
    once the face arrays exist, the build's temporaries) are then reused by the solve instead of
    new memory being first-touched (slow on a virtual machine whose host takes freed memory
    back). A fresh 256^3 column run took 3.73-3.76 s whole against 4.15-4.21 s, peak 2,099
    against 2,095 MiB (one-offs; whole runs in benchmarks/RESULTS_KEEP.md). False where the C library is not
    glibc (nothing changes)."""
    libc = _libc()
    if libc is None or not hasattr(libc, "mallopt"):
        return False
    return all(libc.mallopt(option, value) == 1 for option, value in (
        (_M_MMAP_MAX, 0), (_M_TRIM_THRESHOLD, 2**31 - 1), (_M_ARENA_MAX, 1)))


def _libc():
    import ctypes

    try:
        libc = ctypes.CDLL(None)
        return libc if hasattr(libc, "malloc_trim") else None
    except (OSError, AttributeError):  # not glibc
        return None


def held_free_bytes() -> int:
    """Bytes malloc holds free for reuse in this process (glibc's mallinfo2 ``fordblks``);
    0 where that cannot be asked."""
    import ctypes

    libc = _libc()
    if libc is None or not hasattr(libc, "mallinfo2"):
        return 0

    class MallInfo2(ctypes.Structure):
        _fields_ = [(name, ctypes.c_size_t) for name in (
            "arena", "ordblks", "smblks", "hblks", "hblkhd", "usmblks", "fsmblks", "uordblks",
            "fordblks", "keepcost")]

    libc.mallinfo2.restype = MallInfo2
    return int(libc.mallinfo2().fordblks)


def release_freed_memory() -> None:
    """Give the memory malloc holds free back to the system (glibc's malloc_trim); nothing
    where there is no such call."""
    libc = _libc()
    if libc is not None:
        libc.malloc_trim(0)
