"""Writing a result: zarr's default compressor against the one sevenfold uses.

    python benchmarks/write_bench.py [--n 256] [--repeats 3]

A smooth float64 field of n^3 cells (the speed suite's layered solution: sevenfold solves it
first, gmg, rtol 1e-8) is written as one zarr v3 array in sevenfold's chunks, once with zarr's
default codecs (zstd) and once with ``store._compressors()`` (Blosc LZ4 after a byte shuffle),
best of ``--repeats``; the table gives seconds and the stored size against the raw bytes.
Writes benchmarks/RESULTS_WRITE.md.
"""

from __future__ import annotations

import argparse
import shutil
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import run as engine  # noqa: E402
import speed  # noqa: E402


def stored_bytes(path: Path) -> int:
    return sum(f.stat().st_size for f in path.rglob("*") if f.is_file())


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--n", type=int, default=256)
    p.add_argument("--repeats", type=int, default=3)
    p.add_argument("--results", type=Path, default=HERE / "RESULTS_WRITE.md")
    args = p.parse_args(argv)
    import zarr

    from sevenfold.runner import run_job
    from sevenfold.spec import load_job
    from sevenfold.store import _compressors

    folder = Path(tempfile.mkdtemp(prefix="sevenfold-write-"))
    try:
        job = folder / "job.toml"
        job.write_text(speed.job_text(args.n, "layered", "solution.zarr"))
        run_job(job)
        group = zarr.open_group(str(folder / "solution.zarr"), mode="r")
        u = group[group.attrs["solution"]][...]
        chunks = load_job(job).output.chunks
        rows = []
        for name, codecs in (("zarr's default (zstd)", "auto"), ("Blosc LZ4 + byte shuffle (sevenfold)",
                                                                  _compressors())):
            best, size = float("inf"), 0
            for _ in range(args.repeats):
                out = folder / "out.zarr"
                shutil.rmtree(out, ignore_errors=True)
                t = time.perf_counter()
                g = zarr.open_group(str(out), mode="w", zarr_format=3)
                a = g.create_array("u", shape=u.shape, chunks=tuple(min(c, n) for c, n in zip(chunks, u.shape)),
                                   dtype=u.dtype, compressors=codecs)
                a[...] = u
                best = min(best, time.perf_counter() - t)
                size = stored_bytes(out)
            rows.append((name, best, size / u.nbytes))
            print(f"{name}: {best:.2f} s, {size / u.nbytes:.2f} of raw", flush=True)
    finally:
        shutil.rmtree(folder, ignore_errors=True)
    head, info = engine.report_head("write_bench.py", argv, "Writing a result: compressors")
    base = rows[0][1]
    out = head + [
           f"The speed suite's layered solution at {args.n}^3 (float64, {u.nbytes / 1e6:.0f} MB raw) written "
           f"as one zarr v3 array in chunks of {chunks}, best of {args.repeats}.", "",
           "| codecs | seconds | ratio to the default | stored / raw |", "|---|---|---|---|"]
    out += [f"| {name} | {s:.2f} | {s / base:.2f} | {r:.2f} |" for name, s, r in rows]
    engine.write_report(args.results, out, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
