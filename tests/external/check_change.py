#!/usr/bin/env python3
"""compare's statistics against SciPy.

Usage: python3 tests/external/check_change.py PATH/TO/thiomap

Makes a demo pair (an earlier globe and a later epoch with planted changes), maps both and
compares them, then checks change.fits against general-purpose references:
- each tested cell's p-value against scipy.stats.chi2.sf(chi2, dof) (the survival
  function of the chi-square distribution), within 1e-6 absolute and 1e-4 relative (the
  planes are f32);
- the significant cells against scipy.stats.false_discovery_control(p, method="bh")
  (Benjamini & Hochberg 1995) at the run's false-discovery rate: the same cells, but for
  at most 2 whose p-value lies within f32 rounding of the threshold.
Needs numpy, scipy and astropy.
"""
import os
import subprocess
import sys
import tempfile

import numpy as np
import scipy
from astropy.io import fits
from scipy.stats import chi2, false_discovery_control


def run(exe, *args):
    out = subprocess.run([exe, *args], capture_output=True, text=True)
    if out.returncode != 0:
        sys.exit(f"{' '.join(args)} failed:\n{out.stderr}")


def main():
    exe = os.path.abspath(sys.argv[1])
    tmp = tempfile.mkdtemp()
    e, l = os.path.join(tmp, "e.fits"), os.path.join(tmp, "l.fits")
    run(exe, "demo", "--out", e, "--size", "96", "--snr", "100", "--seed", "7", "--hot-spots", "3")
    run(exe, "demo", "--epoch-of", e, "--changes", "ring,frost,flow", "--out", l)
    run(exe, "map", e, "--out", os.path.join(tmp, "re"))
    run(exe, "map", l, "--out", os.path.join(tmp, "rl"))
    out = os.path.join(tmp, "c")
    run(exe, "compare", os.path.join(tmp, "re"), os.path.join(tmp, "rl"), "--out", out, "--fdr", "0.01")
    with fits.open(os.path.join(out, "change.fits")) as f:
        h, d = f[0].header, f[0].data
    names = [h[f"PLANE{i + 1}"] for i in range(d.shape[0])]
    x2, dof, p, sig = (d[names.index(k)] for k in ("chi2", "dof", "p", "significant"))
    tested = np.isfinite(p)
    ref = chi2.sf(x2[tested].astype(np.float64), dof[tested].astype(np.float64))
    got = p[tested].astype(np.float64)
    bad = np.abs(got - ref) > 1e-6 + 1e-4 * np.abs(ref)
    print(f"scipy {scipy.__version__}: {tested.sum()} tested cells, chi-square dof {sorted(set(dof[tested].astype(int)))}")
    print(f"  p-values: worst difference {np.max(np.abs(got - ref)):.3g}; {bad.sum()} outside tolerance")
    adjusted = false_discovery_control(got, method="bh")
    want = adjusted <= h["FDR"]
    have = sig[tested] == 1
    differ = int((want != have).sum())
    print(f"  Benjamini-Hochberg at q = {h['FDR']}: scipy {want.sum()} significant, thiomap {have.sum()}, {differ} differ")
    if bad.any() or differ > 2 or want.sum() == 0:
        sys.exit("FAILED")
    print("OK")


if __name__ == "__main__":
    main()
