#!/usr/bin/env bash
# looprate vs. the same per-point work written by hand with scipy.signal.
# Usage: bash benches/compare/run.sh   (from anywhere inside the repository)
# Env: SCIPY_POINTS (default 60), SEED (default 1), REPEAT (alternating rounds,
#      default 3: each side is quoted at its best), KEEP=1 keeps the temp dir,
#      SCIPY_ARGS="--no-disturbance" for the lighter baseline without the
#      load-disturbance run (what earlier runs compared against).
set -euo pipefail

ROOT=$(cd "$(dirname "${BASH_SOURCE[0]}")/../.." && pwd)
HERE="$ROOT/benches/compare"
BIN="$ROOT/target/release/looprate"
SCIPY_POINTS=${SCIPY_POINTS:-60}
REPEAT=${REPEAT:-3}
SEED=${SEED:-1}
PY=${PYTHON:-python3}

if [[ ! -x "$BIN" ]] || [[ -n "$(find "$ROOT/src" "$ROOT/Cargo.toml" -newer "$BIN" 2>/dev/null | head -n1)" ]]; then
    echo "building looprate (release) ..." >&2
    (cd "$ROOT" && cargo build --release --quiet)
fi

TMP=$(mktemp -d)
if [[ "${KEEP:-0}" != 1 ]]; then trap 'rm -rf "$TMP"' EXIT; else echo "temp dir: $TMP" >&2; fi
CASE="$ROOT/benches/cases/compare.toml"

# The same polynomials for the scipy script, taken from looprate's own parse
# (so both sides evaluate exactly the same coefficients).
"$BIN" check "$CASE" | "$PY" -c '
import json, re, sys
p = [json.loads(m) for m in re.findall(r"(?:num|den)(?:erator|ominator)?\(s\)\s+(\[.*\])", sys.stdin.read())]
assert len(p) == 6, p
json.dump(dict(plant=p[0:2], sensor=p[2:4], controller=p[4:6],
               rates=dict(min_hz=50, max_hz=5000, points=200, spacing="log"),
               methods=["step-invariant", "ramp-invariant", "impulse-invariant", "tustin",
                        "tustin-prewarped", "pole-zero-match", "forward-euler",
                        "backward-euler"],
               delays=[0, 0.5, 1]), open(sys.argv[1], "w"))
' "$TMP/case.json"

NPTS=$((200 * 8 * 3))
# wall-clock and CPU (user+sys) seconds of one command, "WALL CPU"
wall() { /usr/bin/time -f "%e %U %S" -o "$TMP/time" "$@" >/dev/null; awk '{print $1, $2 + $3}' "$TMP/time"; }

echo "load before: $(uptime | sed 's/.*load average/load average/')   cpus: $(nproc)"

# The three timed runs alternate, REPEAT rounds, and each side is quoted
# at its best round (with the spread): on a shared host a slow phase
# lasting a few seconds would otherwise land on one side only.
T1=""; T2=""; SCIPY_LINES=""
for _ in $(seq "$REPEAT"); do
    T1="$T1,$(wall "$BIN" sweep "$CASE" --out "$TMP/s1" --quiet --no-charts --threads 1)"
    T2="$T2,$(wall "$BIN" sweep "$CASE" --out "$TMP/s2" --quiet --no-charts --threads 2)"
    SCIPY_LINES="$SCIPY_LINES|$(OPENBLAS_NUM_THREADS=1 OMP_NUM_THREADS=1 MKL_NUM_THREADS=1 "$PY" "$HERE/by_hand.py" --case "$TMP/case.json" --points "$SCIPY_POINTS" \
        --seed "$SEED" --csv "$TMP/by_hand.csv" ${SCIPY_ARGS:-})"
done
TP=$(wall "$BIN" pick "$CASE" --out "$TMP/p" --quiet --no-charts --threads 1)

echo "load after:  $(uptime | sed 's/.*load average/load average/')"

"$PY" - "$NPTS" "$T1" "$T2" "$TP" "$TMP" "$SCIPY_LINES" <<'PYEOF'
import csv, json, math, re, sys
npts = int(sys.argv[1])
runs = lambda a: [tuple(map(float, x.split())) for x in a.split(",") if x]
r1, r2 = runs(sys.argv[2]), runs(sys.argv[3])
tp, cp = map(float, sys.argv[4].split())
tmp = sys.argv[5]
rs = []
for line in (l for l in sys.argv[6].split("|") if l):
    m = re.search(r"(\d+) points in ([\d.]+) s .*cpu ([\d.]+) s", line)
    rs.append((float(m.group(2)), float(m.group(3)), int(m.group(1))))
(t1, c1), (t2, c2) = min(r1), min(r2)
sp_t, sp_c, sp_n = min(rs)
spread = lambda r: f"rounds {', '.join(f'{x[0]:.2f}' for x in r)} s"
lr1, lr2, sp = npts / t1, npts / t2, sp_n / sp_t
print()
print(f"grid: 200 rates (50..5000 Hz log) x 8 methods x 3 delays = {npts} points; best of {len(r1)} alternating rounds per side")
print(f"looprate sweep, 1 thread : {t1:8.2f} s wall {lr1:9.1f} points/s   (cpu {c1:.2f} s: {npts / c1:.1f} points per cpu-s; {spread(r1)})")
print(f"looprate sweep, 2 threads: {t2:8.2f} s wall {lr2:9.1f} points/s   (cpu {c2:.2f} s; {spread(r2)})")
print(f"scipy by hand, 1 process : {sp_t:8.2f} s wall {sp:9.2f} points/s   (cpu {sp_c:.2f} s: {sp_n / sp_c:.2f} points per cpu-s; {sp_n} points spread over the grid; {spread(rs)})")
print(f"per point, looprate (1 thread) vs scipy: {lr1 / sp:.1f}x faster by wall clock, {(npts / c1) / (sp_n / sp_c):.1f}x by cpu time")
print(f"1 -> 2 thread speed-up (wall): {t1 / t2:.2f}x")

pick = json.load(open(f"{tmp}/p/pick.json"))
ev = [m["evaluations"] for m in pick["methods"]]
print(f"looprate pick (1 thread, sweep + refinement): {tp:.2f} s wall (cpu {cp:.2f} s); "
      f"evaluations beyond the sweep per (method, delay): max {max(ev)}, "
      f"mean {sum(ev) / len(ev):.1f}, total {sum(ev)} over {len(ev)}")

# agreement on the sampled points (sanity check that both do the same job)
key = lambda r: (round(float(r["rate_hz"]), 6), r["method"], float(r["compute_delay"]))
lr = {key(r): r for r in csv.DictReader(open(f"{tmp}/s1/sweep.csv"))}
same, dpm, dov, ddp = 0, 0.0, 0.0, 0.0
rows = list(csv.DictReader(open(f"{tmp}/by_hand.csv")))
for r in rows:
    l = lr[key(r)]
    same += r["status"] == l["status"]
    if r["status"] == "ok" and l["status"] == "ok":
        dpm = max(dpm, abs(float(r["phase_margin_deg"]) - float(l["phase_margin_deg"])))
        dov = max(dov, abs(float(r["overshoot_pct"]) - float(l["overshoot_pct"])))
        if r.get("disturbance_peak"):
            a, b = float(r["disturbance_peak"]), float(l["disturbance_peak"])
            ddp = max(ddp, abs(a - b) / abs(b))
print(f"agreement on the {len(rows)} sampled points: status {same}/{len(rows)}, "
      f"max |dPM| {dpm:.3f} deg, max |d overshoot| {dov:.3f} %-points, "
      f"max relative d disturbance peak {ddp:.1e}")
PYEOF
