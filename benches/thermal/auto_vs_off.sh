#!/usr/bin/env bash
# `map --thermal auto` against `--thermal off` on a demo globe with no hot spots, run
# alternately in one session. Usage: benches/thermal/auto_vs_off.sh [PATH/TO/thiomap]
set -euo pipefail
T=${1:-target/release/thiomap}
W=$(mktemp -d)
trap 'rm -rf "$W"' EXIT
"$T" demo --out "$W/cold.fits" --bands mapper-96 --size 384x384 --snr 200 --seed 11 > /dev/null
echo "# $(date -u +%FT%TZ), $(nproc) cores; demo globe 384 x 384 x 96 bands (mapper-96), no hot spots"
stage() { python3 -c "import json,sys;t=json.load(open(sys.argv[1]));print(' '.join(f\"{s['stage']} {s['seconds']:.3f}\" for s in t['stages']))" "$1"; }
for i in $(seq 1 21); do
  for m in off auto; do
    rm -rf "$W/r-$m"
    s=$(date +%s.%N); "$T" map "$W/cold.fits" --out "$W/r-$m" --thermal "$m" > /dev/null 2>&1; e=$(date +%s.%N)
    echo "run $i thermal=$m wall $(python3 -c "print(f'{$e-$s:.3f}')") s | $(stage "$W/r-$m/timings.json")" | tee -a "$W/log"
  done
done
python3 -c "import json,sys;t=json.load(open(sys.argv[1]))['thermal'];print('auto:', {k:t[k] for k in ('screened_pixels','fitted_pixels','hot_spots')})" "$W/r-auto/summary.json"
python3 - "$W/log" <<'PY'
import re, statistics, sys
rows = [l for l in open(sys.argv[1])]
for m in ("off", "auto"):
    w = [float(re.search(r"wall ([0-9.]+)", l).group(1)) for l in rows if f"thermal={m} " in l]
    print(f"{m}: median wall {statistics.median(w):.3f} s over {len(w)} runs")
wall = {m: [float(re.search(r"wall ([0-9.]+)", l).group(1)) for l in rows if f"thermal={m} " in l]
         for m in ("off", "auto")}
d = statistics.median(a - o for a, o in zip(wall["auto"], wall["off"]))
print(f"auto - off, paired by run: median {d:+.3f} s ({100 * d / statistics.median(wall['off']):+.1f} % of off's median)")
th = [float(re.search(r"thermal ([0-9.]+)", l).group(1)) for l in rows if "thermal=auto" in l]
print(f"thermal stage: median {statistics.median(th):.3f} s")
PY
