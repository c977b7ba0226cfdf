#!/usr/bin/env bash
# Integration test on a real one-node Slurm cluster: an sbatch job array over the shards of
# an archive holding one corrupt cube, and a merge job depending on it with afterany. The
# merged table must equal a single-machine batch of the same archive, and the failure must
# be reported. Usage (as root): tests/cluster/slurm_batch_test.sh PATH/TO/thiomap
set -euo pipefail
here=$(cd "$(dirname "$0")" && pwd)
root=$(cd "$here/../.." && pwd)
T=$(realpath "$1")
work=$(mktemp -d /tmp/thiomap-slurm-XXXXXX)
state="$work/slurm"
trap '"$here/local-slurm.sh" stop "$state" || true' EXIT

mkdir -p "$work/archive/sub"
for i in 0 1 2 3 4; do
  "$T" demo --out "$work/archive/tile$i.fits" --kind tile --size 24 --bands spectrometer-24 --snr 100 --seed "$i" 2>/dev/null
done
"$T" demo --out "$work/archive/sub/globe.npy" --size 24 --bands spectrometer-24 --seed 9 2>/dev/null
rm -f "$work"/archive/*.truth.* "$work"/archive/*.png "$work"/archive/sub/*.truth.* "$work"/archive/sub/*.png
head -c 3000 "$work/archive/tile0.fits" > "$work/archive/broken.fits"

"$here/local-slurm.sh" start "$state"
export SLURM_CONF="$state/etc/slurm.conf"
cd "$work"
export THIOMAP="$T" ARCHIVE="$work/archive" OUT="$work/sharded" MERGED="$work/merged"
array=$(sbatch --parsable --array=0-2 "$root/docs/slurm/batch-array.sbatch")
merge=$(sbatch --parsable --dependency=afterany:"$array" "$root/docs/slurm/merge.sbatch")
echo "submitted array job $array and merge job $merge"
state_of() { scontrol -o show job "$1" 2>/dev/null | grep -o 'JobState=[A-Z_]*' | head -n1 | cut -d= -f2; }
for _ in $(seq 1 600); do
  s=$(state_of "$merge" || true)
  case "$s" in
    COMPLETED) break ;;
    FAILED|CANCELLED|TIMEOUT|NODE_FAIL) echo "merge job ended $s" >&2; cat "$work"/thiomap-*.log >&2 || true; exit 1 ;;
  esac
  sleep 0.5
done
[ "$(state_of "$merge")" = COMPLETED ] || { echo "merge job did not complete" >&2; exit 1; }

"$T" batch "$work/archive" --out "$work/single" 2>/dev/null || true
"$T" merge "$work/single" --out "$work/single-merged" 2>/dev/null
diff "$work/single-merged/archive.csv" "$work/merged/archive.csv"
grep -q '^broken.fits,failed' "$work/merged/archive.csv"
[ "$(grep -c ',ok,' "$work/merged/archive.csv")" = 6 ]
ls "$work"/sharded/failures-shard-*-of-3.csv >/dev/null
echo "ok  Slurm array of 3 shards + afterany merge equals the single-machine batch; the corrupt cube is reported"
