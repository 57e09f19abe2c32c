"""The speed suite's heterogeneous jobs in a resident process, against the baseline's own time.

    python benchmarks/resident.py [--cases layered:128 inclusions:128 inclusions:256]

A queue worker's slot process imports sevenfold and loads its compiled kernels once, then
runs job after job; this measures what that design gives the speed suite's own-time targets
(RESULTS.md): sevenfold's own time for a job in a process that has run it before (best of
two, ``column.run_resident``) beside, in the same run, the baseline's own time (assembly +
setup + solve of ``baseline.py --pattern``). Writes benchmarks/RESULTS_RESIDENT.md.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import column  # noqa: E402
import run as engine  # noqa: E402
import speed  # noqa: E402

TARGETS = speed.OWN_TARGETS  # the speed suite's own-time targets per size


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--cases", nargs="+", default=["layered:128", "inclusions:128", "inclusions:256"],
                   help="pattern:cells pairs (default layered:128 inclusions:128 inclusions:256)")
    p.add_argument("--results", type=Path, default=HERE / "RESULTS_RESIDENT.md")
    args = p.parse_args(argv)
    info = engine.machine()
    info["sevenfold revision"] = speed.revision()
    load = {"start": "{:.2f} {:.2f} {:.2f}".format(*os.getloadavg()), "others": engine.other_processes()}
    folder = Path(tempfile.mkdtemp(prefix="sevenfold-resident-"))
    rows, timed = [], []
    try:
        for case in args.cases:
            pattern, n = case.split(":")[0], int(case.split(":")[1])
            job = folder / f"{pattern}-{n}.toml"
            job.write_text(speed.job_text(n, pattern, str(folder / f"{pattern}-{n}.zarr")))
            resident = column.run_resident(folder, job)
            r = engine.run_process([sys.executable, str(HERE / "baseline.py"), "--cells", str(n), "--pattern",
                                    pattern, "--out", str(folder / "b.npy")], folder,
                                   engine.GIVEN_ENVIRONMENT)
            timed.append(r)
            b = json.loads(r.stdout.strip().splitlines()[-1])
            own = b["assembly"] + b["setup"] + b["solve"]
            rows.append((pattern, n, own, resident))
            print(f"{pattern} {n}^3: baseline own {own:.2f} s, sevenfold resident {resident:.2f} s, "
                  f"{own / resident:.1f}x", flush=True)
        load["end"] = "{:.2f} {:.2f} {:.2f}".format(*os.getloadavg())
    finally:
        shutil.rmtree(folder, ignore_errors=True)
    out = ["# The speed suite's jobs in a resident process\n",
           f"Written by `python benchmarks/resident.py {' '.join(sys.argv[1:] if argv is None else argv)}` "
           f"on {info['date']}; every number below comes from that run. Do not edit by hand.\n",
           "sevenfold's own time (job file read to result written) for the speed suite's job (RESULTS.md, "
           "method auto) in a process that has run it before, as a queue worker's slot process does; the "
           "baseline's own time (assembly + setup + solve) in the same run.\n",
           "| case | baseline own s | sevenfold resident own s | ratio | speed-suite target | verdict |",
           "|---|---|---|---|---|---|"]
    for pattern, n, own, resident in rows:
        target = TARGETS.get(n)
        verdict = "n/a" if target is None else ("met" if own / resident >= target else "**not met**")
        out.append(f"| {pattern} {n}^3 | {own:.2f} | {resident:.2f} | {own / resident:.1f}x | "
                   f"{'' if target is None else f'>= {target:g}x'} | {verdict} |")
    out.append("")
    out += speed.machine_section(info, load, timed, "sevenfold's resident runs are not among the timed children. ")
    args.results.write_text("\n".join(out))
    print(f"wrote {args.results}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
