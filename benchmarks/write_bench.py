"""Writing a result: zarr's default compressor against the one sevenfold uses.

    python benchmarks/write_bench.py [--n 256] [--repeats 3] [--against REVISION]

A smooth float64 field of n^3 cells (the speed suite's layered solution: sevenfold solves it
first, gmg, rtol 1e-8) is written as one zarr v3 array in sevenfold's chunks, once with zarr's
default codecs (zstd) and once with the Blosc of ``store.BLOSC`` (LZ4 after a byte shuffle),
best of ``--repeats``; the table gives seconds and the stored size against the raw bytes.
With ``--against``, also the whole result as `run_job` writes it (every variable and the
attributes, through `store.write_result`) by the current store and by the store at that git
revision, alternating, best of ``--repeats``, at 128^3 and at n^3.
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
import wall_bench  # noqa: E402


def captured_write(job: Path) -> tuple:
    """Run ``job`` and return the arguments its result was written with."""
    from sevenfold import runner

    seen = []
    real = runner.write_result
    runner.write_result = lambda *a, **k: seen.append((a, k)) or real(*a, **k)
    try:
        runner.run_job(job)
    finally:
        runner.write_result = real
    return seen[-1]


def whole_writes(folder: Path, sizes: list[int], repeats: int, revision: str) -> list[tuple]:
    """(n, seconds now, seconds at ``revision``): the whole result written by each store."""
    from sevenfold import store

    then = wall_bench.module_at(revision, "sevenfold.store")
    rows = []
    for n in sizes:
        job = folder / f"whole-{n}.toml"
        job.write_text(speed.job_text(n, "layered", f"whole-{n}.zarr"))
        (final, *rest), kwargs = captured_write(job)
        best = {"now": float("inf"), "then": float("inf")}
        for _ in range(repeats):
            for label, module in (("then", then), ("now", store)):
                out = folder / f"ab-{label}.zarr"
                t = time.perf_counter()
                module.write_result(out, *rest, **kwargs)
                best[label] = min(best[label], time.perf_counter() - t)
                shutil.rmtree(out)
        rows.append((n, best["now"], best["then"]))
        print(f"whole result {n}^3: now {best['now']:.3f} s, at {revision} {best['then']:.3f} s", flush=True)
    return rows


def stored_bytes(path: Path) -> int:
    return sum(f.stat().st_size for f in path.rglob("*") if f.is_file())


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--n", type=int, default=256)
    p.add_argument("--repeats", type=int, default=3)
    p.add_argument("--results", type=Path, default=HERE / "RESULTS_WRITE.md")
    p.add_argument("--against", metavar="REVISION",
                   help="also write the whole result with the store at this git revision")
    args = p.parse_args(argv)
    import zarr
    from zarr.codecs import BloscCodec

    from sevenfold.runner import run_job
    from sevenfold.spec import load_job
    from sevenfold.store import BLOSC

    folder = Path(tempfile.mkdtemp(prefix="sevenfold-write-"))
    try:
        job = folder / "job.toml"
        job.write_text(speed.job_text(args.n, "layered", "solution.zarr"))
        run_job(job)
        group = zarr.open_group(str(folder / "solution.zarr"), mode="r")
        u = group[group.attrs["solution"]][...]
        chunks = load_job(job).output.chunks
        rows = []
        ours = [BloscCodec(cname=BLOSC["cname"], clevel=BLOSC["clevel"], shuffle=BLOSC["shuffle"])]
        for name, codecs in (("zarr's default (zstd)", "auto"), ("Blosc LZ4 + byte shuffle (sevenfold)", ours)):
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
        whole = whole_writes(folder, sorted({128, args.n}), args.repeats, args.against) if args.against else []
    finally:
        shutil.rmtree(folder, ignore_errors=True)
    head, info = engine.report_head("write_bench.py", argv, "Writing a result: compressors")
    base = rows[0][1]
    out = head + [
           f"The speed suite's layered solution at {args.n}^3 (float64, {u.nbytes / 1e6:.0f} MB raw) written "
           f"as one zarr v3 array in chunks of {chunks}, best of {args.repeats}.", "",
           "| codecs | seconds | ratio to the default | stored / raw |", "|---|---|---|---|"]
    out += [f"| {name} | {s:.2f} | {s / base:.2f} | {r:.2f} |" for name, s, r in rows]
    if whole:
        out += ["", f"## The whole result: the store now against the store at {args.against}", "",
                "The speed suite's layered job's result as `run_job` writes it (the solution, "
                "coordinates, edges, residual history, and the attributes), by "
                "`store.write_result` now and as it was at that revision (loaded from git "
                f"beside it), alternating, best of {args.repeats}.", "",
                f"| cells | now s | at {args.against} s | now / then |", "|---|---|---|---|"]
        out += [f"| {n}^3 | {a:.3f} | {b:.3f} | {a / b:.2f} |" for n, a, b in whole]
    engine.write_report(args.results, out, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
