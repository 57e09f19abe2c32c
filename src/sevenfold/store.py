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

import os
import shutil
import uuid
import warnings
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


def _compressors():
    """Blosc's LZ4 after a byte shuffle: several times faster than zarr's default zstd on a
    smooth float64 field for about the same stored size (benchmarks/RESULTS_WRITE.md)."""
    from zarr.codecs import BloscCodec

    return [BloscCodec(cname="lz4", clevel=5, shuffle="shuffle")]


def _chunks(shape: tuple[int, ...], wanted: tuple[int, ...]) -> tuple[int, ...]:
    return tuple(max(1, min(s, c)) for s, c in zip(shape, wanted))


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
    import zarr

    final.parent.mkdir(parents=True, exist_ok=True)
    tmp = partial_path(final)
    try:
        group = zarr.open_group(store=str(tmp), mode="w", zarr_format=3)
        for name, var in variables.items():  # each array made and filled in one call
            c = _chunks(var.data.shape, chunks if var.data.ndim == 3 else (2**20,))
            group.create_array(name, data=var.data, chunks=c, dimension_names=list(var.dims),
                               attributes=var.attrs, compressors=_compressors())
        # the group's metadata written once (attrs.update would rewrite it once per key), then
        # the completion mark last
        group.update_attributes({**attrs, "sevenfold_version": __version__})
        group.attrs["complete"] = True
        with warnings.catch_warnings():
            # zarr notes that consolidated metadata is an extension to the v3 format;
            # xarray reads it and falls back to plain metadata elsewhere.
            warnings.simplefilter("ignore")
            zarr.consolidate_metadata(str(tmp))
        _replace(tmp, final)
    except BaseException:
        _settle_zarr()
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return final


def _settle_zarr(timeout: float = 60.0) -> None:
    """Wait for the writes zarr still has in flight. When one chunk's write fails (a full
    disk), zarr raises at once and its other chunk writes go on in its own thread; removed
    before they end, the temporary folder would come back with their files in it."""
    import asyncio

    from zarr.core.sync import sync

    async def rest() -> None:
        others = [t for t in asyncio.all_tasks() if t is not asyncio.current_task()]
        if others:
            await asyncio.wait(others, timeout=timeout)

    try:
        sync(rest())
    except Exception:  # pragma: no cover - a broken event loop: remove what is there
        pass


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


def not_converged_warning(attrs: dict[str, Any]) -> str | None:
    """The one warning line for a result whose solve stopped short, else None."""
    if attrs.get("converged", True):
        return None
    solver = attrs.get("solver", {})
    best, final = solver.get("best_relative_residual"), solver.get("final_relative_residual")
    rtol = solver.get("rtol")
    return (f"NOT converged ({solver.get('stop', 'stopped short')}): best relative residual "
            f"{best:.2e}, the stored solution (the {solver.get('solution_iterate', 'last')} iterate) "
            f"{final:.2e}" + (f", asked for {rtol:.1e}" if rtol is not None else "")
            + "; use it with care")


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
