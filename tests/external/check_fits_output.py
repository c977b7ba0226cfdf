#!/usr/bin/env python3
"""astropy reads thiomap's FITS output back unchanged.

Usage: python3 tests/external/check_fits_output.py PATH/TO/thiomap

For each external fixture (written by astropy/numpy, see tests/fixtures/external),
runs `thiomap convert` to FITS, then with astropy:
  - HDUList.verify('exception') accepts the file (FITS Standard conformance as
    astropy checks it);
  - the primary data equal the fixture's values as astropy reads the fixture
    (NaN where the fixture has no data), in the same (band, row, col) order;
  - the spectral axis, evaluated by astropy.wcs (linear WAVE, or WAVE-TAB with the
    table extension), gives the same band centres;
  - backplane extensions and spatial WCS keywords survive.
Exits non-zero with a message on the first mismatch. Needs astropy and numpy.
"""
import os
import subprocess
import sys
import tempfile

import numpy as np
from astropy.io import fits
from astropy.wcs import WCS

HERE = os.path.dirname(os.path.abspath(__file__))
FIXTURES = os.path.join(HERE, "..", "fixtures", "external")


def spectral_um(path):
    with fits.open(path) as f:
        h = f[0].header
        n = h["NAXIS3"]
        w = WCS(h, fobj=f).sub([3])
        world = w.wcs_pix2world(np.arange(n), 0)[0]
        unit = str(w.wcs.cunit[0])
    scale = {"m": 1e6, "um": 1.0, "nm": 1e-3, "Angstrom": 1e-4}[unit]
    return world * scale


def fixture_cube(name):
    path = os.path.join(FIXTURES, name)
    if name.endswith(".npy"):
        arr = np.load(path).astype(np.float64)
        return np.transpose(arr, (2, 0, 1)), None
    # Scale integers in float64 ourselves (astropy scales 16-bit data in float32).
    with fits.open(path, do_not_scale_image_data=True) as f:
        h = f[0].header
        raw = f[0].data
        data = h.get("BZERO", 0.0) + h.get("BSCALE", 1.0) * raw.astype(np.float64)
        if "BLANK" in h and raw.dtype.kind in "iu":
            data[raw == h["BLANK"]] = np.nan
    return data, spectral_um(path)


def check(thiomap, name, workdir):
    out = os.path.join(workdir, name.replace(".", "_") + ".fits")
    subprocess.run([thiomap, "convert", os.path.join(FIXTURES, name), "--out", out], check=True,
                   stderr=subprocess.DEVNULL)
    with fits.open(out) as f:
        f.verify("exception")
        got = f[0].data.astype(np.float64)
        names = [h.name for h in f]
    expected, centres = fixture_cube(name)
    if got.shape != expected.shape:
        sys.exit(f"{name}: shape {got.shape} != {expected.shape}")
    # thiomap stores f32; the fixture's values are compared after the same rounding
    exp32 = expected.astype(np.float32).astype(np.float64)
    nan_got, nan_exp = np.isnan(got), np.isnan(exp32)
    if not np.array_equal(nan_got, nan_exp) or not np.array_equal(got[~nan_got], exp32[~nan_exp]):
        sys.exit(f"{name}: data differ after the round trip")
    if centres is not None:
        back = spectral_um(out)
        if not np.allclose(back, centres, rtol=1e-9, atol=0):
            sys.exit(f"{name}: band centres {back} != {centres}")
    return names, out


