#!/usr/bin/env bash
# Change detection on demo epoch pairs over ten seeds, at SNR 200 and SNR 50: the fraction
# of truly changed pixels (some reported plane changed by >= 0.1; groups summed) that
# `compare` calls significant, the fraction of unchanged pixels it calls significant, and
# for pairs with no change at all, the significant area fraction (FDR 0.01).
# Usage: bash benches/change/detection.sh [THIOMAP]   (needs python3 with numpy and astropy)
set -euo pipefail
T=${1:-target/release/thiomap}
W=$(mktemp -d)
echo "# $(date -u +%Y-%m-%dT%H:%M:%SZ) $($T --version); $(nproc) cores; $(uname -m)"
echo "# globe 96 x 96 x mapper-96, 3 hot spots; later epoch: --changes ring,frost,flow,stranger,vents"
echo "snr seed changed_px detected false_on_unchanged nochange_significant_area"
for snr in 200 50; do
  for seed in 101 102 103 104 105 106 107 108 109 110; do
    $T demo --out $W/e.fits --size 96 --bands mapper-96 --snr $snr --hot-spots 3 --seed $seed --overwrite 2>/dev/null
    $T demo --epoch-of $W/e.fits --changes ring,frost,flow,stranger,vents --out $W/l.fits --overwrite 2>/dev/null
    $T demo --epoch-of $W/e.fits --changes none --out $W/n.fits --overwrite 2>/dev/null
    for x in e l n; do $T map $W/$x.fits --out $W/r$x --overwrite >/dev/null 2>&1; done
    $T compare $W/re $W/rl --out $W/c --overwrite >/dev/null 2>&1
    $T compare $W/re $W/rn --out $W/cn --overwrite >/dev/null 2>&1
    python3 - "$W" "$snr" "$seed" <<'PY'
import json, sys, warnings
warnings.filterwarnings("ignore")
import numpy as np
from astropy.io import fits
w, snr, seed = sys.argv[1:4]
h = fits.getheader(f"{w}/c/change.fits"); d = fits.getdata(f"{w}/c/change.fits")
names = [h[f"PLANE{i+1}"] for i in range(d.shape[0])]
ids = [n[6:] for n in names if n.startswith("delta:")]
def truth(stem):
    t = fits.open(f"{w}/{stem}.truth.fits.gz")[0].data
    mem = json.load(open(f"{w}/{stem}.truth.json"))["members"]
    return np.stack([sum(t[mem.index(p)] for p in i.split("+")) for i in ids])
dt = np.abs(truth("l") - truth("e")); mx = np.nanmax(dt, axis=0)
sig = d[names.index("significant")]; tested = np.isfinite(sig)
ch = (mx >= 0.1) & tested; un = (mx < 1e-6) & tested
none = json.load(open(f"{w}/cn/run.json"))["significant_area_fraction"]
print(f"{snr} {seed} {ch.sum()} {(sig[ch]==1).mean():.4f} {(sig[un]==1).mean():.5f} {none:.5f}")
PY
  done
done
rm -rf "$W"
