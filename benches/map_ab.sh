#!/usr/bin/env bash
# Two builds of thiomap side by side on the cubes of benches/map_floor.py (run that first:
# it makes them under bench-data/floor): `map --threads 2` on the 1024 x 1024 x 32 FCLS tile
# and on the 1024 x 1024 x 12 visible tile (subset mode), the builds alternating for ROUNDS
# rounds; whole-process wall time (GNU time) and the stage times from timings.json.
# Usage: benches/map_ab.sh OLD_BINARY NEW_BINARY [ROUNDS]   (from the repository root)
set -euo pipefail
OLD=$1; NEW=$2; ROUNDS=${3:-3}
D=bench-data/floor
for r in $(seq 1 "$ROUNDS"); do
  for cube in fcls subset; do
    for side in old new; do
      if [ $side = old ]; then T=$OLD; else T=$NEW; fi
      out=$D/ab-$side-$cube
      rm -rf "$out"
      /usr/bin/time -f "%e %M" -o $D/ab-time.txt "$T" map $D/$cube.fits --out "$out" --threads 2 >/dev/null 2>&1
      read -r wall kb < $D/ab-time.txt
      stages=$(python3 -c "import json,sys; t=json.load(open('$out/timings.json')); print(', '.join(f\"{s['stage']} {s['seconds']:.3f}\" for s in t['stages']))")
      echo "round $r $cube $side: process ${wall} s, peak $((kb / 1024)) MiB; $stages"
    done
  done
done
# Products of the two builds (timings and provenance aside).
for cube in fcls subset; do
  echo "$cube: files that differ between the builds (timings.json and run.json aside):"
  diff -rq $D/ab-old-$cube $D/ab-new-$cube | grep -v -e timings.json -e run.json || echo "  none"
done
