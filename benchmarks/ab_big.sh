#!/bin/bash
# Same-run A/B of one big job, whole `sevenfold run` processes: this tree (src/) against another
# revision's, alternating so that a change in the shared machine's load hits both alike.
#   benchmarks/ab_big.sh BASE_REVISION [N] [PATTERN]     (defaults: 512, layered)
#   LEAN=1 benchmarks/ab_big.sh ...   gmg's finest level forced onto the float64 arrays (the
#                                     lean path memory.gmg_finest takes when memory is short)
# Prints each run's wall time, peak resident memory and the job's own split; each code first
# runs the 64^3 job unmeasured (it compiles or loads the kernels). Runs solve in their own
# process (an empty queue home: no running worker takes them).
set -euo pipefail
base=$1; n=${2:-512}; pattern=${3:-layered}
root=$(cd "$(dirname "$0")/.." && pwd)
py=${PYTHON:-$root/.venv/bin/python}
work=$(mktemp -d /tmp/ab-big-XXXX)
mkdir -p "$work/base" && git -C "$root" archive "$base" src | tar -x -C "$work/base"
"$py" - "$work" "$n" "$pattern" "$root/benchmarks" <<'PY'
import sys
from pathlib import Path
sys.path.insert(0, sys.argv[4])
import speed
work, n, pattern = Path(sys.argv[1]), int(sys.argv[2]), sys.argv[3]
(work / "big.toml").write_text(speed.job_text(n, pattern, "big.zarr"))
(work / "small.toml").write_text(speed.job_text(64, pattern, "small.zarr"))
PY
cd "$work"
entry=(-m sevenfold.cli)
[ -n "${LEAN:-}" ] && entry=(-c "import sys, sevenfold.memory as m; m.gmg_finest = lambda cells: 'operator'; from sevenfold.cli import main; sys.exit(main(sys.argv[1:]))")
echo "# $(date -u '+%Y-%m-%d %H:%M UTC'), $(git -C "$root" rev-parse --short HEAD) (+ working tree) against $base, ${n}^3 $pattern${LEAN:+ (lean path)}, $(nproc) cores, load $(cut -d' ' -f1-3 /proc/loadavg)"
for code in this "$base" this "$base"; do
  src=$root/src; [ "$code" = this ] || src=$work/base/src
  SEVENFOLD_HOME="$work/no-queue" PYTHONPATH=$src "$py" -m sevenfold.cli run -q small.toml >/dev/null 2>&1
  rm -rf big.zarr
  out=$(/usr/bin/time -f "wall %e s, peak %M KiB" env PYTHONPATH="$src" COLUMNS=200 SEVENFOLD_HOME="$work/no-queue" \
        "$py" "${entry[@]}" run --no-progress big.toml 2>&1 | tr '\n' ' ')
  echo "$code: $(grep -oE 'wall [0-9.]+ s, peak [0-9]+ KiB' <<<"$out"); $(grep -oE 'job [0-9.]+ s \([^)]*\)' <<<"$out")"
done
rm -rf "$work"
