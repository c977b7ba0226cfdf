#!/usr/bin/env bash
# The report of a 1024 x 1024 x 96 demo cube: its size, and how long it takes to open in
# Debian's chromium. Usage: benches/report/large.sh [PATH/TO/thiomap]
# Needs tests/browser's node modules (cd tests/browser && npm ci).
set -euo pipefail
T=${1:-target/release/thiomap}
W=$(mktemp -d)
trap 'rm -rf "$W"' EXIT
echo "# $(date -u +%FT%TZ), $(nproc) cores, $(free -g | awk '/Mem/{print $2}') GiB"
"$T" demo --out "$W/big.fits" --bands mapper-96 --size 1024x1024 --seed 3 > /dev/null
for i in 1 2; do
  for flag in "" --report; do
    rm -rf "$W/r"
    s=$(date +%s.%N); "$T" map "$W/big.fits" --out "$W/r" $flag > /dev/null 2>&1; e=$(date +%s.%N)
    echo "run $i: map ${flag:-(no report)}: $(python3 -c "print(f'{$e-$s:.1f}')") s"
  done
done
node tests/browser/open_time.mjs "$W/r/report.html" 3
