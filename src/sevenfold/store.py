"""Writing results as a zarr v3 group, atomically: a temporary sibling renamed at the end.

Layout (every array carries ``dimension_names``, so ``xarray.open_zarr`` gives a Dataset):

* ``<solution>`` (x, y, z): the field, named by physics (temperature, potential, hydraulic_head, u)
* ``x``, ``y``, ``z``: cell-centre coordinates in metres
* ``residual_history`` (iteration): relative residual ||b - A u|| / ||b|| per iteration
* ``residual_seconds`` (iteration): seconds since the solve began
* derived fields of ``output.fields`` (x, y, z), and ``probe_<name>`` on
  ``probe_<name>_distance`` per probe; the probes also go to ``<stem>.probes.csv``
* group attributes: ``converged`` (false when the solve stopped short of rtol: the result
  then holds its last iterate), ``solution``, ``physics``, ``job`` (the validated spec),
  ``solver`` (method, iterations, converged, stop, stop_message, final relative residual of
  the stored solution, best relative residual recorded, solution_iterate, times),
  ``balance`` (see balance.py), ``probes``, ``sevenfold_version``,
  and ``complete`` = true, written last.
"""

from __future__ import annotations

import json
import os
import shutil
import threading
import uuid
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from . import __version__
from .errors import writing


@dataclass(frozen=True)
class Variable:
    """One array of the result, on named dimensions, with its attributes (units, long_name)."""

    data: np.ndarray
    dims: tuple[str, ...]
    attrs: dict[str, Any]


def partial_path(final: Path) -> Path:
    """A hidden sibling that no one mistakes for a finished result."""
    return final.with_name(f".{final.name}.partial-{os.getpid()}-{uuid.uuid4().hex[:8]}")


# Blosc's LZ4 after a byte shuffle: several times faster than zarr's default zstd on a smooth
# float64 field for about the same stored size (benchmarks/RESULTS_WRITE.md); as the zarr v3
# metadata names it (numcodecs numbers the shuffles: "shuffle" is 1)
BLOSC = {"cname": "lz4", "clevel": 5, "shuffle": "shuffle", "blocksize": 0}


def _blosc(typesize: int):
    """numcodecs' Blosc codec as ``BLOSC`` says, for items of ``typesize`` bytes."""
    from numcodecs.blosc import Blosc

    return Blosc(cname=BLOSC["cname"], clevel=BLOSC["clevel"], shuffle=Blosc.SHUFFLE,
                 blocksize=BLOSC["blocksize"], typesize=typesize)


def _chunks(shape: tuple[int, ...], wanted: tuple[int, ...]) -> tuple[int, ...]:
    return tuple(max(1, min(s, c)) for s, c in zip(shape, wanted))


def array_metadata(var: Variable, chunks: tuple[int, ...]) -> dict[str, Any]:
    """The zarr v3 metadata (``zarr.json``) of ``var`` stored in ``chunks``: a regular chunk
    grid, "/"-separated chunk keys, fill value 0, the little-endian bytes codec then Blosc
    (the zarr v3 specification, "Array metadata"; the fields and their order as zarr-python
    writes them)."""
    dtype = var.data.dtype
    if dtype.kind not in "biuf":
        raise TypeError(f"cannot store {dtype} arrays")
    bytes_codec: dict[str, Any] = {"name": "bytes"}
    if dtype.itemsize > 1:
        bytes_codec["configuration"] = {"endian": "little"}
    fill = False if dtype.kind == "b" else 0.0 if dtype.kind == "f" else 0
    return {
        "shape": list(var.data.shape),
        "data_type": dtype.name,
        "chunk_grid": {"name": "regular", "configuration": {"chunk_shape": list(chunks)}},
        "chunk_key_encoding": {"name": "default", "configuration": {"separator": "/"}},
        "fill_value": fill,
        "codecs": [bytes_codec, {"name": "blosc", "configuration": {"typesize": dtype.itemsize, **BLOSC}}],
        "attributes": var.attrs,
        "dimension_names": list(var.dims),
        "zarr_format": 3,
        "node_type": "array",
        "storage_transformers": [],
    }


