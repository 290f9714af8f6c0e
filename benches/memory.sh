#!/bin/bash
# Maximum resident set size of `sweep` and `pick` against the grid size.
#
# usage: bash benches/memory.sh [LOOPRATE_BIN] [POINTS...]
#   LOOPRATE_BIN  default target/release/looprate (build it first)
#   POINTS        default 500 4000 16000
#   CHARTS=0      add --no-charts (default: charts drawn, as a user runs it)
#   THREADS=N     --threads N (default: all cores)
#   METHODS=all   all eight methods instead of the case's four
#
# The case is the belt-conveyor demo (3 plant variants, q15 and f32
# formats, 3 computation delays, 4 methods) with `[rates] points` set to
# each count: points x 4 methods x 3 delays grid rows (x 8 methods with
# METHODS=all). Prints one line per run: command, points, rows, max RSS
# (MB), wall time (s).
set -euo pipefail
here=$(cd "$(dirname "$0")/.." && pwd)
bin=${1:-$here/target/release/looprate}
shift || true
counts=("$@")
[ ${#counts[@]} -eq 0 ] && counts=(500 4000 16000)
extra=()
[ "${CHARTS:-1}" = 0 ] && extra+=(--no-charts)
[ -n "${THREADS:-}" ] && extra+=(--threads "$THREADS")
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
all='["step-invariant", "ramp-invariant", "impulse-invariant", "tustin", "tustin-prewarped", "pole-zero-match", "forward-euler", "backward-euler"]'
printf '%-6s %7s %8s %12s %8s\n' command points rows "max RSS MB" "wall s"
for n in "${counts[@]}"; do
  case_file=$work/belt-$n.toml
  if [ "${METHODS:-}" = all ]; then
    sed -e "s/^points = .*/points = $n/" -e "s/^use = .*/use = $all/" \
      "$here/demo-cases/belt-conveyor.toml" >"$case_file"
  else
    sed -e "s/^points = .*/points = $n/" "$here/demo-cases/belt-conveyor.toml" >"$case_file"
  fi
  methods=$(grep -c . <<<"$(sed -n 's/^use = \[\(.*\)\]/\1/p' "$case_file" | tr ',' '\n')")
  for cmd in sweep pick; do
    log=$work/time-$cmd-$n.txt
    set +e
    /usr/bin/time -v "$bin" "$cmd" "$case_file" --quiet "${extra[@]}" --out "$work/out-$cmd-$n" \
      >/dev/null 2>"$log"
    code=$?
    set -e
    # pick exits 1 when there is no answer; anything else is a failure.
    if [ $code -ne 0 ] && [ $code -ne 1 ]; then
      echo "$cmd at $n points failed (exit $code):" >&2; cat "$log" >&2; exit 1
    fi
    kb=$(sed -n 's/.*Maximum resident set size (kbytes): //p' "$log")
    wall=$(sed -n 's/.*Elapsed (wall clock) time (h:mm:ss or m:ss): //p' "$log")
    secs=$(echo "$wall" | awk -F: '{ if (NF==3) print $1*3600+$2*60+$3; else print $1*60+$2 }')
    printf '%-6s %7d %8d %12.1f %8.1f\n' "$cmd" "$n" $((n * methods * 3)) "$(echo "$kb / 1024" | bc -l)" "$secs"
  done
done
