#!/usr/bin/env python3
"""The shipped solar spectrum and the solar-weighted band values, against pvlib.

Usage: python3 tests/external/check_solar.py PATH/TO/thiomap

1. spectra-lib/solar/sun-1au.spectrum against the ASTM G173-03 extraterrestrial spectrum
   that pvlib carries (pvlib.spectrum.get_reference_spectra): both smoothed to 10 nm
   (mean over 10 nm bins on a common 0.1 nm grid), within 2 % in every bin of
   0.28-4.0 um, and the integral over that range within 0.5 %. The shipped table was
   derived from the same standard, so this checks its transcription, grid and units.
2. `thiomap library export --bands imager-7` against an independent integration with
   numpy and scipy: for every member and band, the integral of S(l) F(l) R(l) over that of
   S(l) F(l), with S the band's Gaussian of its FWHM over +-3 sigma (the support thiomap
   documents), F pvlib's spectrum, R the member file's samples interpolated linearly,
   by scipy's trapezoid rule on a 0.01 nm grid. Within 2e-4 relative (+1e-5 absolute, the
   CSV's six decimals).
Exits non-zero on the first mismatch. Needs numpy, scipy, pandas and pvlib.
"""
import csv
import io
import os
import subprocess
import sys
import tomllib

import numpy as np
import pvlib
from scipy.integrate import trapezoid

ROOT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "..")
FWHM_PER_SIGMA = 2.0 * np.sqrt(2.0 * np.log(2.0))


def samples(path, marker="--- samples:"):
    text = open(path, encoding="utf-8").read()
    body = text[text.index(marker):].split("\n", 1)[1]
    a = np.loadtxt(io.StringIO(body))
    return a[:, 0], a[:, 1]


def fail(msg):
    print(f"FAIL: {msg}")
    sys.exit(1)


def check_table():
    ref = pvlib.spectrum.get_reference_spectra()
    ref_um = ref.index.to_numpy(dtype=float) / 1000.0
    ref_per_um = ref["extraterrestrial"].to_numpy(dtype=float) * 1000.0
    wl, irr = samples(os.path.join(ROOT, "spectra-lib", "solar", "sun-1au.spectrum"))
    grid = np.arange(0.28, 4.0, 0.0001)
    ours = np.interp(grid, wl, irr)
    theirs = np.interp(grid, ref_um, ref_per_um)
    bins = (np.floor((grid - 0.28) / 0.01)).astype(int)
    n = bins.max() + 1
    count = np.bincount(bins, minlength=n)
    ours_s = np.bincount(bins, ours, minlength=n) / count
    theirs_s = np.bincount(bins, theirs, minlength=n) / count
    worst = np.max(np.abs(ours_s / theirs_s - 1.0))
    if worst > 0.02:
        fail(f"10 nm means differ by {worst:.4%}")
    i_ours = trapezoid(irr[(wl >= 0.28) & (wl <= 4.0)], wl[(wl >= 0.28) & (wl <= 4.0)])
    i_theirs = trapezoid(ref_per_um, ref_um)
    if abs(i_ours / i_theirs - 1.0) > 0.005:
        fail(f"integral 0.28-4.0 um {i_ours:.2f} vs {i_theirs:.2f} W m-2")
    print(
        f"solar table vs pvlib {pvlib.__version__}: worst 10 nm difference {worst:.2e}, "
        f"integral {i_ours:.2f} vs {i_theirs:.2f} W m-2"
    )
    return ref_um, ref_per_um


def check_bands(thiomap, ref_um, ref_per_um):
    out = subprocess.run(
        [thiomap, "library", "export", "--bands", "imager-7"],
        check=True,
        capture_output=True,
        text=True,
    ).stdout
    rows = list(csv.reader(io.StringIO(out)))
    ids = rows[0][1:]
    table = np.array([[float(v) for v in r] for r in rows[1:]])
    bandset = tomllib.load(
        open(os.path.join(ROOT, "spectra-lib", "band-sets", "imager-7.toml"), "rb")
    )
    worst = 0.0
    for b, band in enumerate(bandset["band"]):
        c, sigma = band["centre_um"], band["fwhm_um"] / FWHM_PER_SIGMA
        grid = np.linspace(c - 3 * sigma, c + 3 * sigma, int(6 * sigma / 1e-5) + 1)
        w = np.exp(-0.5 * ((grid - c) / sigma) ** 2) * np.interp(grid, ref_um, ref_per_um)
        if abs(table[b, 0] - c) > 1e-9:
            fail(f"band {b + 1}: centre {table[b, 0]} vs {c}")
        for j, mid in enumerate(ids):
            x, r = samples(os.path.join(ROOT, "spectra-lib", "members", f"{mid}.spectrum"))
            expect = trapezoid(w * np.interp(grid, x, r), grid) / trapezoid(w, grid)
            got = table[b, j + 1]
            err = abs(got - expect)
            worst = max(worst, err / expect)
            if err > 2e-4 * expect + 1e-5:
                fail(f"band {b + 1} ({c} um), {mid}: thiomap {got} vs integral {expect:.6f}")
    print(f"imager-7 band values vs an independent integration: worst relative {worst:.2e}")


def main():
    if len(sys.argv) != 2:
        print(__doc__)
        sys.exit(2)
    ref_um, ref_per_um = check_table()
    check_bands(sys.argv[1], ref_um, ref_per_um)
    print("solar checks passed")


if __name__ == "__main__":
    main()