def _write_json(path: Path, document: dict[str, Any]) -> None:
    # as zarr-python writes its metadata: indented, NaN and infinities as JSON extensions
    path.write_bytes(json.dumps(document, indent=2, allow_nan=True).encode())


# threads compressing and writing a large array's chunks (Blosc and file writes release the
# GIL); numcodecs runs Blosc single-threaded outside the main thread, so each chunk is one
# thread's, and the bytes are the same as Blosc's own threads give
WRITERS = 2


def _write_chunks(folder: Path, data: np.ndarray, chunks: tuple[int, ...], codec,
                  indices: list[tuple[int, ...]], failed: threading.Event) -> None:
    """Store the chunks at ``indices`` (see :func:`_write_array`) through one reused buffer
    (a fresh array per chunk would first-touch its pages every time); stop once ``failed``
    is set, and set it on an error."""
    buffer = np.empty(chunks, dtype=data.dtype)
    for index in indices:
        if failed.is_set():
            return
        part = data[tuple(slice(i * c, (i + 1) * c) for i, c in zip(index, chunks))]
        if not part.any():
            continue
        if part.shape != chunks:
            buffer[...] = 0
        buffer[tuple(slice(0, n) for n in part.shape)] = part
        key = folder.joinpath("c", *map(str, index))
        try:
            key.parent.mkdir(parents=True, exist_ok=True)
            key.write_bytes(codec.encode(buffer.reshape(-1).view(np.uint8)))
        except BaseException:
            failed.set()
            raise


