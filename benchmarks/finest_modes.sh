#!/bin/bash
# Same code, gmg's finest level smoothed on a float32 copy ("copy") against on the float64
# arrays with the pivots refactored every cycle ("operator", the lean path), whole
# `sevenfold run` processes alternating so that the shared machine's load hits both alike.
#   benchmarks/finest_modes.sh [N ...]      (default: 128 256 384 512; layered, as RESULTS.md)
# Prints each run's wall time, peak resident memory, the job's own split and the iterations;
# RESULTS_FINEST.md is written by hand from its output. An empty queue home: no worker takes
# the runs.
set -euo pipefail
root=$(cd "$(dirname "$0")/.." && pwd)
py=${PYTHON:-$root/.venv/bin/python}
work=$(mktemp -d /tmp/finest-modes-XXXX)
trap 'rm -rf "$work"' EXIT
cd "$work"
echo "# $(date -u '+%Y-%m-%d %H:%M UTC'), $(git -C "$root" rev-parse --short HEAD) (+ working tree), $(nproc) cores, load $(cut -d' ' -f1-3 /proc/loadavg)"
for n in "${@:-128 256 384 512}"; do
  for size in $n; do
    "$py" - "$size" "$root/benchmarks" <<'PY'
import sys
sys.path.insert(0, sys.argv[2])
import speed
open("big.toml", "w").write(speed.job_text(int(sys.argv[1]), "layered", "big.zarr"))
PY
    for mode in copy operator copy operator; do
      rm -rf big.zarr
      out=$(/usr/bin/time -f "wall %e s, peak %M KiB" env COLUMNS=200 SEVENFOLD_HOME="$work/no-queue" "$py" -c \
            "import sys, sevenfold.memory as m; m.gmg_finest = lambda cells: '$mode'; from sevenfold.cli import main; sys.exit(main(sys.argv[1:]))" \
            run --no-progress big.toml 2>&1 | tr '\n' ' ')
      echo "${size}^3 $mode: $(grep -oE 'wall [0-9.]+ s, peak [0-9]+ KiB' <<<"$out"); $(grep -oE 'job [0-9.]+ s \([^)]*\)' <<<"$out"); $(grep -oE '[0-9]+ iterations' <<<"$out" | head -1)"
    done
  done
done
