#!/usr/bin/env bash
# Whole-tool run of `thiomap map` on a 1024 x 1024 x 32 synthetic tile: wall time per stage
# (timings.json) and peak memory (GNU time), with the cube's and the outputs' sizes beside
# them for the memory target (peak <= cube f32 + outputs + 128 MiB); then the units stage
# again with K given (--units 6), so the extra cost of choosing K automatically shows.
# Usage: benches/map_big_tile.sh [BINARY]   (from the repository root; needs /usr/bin/time;
#   without BINARY it builds and runs target/release/thiomap; give another build's binary
#   to compare two builds on the same tile)
set -euo pipefail
if [ $# -ge 1 ]; then T=$1; else cargo build --release --quiet; T=target/release/thiomap; fi
mkdir -p bench-data
$T demo --overwrite --out bench-data/big-tile.fits --kind tile --size 1024 --bands mapper-96 \
  --range 0.4-0.87 --snr 150 --seed 5 2>/dev/null
rm -rf bench-data/big-tile-map
/usr/bin/time -v $T map bench-data/big-tile.fits --out bench-data/big-tile-map 2>bench-data/time.txt
grep -E "Elapsed|Maximum resident" bench-data/time.txt
python3 - <<'PY'
import json, os
t = json.load(open("bench-data/big-tile-map/timings.json"))
for s in t["stages"]:
    print(f"  stage {s['stage']:6s} {s['seconds']:7.2f} s")
print(f"  total  {t['total_seconds']:7.2f} s, threads {t['threads']}")
out = sum(os.path.getsize(os.path.join(d, f)) for d, _, fs in os.walk("bench-data/big-tile-map") for f in fs)
cube = 1024 * 1024 * 32 * 4
print(f"  cube f32 {cube / 2**20:.0f} MiB, outputs {out / 2**20:.0f} MiB, "
      f"peak target {(cube + out) / 2**20 + 128:.0f} MiB")
PY
rm -rf bench-data/big-tile-map-k6
$T map bench-data/big-tile.fits --out bench-data/big-tile-map-k6 --units 6 2>/dev/null >/dev/null
python3 - <<'PY'
import json
auto = {s["stage"]: s["seconds"] for s in json.load(open("bench-data/big-tile-map/timings.json"))["stages"]}
fixed = {s["stage"]: s["seconds"] for s in json.load(open("bench-data/big-tile-map-k6/timings.json"))["stages"]}
print(f"  units stage with K chosen automatically {auto['units']:.2f} s, with --units 6 "
      f"{fixed['units']:.2f} s: choosing K costs {auto['units'] - fixed['units']:.2f} s")
PY
