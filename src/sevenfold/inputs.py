"""Reading the arrays a job file names with ``file = ...`` (.npy or a zarr array)."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .errors import JobError


def load_array(path: Path, shape: tuple[int, ...] | None, where: str) -> np.ndarray:
    """Load a float64 array of exactly ``shape`` (any 1D length when None) from a .npy file
    or a zarr array."""
    if not path.exists():
        raise JobError(f"file {str(path)!r} does not exist", where)
    try:
        if path.suffix == ".npy":
            a = np.load(path, allow_pickle=False, mmap_mode="r")
        else:
            import zarr

            node = zarr.open(str(path), mode="r")
            if not hasattr(node, "shape"):
                raise JobError(f"{str(path)!r} is a zarr group; name the array inside it", where)
            a = node
    except JobError:
        raise
    except Exception as exc:  # numpy and zarr raise many types for malformed files
        raise JobError(f"cannot read {str(path)!r} as .npy or zarr array: {exc}", where) from None
    if shape is None and len(a.shape) != 1:
        raise JobError(f"array in {str(path)!r} has shape {list(a.shape)}; a 1D list of edges is needed", where)
    if shape is not None and tuple(a.shape) != tuple(shape):
        raise JobError(f"array in {str(path)!r} has shape {list(a.shape)}, grid.cells is {list(shape)}", where)
    if not np.issubdtype(a.dtype, np.number) or np.issubdtype(a.dtype, np.complexfloating):
        raise JobError(f"array in {str(path)!r} has dtype {a.dtype}; a real numeric array is needed", where)
    out = np.asarray(a[...], dtype=np.float64)
    if not np.all(np.isfinite(out)):
        raise JobError(f"array in {str(path)!r} contains NaN or infinite values", where)
    return out