def _write_array(folder: Path, var: Variable, chunks: tuple[int, ...], codec) -> dict[str, Any]:
    """Store ``var`` under ``folder`` chunk by chunk; returns its metadata. A chunk is stored
    whole (an edge chunk padded with the fill value), little-endian in C order, compressed;
    a chunk of fill values only is left out, as zarr-python leaves it (readers fill it in)."""
    metadata = array_metadata(var, chunks)
    folder.mkdir()
    data = var.data.astype(var.data.dtype.newbyteorder("<"), copy=False)
    indices = list(np.ndindex(*(-(-n // c) for n, c in zip(data.shape, chunks))))
    failed = threading.Event()
    if len(indices) < 2 * WRITERS:
        _write_chunks(folder, data, chunks, codec, indices, failed)
    else:
        from concurrent.futures import ThreadPoolExecutor  # (logging with it: not for `check`)

        with ThreadPoolExecutor(WRITERS) as pool:  # (left only when every writer has stopped)
            for done in [pool.submit(_write_chunks, folder, data, chunks, codec, indices[k::WRITERS], failed)
                         for k in range(WRITERS)]:
                done.result()  # (an error, a full disk, raised here)
    _write_json(folder / "zarr.json", metadata)
    return metadata


def write_result(
    final: Path,
    variables: dict[str, Variable],
    attrs: dict[str, Any],
    chunks: tuple[int, int, int],
) -> Path:
    """Write ``variables`` and group ``attrs`` to ``final`` through a temporary sibling.

    On any error the temporary is removed and ``final`` is left as it was; an error of the
    file system (a folder that cannot be made or written, a full disk) raises OutputError.
    """
    with writing(final, "the result"):
        return _write_result(Path(final), variables, attrs, chunks)


def _write_result(final: Path, variables: dict[str, Variable], attrs: dict[str, Any],
                  chunks: tuple[int, int, int]) -> Path:
    """The zarr v3 group written directly, with Blosc from numcodecs (zarr's own codec
    library): importing zarr cost a fresh process 0.14-0.16 s, numcodecs' Blosc 0.03 s
    (benchmarks/ANALYSIS.md). The group's metadata is written last, with the arrays' metadata
    consolidated into it (zarr-python's inline consolidated metadata, which xarray reads
    first) and ``complete`` = true as its last attribute; the folder is renamed into place
    after that."""
    final.parent.mkdir(parents=True, exist_ok=True)
    tmp = partial_path(final)
    try:
        tmp.mkdir()
        metadata = {}
        for name, var in variables.items():
            c = _chunks(var.data.shape, chunks if var.data.ndim == 3 else (2**20,))
            metadata[name] = _write_array(tmp / name, var, c, _blosc(var.data.dtype.itemsize))
        _write_json(tmp / "zarr.json", {
            "attributes": {**attrs, "sevenfold_version": __version__, "complete": True},
            "zarr_format": 3,
            "consolidated_metadata": {"kind": "inline", "must_understand": False,
                                      "metadata": dict(sorted(metadata.items()))},
            "node_type": "group",
        })
        _replace(tmp, final)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return final


def _replace(tmp: Path, final: Path) -> None:
    """Move ``tmp`` to ``final``; an older result there is set aside first, then removed."""
    old = None
    if final.exists():
        old = final.with_name(f".{final.name}.old-{uuid.uuid4().hex[:8]}")
        os.rename(final, old)
    os.rename(tmp, final)
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)


def is_complete(path: Path) -> bool:
    """True when ``path`` is a finished sevenfold result."""
    import zarr

    try:
        return bool(zarr.open_group(store=str(path), mode="r").attrs.get("complete", False))
    except Exception:
        return False


def read_attrs(path: Path) -> dict[str, Any]:
    """A result's group attributes, read from its ``zarr.json`` (the zarr v3 group metadata)
    without loading zarr; {} when there is none. Complete only when ``complete`` is true."""
    import json

    try:
        with open(Path(path) / "zarr.json", encoding="utf-8") as f:
            return dict(json.load(f).get("attributes") or {})
    except (OSError, ValueError, AttributeError):
        return {}


def not_converged_mark(attrs: dict[str, Any]) -> str | None:
    """The short line for a result whose solve stopped short (its figures' titles), else None:
    why it stopped, the best relative residual reached and the rtol asked for."""
    if attrs.get("converged", True):
        return None
    solver = attrs.get("solver", {})
    best, rtol = solver.get("best_relative_residual"), solver.get("rtol")
    return (f"NOT converged: {solver.get('stop', 'stopped short')}"
            + (f", best relative residual {best:.2e}" if best is not None else "")
            + (f" (rtol {rtol:.0e})" if rtol is not None else ""))


def not_converged_warning(attrs: dict[str, Any]) -> str | None:
    """The one warning line for a result whose solve stopped short (:func:`not_converged_mark`
    and the stored solution's own residual), else None."""
    mark = not_converged_mark(attrs)
    if mark is None:
        return None
    solver = attrs.get("solver", {})
    return (f"{mark}; the stored solution (the {solver.get('solution_iterate', 'last')} iterate) "
            f"{solver.get('final_relative_residual', float('nan')):.2e}; use it with care")


def write_probe_csv(path: Path, probes, solution: str, units: str) -> Path:
    """One row per probe sample: probe, kind, sample, x, y, z, distance (m), value.

    ``probes`` are :class:`sevenfold.probes.ProbeValues`. Written through a temporary
    sibling and renamed, like the result.
    """
    import csv

    path = Path(path)
    tmp = path.with_name(f".{path.name}.partial-{os.getpid()}")
    with writing(path, "the probe table"):
        try:
            with open(tmp, "w", newline="", encoding="utf-8") as fh:
                w = csv.writer(fh)
                w.writerow(["probe", "kind", "sample", "x_m", "y_m", "z_m", "distance_m", f"{solution} ({units})"])
                for p in probes:
                    for i, (pt, d, v) in enumerate(zip(p.points, p.distance, p.values)):
                        w.writerow([p.name, p.kind, i, *(repr(float(c)) for c in pt), repr(float(d)),
                                    repr(float(v))])
            os.replace(tmp, path)
        except BaseException:
            tmp.unlink(missing_ok=True)
            raise
    return path
