"""Peak-memory estimates per method, and what the machine has available."""

from __future__ import annotations

import os

# Bytes per cell or unknown, measured as peak RSS on this project's reference machine
# (see benchmarks/RESULTS.md); fields: k, f, held mask and values, row numbers, full solution.
FIELD_BYTES_PER_CELL = 41
SYSTEM_BYTES_PER_UNKNOWN = {
    # CSR (7 entries of value+index, row pointer), right-hand side, CG vectors
    "amg": 92 + 8 + 56 + 160,  # + smoothed-aggregation hierarchy
    "direct": 92 + 8 + 16,
    # no matrix: the right-hand side is transformed in place in the padded solution buffer;
    # 8 more for an out-of-place transform
    "fft": 8 + 8,
}
BASE_BYTES = 250 * 2**20  # interpreter, numpy, scipy, numba, pyamg, zarr once imported


def estimate_bytes(cells: int, unknowns: int, method: str) -> int:
    """Estimated peak resident memory of a job in bytes."""
    per = SYSTEM_BYTES_PER_UNKNOWN.get(method, SYSTEM_BYTES_PER_UNKNOWN["amg"])
    total = BASE_BYTES + FIELD_BYTES_PER_CELL * cells + per * unknowns
    if method == "direct":
        total += int(200 * unknowns ** (4 / 3))  # LU fill of a 3D grid graph grows like n^(4/3)
    return int(total)


def available_bytes() -> int:
    """Memory available to a new process (MemAvailable where the kernel reports it)."""
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    try:
        return os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):
        return 2**62


def human(nbytes: float) -> str:
    for unit in ("B", "KiB", "MiB", "GiB", "TiB"):
        if abs(nbytes) < 1024 or unit == "TiB":
            return f"{nbytes:.1f} {unit}" if unit != "B" else f"{int(nbytes)} B"
        nbytes /= 1024
    return f"{nbytes:.1f} TiB"
