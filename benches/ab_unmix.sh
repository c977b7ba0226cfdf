#!/usr/bin/env bash
# A/B of two builds of examples/bench_unmix on the same problem, for kernel changes: the two
# binaries alternate for ROUNDS rounds (each run times 15 repeats and reports its fastest,
# the least disturbed by the shared machine), then the median and minimum of those per
# binary; then, with valgrind, the instructions per pixel inside the unmixing kernel
# (callgrind, one run, repeatable whatever the machine's load).
# Usage: benches/ab_unmix.sh OLD_BINARY NEW_BINARY [THREADS=1] [dense|sparse] [ROUNDS=7]
#   (from the repository root, after `python3 benches/unmix_vs_numpy.py` has written the
#   problems to bench-data/; build a binary with `cargo build --release --example
#   bench_unmix` and copy target/release/examples/bench_unmix aside)
set -euo pipefail
A=$1 B=$2 T=${3:-1} K=${4:-dense} R=${5:-7}
D=bench-data/unmix-$K
export MALLOC_TRIM_THRESHOLD_=4294967296 MALLOC_MMAP_THRESHOLD_=4294967296
fastest() { "$1" $D-E.npy $D-Y.npy $D-A.npy "$T" 15 | python3 -c 'import json,sys; print(json.load(sys.stdin)["fastest_seconds"] * 1e3)'; }
declare -A runs
for _ in $(seq "$R"); do
  for x in "$A" "$B"; do runs[$x]="${runs[$x]:-} $(fastest "$x")"; done
done
echo "problem $K, $T thread(s), $R alternating rounds, heap kept; fastest of 15 per run (ms):"
for x in "$A" "$B"; do
  echo "${runs[$x]}" | tr ' ' '\n' | grep . | sort -n | awk -v n="$x" '{a[NR]=$1} END {printf "  %s: median %.2f, min %.2f  [", n, a[int((NR+1)/2)], a[1]; for (i=1;i<=NR;i++) printf " %.2f", a[i]; print " ]"}'
done
if command -v valgrind >/dev/null; then
  echo "instructions per pixel in the AVX2 kernel (callgrind, one run, one thread):"
  for x in "$A" "$B"; do
    valgrind --tool=callgrind --callgrind-out-file=/dev/null '--toggle-collect=*rows_fixed_x86*' \
      "$x" $D-E.npy $D-Y.npy $D-A.npy 1 1 2>&1 >/dev/null | grep refs |
      awk -v n="$x" '{gsub(",", "", $NF); printf "  %s: %.1f\n", n, $NF / 262144}'
  done
fi
