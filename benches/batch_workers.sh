#!/usr/bin/env bash
# Batch benchmark: 200 small cubes (32 x 32 tiles, 24 bands), one single-threaded worker
# against two, in one run; and the per-cube overhead beyond map's own work (wall time per
# cube with one worker minus the mean of timings.json total_seconds).
# Usage: benches/batch_workers.sh   (from the repository root)
set -euo pipefail
cargo build --release --quiet
T=target/release/thiomap
A=bench-data/batch-archive
if [ ! -f "$A/tile199.fits" ]; then
  rm -rf "$A"; mkdir -p "$A"
  for i in $(seq 0 199); do
    $T demo --out "$A/tile$i.fits" --kind tile --size 32 --bands spectrometer-24 --snr 100 --seed "$i" 2>/dev/null
  done
  rm -f "$A"/*.truth.* "$A"/*.png
fi
run() { # workers threads
  rm -rf bench-data/batch-out
  local t0 t1
  t0=$(date +%s.%N)
  $T batch "$A" --out bench-data/batch-out --workers "$1" --threads "$2" 2>/dev/null
  t1=$(date +%s.%N)
  echo "$t1 - $t0" | bc
}
w2=$(run 2 2); w1=$(run 1 1); w2b=$(run 2 2); w1b=$(run 1 1)
python3 - "$w1" "$w2" "$w1b" "$w2b" <<'PY'
import glob, json, statistics, sys
w1, w2, w1b, w2b = map(float, sys.argv[1:])
one, two = min(w1, w1b), min(w2, w2b)
work = [json.load(open(f))["total_seconds"] for f in glob.glob("bench-data/batch-out/*/timings.json")]
print(f"200 cubes (32 x 32 x 24): 1 worker x 1 thread {one:.2f} s, 2 workers x 1 thread {two:.2f} s "
      f"(best of 2 each); speed-up {one / two:.2f} (target >= 1.8)")
per_cube = one / 200
own = statistics.mean(work)
print(f"per cube: {1e3 * per_cube:.1f} ms wall with one worker, {1e3 * own:.1f} ms of map's own work "
      f"(timings.json, last 1-worker run); overhead {1e3 * (per_cube - own):.1f} ms (target <= 20 ms)")
PY
