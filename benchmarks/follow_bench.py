"""`sevenfold run` handed to a worker: how late it reports the job's end, with the job's bell
and without.

    python benchmarks/follow_bench.py [--sizes 128 256] [--rounds 4]

``sevenfold run -q JOB`` with an idle worker queues the job and follows it: it looks at the
queue every 0.05 s for the job's first 2 s and every 0.5 s after (``queue.handoff``), so a
job of a few seconds was reported up to half a second after it ended. The worker now rings
the job's bell (``queue.wake.job_bell``) when the run ends and ``run`` wakes at once.

One one-slot worker (column.py's 1000:1 column job, n^3 cells); ``run -q`` alternates between
the command as shipped (*bell*) and the same command with the follower's bell never
listening (*polling*: what ``run`` did before), ``--rounds`` each per size. *Outside the job*
= the ``run`` process's wall seconds minus the job's own seconds in the slot (its result's
``seconds.job``): process start, validation, queueing, the slot's hand-back and the report.
Writes benchmarks/RESULTS_FOLLOW.md.
"""

from __future__ import annotations

import statistics
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import column  # noqa: E402
import run as engine  # noqa: E402
from handed import Worker  # noqa: E402

# `sevenfold run` with the follower's bell never listening: it looks at the queue on its
# poll alone, as before the worker rang it
POLLING = """
import sys
from sevenfold.queue import handoff, wake
class Deaf(wake.Bell):
    def __init__(self, home_root, name):
        self._sock = None
handoff.Bell = Deaf
from sevenfold.cli import main
sys.exit(main())
"""


def main(argv: list[str] | None = None) -> int:
    p = engine.ab_parser(__doc__, "RESULTS_FOLLOW.md", rounds=4)
    p.add_argument("--sizes", nargs="+", type=int, default=[128, 256])
    args = p.parse_args(argv)
    lines, info = engine.report_head("follow_bench.py", argv, "A handed job's end: rung or polled")
    lines += engine.opening(
        __doc__, "Seconds, median of the rounds (all rounds in order in the last column).",
        ["cells", "follower", "run wall s", "job s in the slot", "outside the job s", "outside, bell - polling",
         "outside the job, every round"])
    commands = {"bell": None, "polling": [sys.executable, "-c", POLLING]}
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        worker = Worker(folder)
        try:
            worker.wait_ready()
            for n in args.sizes:
                result = folder / f"column-{n}.zarr"
                job = folder / f"column-{n}.toml"
                job.write_text(column.job_text(n, result))
                worker.flow(job, result)  # untimed: the slot's first job of this size
                runs: dict[str, list[tuple[float, float]]] = {side: [] for side in commands}
                for _ in range(args.rounds):
                    for side, command in commands.items():
                        runs[side].append(worker.flow(job, result, command))
                        wall, own = runs[side][-1]
                        print(n, side, f"{wall:.2f} {own:.2f} {wall - own:.2f}", flush=True)
                outside = {side: [w - o for w, o in r] for side, r in runs.items()}
                for side, r in runs.items():
                    lines.append(
                        f"| {n}^3 | {side} | {statistics.median(w for w, _ in r):.2f} | "
                        f"{statistics.median(o for _, o in r):.2f} | {statistics.median(outside[side]):.2f} | "
                        + (f"{statistics.median(outside['bell']) - statistics.median(outside['polling']):+.2f}"
                           if side == "bell" else "")
                        + " | " + " ".join(f"{x:.2f}" for x in outside[side]) + " |")
        finally:
            worker.stop()
    engine.write_report(args.results, lines, info)
    return 0


if __name__ == "__main__":
    sys.exit(main())