def main():
    thiomap = os.path.abspath(sys.argv[1])
    with tempfile.TemporaryDirectory() as tmp:
        for name in [
            "astropy-f32.fits",
            "astropy-i16-scaled.fits",
            "astropy-u16.fits",
            "astropy-wavetab.fits",
            "astropy-f64.fits.gz",
            "numpy-fortran-f64.npy",
        ]:
            names, out = check(thiomap, name, tmp)
            print(f"ok  {name}: astropy verify('exception') passes, data and bands equal; HDUs {names}")
        # backplanes and spatial WCS of the f32 fixture
        out = os.path.join(tmp, "astropy-f32_fits.fits")
        with fits.open(out) as f, fits.open(os.path.join(FIXTURES, "astropy-f32.fits")) as g:
            for ext in ("INCIDENCE", "EMISSION"):
                if not np.array_equal(f[ext].data, g[ext].data):
                    sys.exit(f"backplane {ext} differs")
            for key in ("CTYPE1", "CTYPE2", "CRPIX1", "CRPIX2", "CRVAL1", "CRVAL2", "CDELT1", "CDELT2"):
                if f[0].header[key] != g[0].header[key]:
                    sys.exit(f"{key}: {f[0].header[key]!r} != {g[0].header[key]!r}")
            ra_dec = WCS(f[0].header).celestial.wcs_pix2world([[1.0, 2.0]], 0)
            ref = WCS(g[0].header).celestial.wcs_pix2world([[1.0, 2.0]], 0)
            if not np.allclose(ra_dec, ref, rtol=1e-12):
                sys.exit("spatial WCS differs")
        print("ok  backplanes and spatial WCS survive")
        check_results_folder(thiomap, tmp)


def check_results_folder(thiomap, tmp):
    """The unmixing products and a demo scene's truth planes are valid FITS to astropy."""
    import json
    root = os.path.join(HERE, "..", "..")
    cube = os.path.join(root, "demo-cubes", "brimveil-tile-spectrometer24.fits")
    out = os.path.join(tmp, "results")
    subprocess.run([thiomap, "unmix", cube, "--out", out], check=True, stderr=subprocess.DEVNULL)
    with open(os.path.join(out, "summary.json")) as f:
        ids = json.load(f)["endmembers"]
    for name in ("abundance.fits", "stderr.fits"):
        with fits.open(os.path.join(out, name)) as f:
            f.verify("exception")
            h = f[0].header
            if f[0].data.shape != (len(ids), 96, 96):
                sys.exit(f"{name}: shape {f[0].data.shape}")
            names = [h[f"PLANE{i + 1}"] for i in range(len(ids))]
            if names != ids:
                sys.exit(f"{name}: planes {names} != endmembers {ids}")
    with fits.open(os.path.join(out, "fit-rmse.fits")) as f:
        f.verify("exception")
    with fits.open(os.path.join(root, "demo-cubes", "brimveil-tile-spectrometer24.truth.fits.gz")) as f:
        f.verify("exception")
        if [h.name for h in f] != ["PRIMARY", "UNITS", "CORE", "HOTSPOT", "HOTTHERM"]:
            sys.exit(f"truth planes: unexpected extensions {[h.name for h in f]}")
        t = f["HOTTHERM"]
        if t.data.shape != (2, 96, 96) or [t.header["PLANE1"], t.header["PLANE2"]] != [
                "temperature_k", "fraction"]:
            sys.exit("truth planes: HOTTHERM layout")
    # The thermal products of the hyperspectral globe, which has hot spots.
    globe = os.path.join(root, "demo-cubes", "brimveil-globe-mapper96.fits")
    hot = os.path.join(tmp, "hot")
    subprocess.run([thiomap, "unmix", globe, "--out", hot], check=True, stderr=subprocess.DEVNULL)
    with fits.open(os.path.join(hot, "thermal.fits")) as f:
        f.verify("exception")
        names = [f[0].header[f"PLANE{i + 1}"] for i in range(4)]
        if names != ["temperature_k", "fraction", "temperature_k_stderr", "fraction_stderr"]:
            sys.exit(f"thermal.fits: planes {names}")
        import numpy as np
        fitted = np.isfinite(f[0].data[0])
        if fitted.sum() < 1 or not (300 <= np.nanmax(f[0].data[0]) <= 1800):
            sys.exit("thermal.fits: no fitted pixel in the stated range")
    with fits.open(os.path.join(hot, "fit-flags.fits")) as f:
        f.verify("exception")
        if ((f[0].data & 2) > 0).sum() != fitted.sum():
            sys.exit("fit-flags.fits: thermal bit does not match thermal.fits")
    print("ok  unmix results (abundance, stderr, fit-rmse, thermal, fit-flags) and demo truth "
          "planes pass verify('exception')")


if __name__ == "__main__":
    main()
