#!/usr/bin/env bash
# Builds two commits side by side and checks that they write the same bytes: `map` on the
# three shipped demo cubes, `unmix` on one, a `batch` over a small archive (two cubes and
# one unreadable file, two workers) and its `merge`, a `demo` scene and a `library
# export`. Every file must be byte-identical, except `timings.json` (how it ran) and, in
# `run.json`, the tool version when the two commits carry different versions.
# For restructurings that promise unchanged behaviour; a change of output on purpose
# shows here as a difference, by design.
# Usage: benches/same_bytes.sh OLD_REV [NEW_REV]   (from the repository root; NEW_REV
#   defaults to HEAD; each build goes to bench-data/same-bytes/, deps shared between them)
set -euo pipefail
trap 'echo "same_bytes: failed at line $LINENO (see the log.txt of the run)" >&2' ERR
OLD=$(git rev-parse "${1:?usage: benches/same_bytes.sh OLD_REV [NEW_REV]}")
NEW=$(git rev-parse "${2:-HEAD}")
W=$PWD/bench-data/same-bytes
mkdir -p "$W"
build() { # rev -> path of its release binary
  local rev=$1 src=$W/src-${1:0:12} bin=$W/thiomap-${1:0:12}
  if [ ! -x "$bin" ]; then
    rm -rf "$src"
    git worktree prune
    git worktree add --detach --quiet "$src" "$rev"
    (cd "$src" && CARGO_TARGET_DIR=$W/target cargo build --release --quiet --bin thiomap)
    cp "$W/target/release/thiomap" "$bin"
    git worktree remove --force "$src"
  fi
  echo "$bin"
}
run_all() { # binary, folder
  local t=$1 d=$2 c=$PWD/demo-cubes
  rm -rf "$d" && mkdir -p "$d/archive/sub" && cd "$d"
  for cube in brimveil-globe-mapper96 brimveil-globe-imager7 brimveil-tile-spectrometer24; do
    "$t" map "$c/$cube.fits" --out "map-$cube" 2>>log.txt
  done
  "$t" unmix "$c/brimveil-globe-mapper96.fits" --out unmix-globe --residuals 2>>log.txt
  cp "$c/brimveil-globe-imager7.fits" archive/
  cp "$c/brimveil-tile-spectrometer24.fits" archive/sub/
  printf 'SIMPLE  =                    T' >archive/broken.fits
  "$t" batch archive --out batch --workers 2 2>>log.txt || true
  "$t" merge batch --out merged 2>>log.txt
  mkdir demo && "$t" demo --out demo/scene.fits --size 40 --seed 3 2>>log.txt
  "$t" library export --format csv --out library.csv 2>>log.txt
  rm log.txt
  cd - >/dev/null
}
A=$(build "$OLD")
B=$(build "$NEW")
run_all "$A" "$W/out-old"
run_all "$B" "$W/out-new"
python3 - "$W/out-old" "$W/out-new" "${OLD:0:12}" "${NEW:0:12}" <<'PY'
import json, os, sys
a, b, ra, rb = sys.argv[1:]
def files(root):
    return sorted(os.path.relpath(os.path.join(d, f), root)
                  for d, _, fs in os.walk(root) for f in fs)
fa, fb = files(a), files(b)
bad = []
for f in sorted(set(fa) ^ set(fb)):
    bad.append(f"only in {'old' if f in fa else 'new'}: {f}")
same = skipped = 0
for f in sorted(set(fa) & set(fb)):
    x, y = open(os.path.join(a, f), "rb").read(), open(os.path.join(b, f), "rb").read()
    name = os.path.basename(f)
    if name == "timings.json":
        skipped += 1
        continue
    if name == "run.json" and x != y:
        jx, jy = json.loads(x), json.loads(y)
        jx.pop("version"), jy.pop("version")
        if jx == jy:
            x = y
    if x == y:
        same += 1
    else:
        bad.append(f"differs: {f} ({len(x)} against {len(y)} bytes)")
print(f"old {ra}, new {rb}: {len(fa)} and {len(fb)} files; {same} byte-identical, "
      f"{skipped} timings.json left out, {len(bad)} differences")
for line in bad:
    print("  " + line)
sys.exit(1 if bad else 0)
PY
