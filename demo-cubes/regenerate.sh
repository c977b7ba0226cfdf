#!/usr/bin/env bash
# Regenerates the shipped demo scenes exactly (byte-identical with the same thiomap and
# library versions). Run from the repository root: demo-cubes/regenerate.sh
set -euo pipefail
T="cargo run --release --quiet --"
$T demo --overwrite --out demo-cubes/brimveil-globe-mapper96.fits \
  --kind globe --size 96x96 --bands mapper-96 --snr 200 --hot-spots 3 --seed 1
$T demo --overwrite --out demo-cubes/brimveil-globe-imager7.fits \
  --kind globe --size 128x128 --bands imager-7 --snr 100 --seed 2
$T demo --overwrite --out demo-cubes/brimveil-tile-spectrometer24.fits \
  --kind tile --size 96x96 --bands spectrometer-24 --snr 100 --mismatch 0.03 --seed 3
