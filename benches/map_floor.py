#!/usr/bin/env python3
"""The whole job beside its I/O floor and beside the pipeline a Python user would write,
in one run, ratios formed within each round.

Cubes (made by `thiomap demo --kind tile`, our own synthetic scene of the fictional world;
map-projected, every pixel on the surface, SNR 150, seed 5):
  fcls   - 1024 x 1024 x 32 bands, centres 0.40-2.34 um evenly spaced, FWHM 0.06 um: the
           library is separable, so `map` runs FCLS;
  subset - 1024 x 1024 x 12 visible bands, 0.40-0.70 um, FWHM 0.025 um: too few for the
           library, so `map` chooses subset mode (up to 3 members per pixel);
  small  - 512 x 512 x 32 bands as `fcls`, for `thiomap unmix` as a whole process.

Per round, for each cube, back to back:
  map      - `thiomap map CUBE --threads 2` as a whole process (wall clock), into a fresh
             folder; its timings.json gives the stage times;
  floor    - reading the cube file into memory, plus copying the finished results folder
             (shutil.copytree), same disk, file cache warm (every file was just written or
             read);
  fcls-off - (subset cube) `thiomap map --subset off --force`: the FCLS unmix stage on
             the same cube, for the subset / FCLS unmix-stage ratio;
  python   - (fcls cube) the pipeline a Python user would write for the same job:
             astropy.io.fits read; FCLS per pixel with scipy.optimize.nnls on the augmented
             system [d 1^T; E], [d; y] (d = 1e3) over a 4,096-pixel subset, extrapolated to
             every pixel; scikit-learn KMeans (K = 6, n_init = 3) fitted on a 20,000-pixel
             sample and applied to every pixel; astropy writes of abundance, fit RMSE and
             units planes and Pillow PNGs of each abundance plane, the units and the RMSE;
  unmix    - (small cube) `thiomap unmix --threads 2` as a whole process (reading, hashing
             and writing included) beside the same SciPy loop over the same pixels
             (extrapolated from 4,096).

Usage: python3 benches/map_floor.py [ROUNDS]   (from the repository root, after
`cargo build --release`; needs numpy, scipy, astropy, scikit-learn, pillow)
"""
import json
import os
import platform
import shutil
import statistics
import subprocess
import sys
import time

import numpy as np

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
DATA = os.path.join(ROOT, "bench-data", "floor")
T = os.path.join(ROOT, "target", "release", "thiomap")
ROUNDS = int(sys.argv[1]) if len(sys.argv) > 1 else 3
SUBSET_PIXELS = 4096


def band_set(path, name, lo, hi, n, fwhm):
    with open(path, "w") as f:
        f.write(f'kind = "band-set"\nname = "{name}"\n')
        for i in range(n):
            f.write(f"\n[[band]]\ncentre_um = {lo + (hi - lo) * i / (n - 1):.4f}\nfwhm_um = {fwhm}\n")


def run(args):
    t = time.perf_counter()
    subprocess.run(args, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    return time.perf_counter() - t


def make_cubes():
    os.makedirs(DATA, exist_ok=True)
    band_set(f"{DATA}/b32.toml", "bench 32 bands 0.40-2.34 um", 0.40, 2.34, 32, 0.06)
    band_set(f"{DATA}/v12.toml", "bench 12 visible bands 0.40-0.70 um", 0.40, 0.70, 12, 0.025)
    cubes = {
        "fcls": (f"{DATA}/fcls.fits", "b32", 1024),
        "subset": (f"{DATA}/subset.fits", "v12", 1024),
        "small": (f"{DATA}/small.fits", "b32", 512),
    }
    for _, (path, bands, size) in cubes.items():
        if not os.path.exists(path):
            run([T, "demo", "--overwrite", "--out", path, "--kind", "tile", "--size", str(size),
                 "--bands", f"{DATA}/{bands}.toml", "--snr", "150", "--seed", "5"])
    return {k: v[0] for k, v in cubes.items()}


def floor(cube, folder):
    t = time.perf_counter()
    with open(cube, "rb") as f:
        data = f.read()
    copy = folder + "-copy"
    shutil.rmtree(copy, ignore_errors=True)
    shutil.copytree(folder, copy)
    seconds = time.perf_counter() - t
    shutil.rmtree(copy)
    del data
    return seconds


def stages(folder):
    with open(os.path.join(folder, "timings.json")) as f:
        t = json.load(f)
    return {s["stage"]: s["seconds"] for s in t["stages"]}, t.get("peak_rss_bytes", 0)


def library_matrix(cube):
    csv = os.path.join(DATA, os.path.basename(cube) + ".library.csv")
    if os.path.exists(csv):
        os.remove(csv)
    subprocess.run([T, "library", "export", "--bands", cube, "--out", csv], check=True,
                   stdout=subprocess.DEVNULL)
    e = np.loadtxt(csv, delimiter=",", skiprows=1)[:, 1:]
    # Shade: a column of zeros, as thiomap's model has.
    return np.hstack([e, np.zeros((e.shape[0], 1))])


def scipy_fcls(e, pixels):
    from scipy.optimize import nnls
    d = 1e3
    a_aug = np.vstack([d * np.ones((1, e.shape[1])), e])
    out = np.empty((len(pixels), e.shape[1]))
    t = time.perf_counter()
    for i, y in enumerate(pixels):
        out[i] = nnls(a_aug, np.concatenate([[d], y]))[0]
    return time.perf_counter() - t, out


def python_pipeline(cube, e, out_dir):
    """The same job as a Python user would write it; returns (seconds, parts)."""
    from astropy.io import fits
    from PIL import Image
    from sklearn.cluster import KMeans
    parts = {}
    t0 = time.perf_counter()
    with fits.open(cube, memmap=False) as h:
        y = np.asarray(h[0].data, dtype=np.float32)  # (bands, rows, cols)
    bands, rows, cols = y.shape
    spectra = y.reshape(bands, -1).T
    parts["read"] = time.perf_counter() - t0
    rng = np.random.default_rng(1)
    pick = rng.choice(spectra.shape[0], SUBSET_PIXELS, replace=False)
    loop, ab_subset = scipy_fcls(e, spectra[pick].astype(np.float64))
    parts["fcls (extrapolated)"] = loop * spectra.shape[0] / SUBSET_PIXELS
    # The products are written at full size: the subset's solutions stand for every pixel
    # (their values do not change the write's cost).
    ab = np.resize(ab_subset.astype(np.float32), (spectra.shape[0], e.shape[1]))
    rmse = np.resize(np.sqrt(np.mean((spectra[pick] - ab_subset @ e.T) ** 2, axis=1)).astype(np.float32),
                     spectra.shape[0])
    t = time.perf_counter()
    km = KMeans(n_clusters=6, n_init=3, random_state=1)
    km.fit(ab[rng.choice(ab.shape[0], 20000, replace=False)])
    units = km.predict(ab).astype(np.int16) + 1
    parts["kmeans"] = time.perf_counter() - t
    t = time.perf_counter()
    os.makedirs(out_dir, exist_ok=True)
    planes = ab.T.reshape(e.shape[1], rows, cols)
    fits.writeto(os.path.join(out_dir, "abundance.fits"), planes, overwrite=True)
    fits.writeto(os.path.join(out_dir, "fit-rmse.fits"), rmse.reshape(rows, cols), overwrite=True)
    fits.writeto(os.path.join(out_dir, "units.fits"), units.reshape(rows, cols), overwrite=True)
    for j in range(e.shape[1]):
        img = (np.clip(planes[j], 0, 1) * 255).astype(np.uint8)
        Image.fromarray(img).save(os.path.join(out_dir, f"abundance-{j}.png"))
    Image.fromarray((units.reshape(rows, cols) * 40).astype(np.uint8)).save(os.path.join(out_dir, "units.png"))
    r8 = (np.clip(rmse / max(rmse.max(), 1e-9), 0, 1) * 255).astype(np.uint8)
    Image.fromarray(r8.reshape(rows, cols)).save(os.path.join(out_dir, "fit-rmse.png"))
    parts["write"] = time.perf_counter() - t
    # The whole pipeline with the loop's measured time replaced by its extrapolation.
    return time.perf_counter() - t0 - loop + parts["fcls (extrapolated)"], parts


def med(xs):
    return f"{statistics.median(xs):8.3f} (range {min(xs):.3f}-{max(xs):.3f})"


def main():
    if not os.path.exists(T):
        sys.exit("build first: cargo build --release")
    cubes = make_cubes()
    e32 = library_matrix(cubes["fcls"])
    e32_small = library_matrix(cubes["small"])
    print(f"machine: {platform.machine()}, {os.cpu_count()} cores, {platform.platform()}")
    print(f"thiomap: {subprocess.run([T, '--version'], capture_output=True, text=True).stdout.strip()}")
    print(f"rounds: {ROUNDS}; all thiomap runs with --threads 2; file cache warm\n")
    rec = {k: [] for k in ["fcls_map", "fcls_floor", "fcls_ratio", "sub_map", "sub_floor", "sub_ratio",
                            "unmix_stage_ratio", "py", "py_ratio", "small_unmix", "small_scipy",
                            "small_ratio"]}
    stage_rows = []
    for rnd in range(ROUNDS):
        # FCLS cube: map, floor, Python pipeline.
        out = f"{DATA}/fcls-map"
        m = run([T, "map", cubes["fcls"], "--out", out, "--overwrite", "--threads", "2"])
        f = floor(cubes["fcls"], out)
        st, rss = stages(out)
        stage_rows.append(("fcls", rnd, m, st, rss))
        py, parts = python_pipeline(cubes["fcls"], e32, f"{DATA}/python-out")
        rec["fcls_map"].append(m)
        rec["fcls_floor"].append(f)
        rec["fcls_ratio"].append(m / f)
        rec["py"].append(py)
        rec["py_ratio"].append(py / m)
        print(f"round {rnd + 1} fcls: map {m:.3f} s, floor {f:.3f} s, python {py:.1f} s "
              f"({', '.join(f'{k} {v:.2f}' for k, v in parts.items())})")
        # Subset cube: map, floor, and the FCLS unmix stage on the same cube.
        out = f"{DATA}/subset-map"
        m = run([T, "map", cubes["subset"], "--out", out, "--overwrite", "--threads", "2"])
        f = floor(cubes["subset"], out)
        st, rss = stages(out)
        stage_rows.append(("subset", rnd, m, st, rss))
        off = f"{DATA}/subset-off-map"
        run([T, "map", cubes["subset"], "--out", off, "--overwrite", "--threads", "2",
             "--subset", "off", "--force"])
        st_off, _ = stages(off)
        stage_rows.append(("subset --subset off", rnd, None, st_off, 0))
        rec["sub_map"].append(m)
        rec["sub_floor"].append(f)
        rec["sub_ratio"].append(m / f)
        rec["unmix_stage_ratio"].append(st["unmix"] / st_off["unmix"])
        print(f"round {rnd + 1} subset: map {m:.3f} s, floor {f:.3f} s, unmix stage "
              f"{st['unmix']:.3f} s vs FCLS {st_off['unmix']:.3f} s")
        # Small cube: unmix as a whole process against the SciPy loop.
        out = f"{DATA}/small-unmix"
        u = run([T, "unmix", cubes["small"], "--out", out, "--overwrite", "--threads", "2"])
        from astropy.io import fits
        with fits.open(cubes["small"], memmap=False) as h:
            y = np.asarray(h[0].data, dtype=np.float64)
        spectra = y.reshape(y.shape[0], -1).T
        pick = np.random.default_rng(2).choice(spectra.shape[0], SUBSET_PIXELS, replace=False)
        loop, _ = scipy_fcls(e32_small, spectra[pick])
        scipy_all = loop * spectra.shape[0] / SUBSET_PIXELS
        rec["small_unmix"].append(u)
        rec["small_scipy"].append(scipy_all)
        rec["small_ratio"].append(scipy_all / u)
        print(f"round {rnd + 1} small: unmix {u:.3f} s, SciPy FCLS loop {scipy_all:.2f} s "
              f"(extrapolated from {SUBSET_PIXELS} px)\n")

    print("stage times (timings.json), seconds:")
    for name, rnd, m, st, rss in stage_rows:
        line = ", ".join(f"{k} {v:.3f}" for k, v in st.items())
        extra = f", process {m:.3f}" if m else ""
        mem = f", peak {rss / 2**20:.0f} MiB" if rss else ""
        print(f"  {name:20s} round {rnd + 1}: {line}{extra}{mem}")
    print("\nmedians over rounds (ratios formed within each round):")
    print(f"  fcls   map {med(rec['fcls_map'])} s   floor {med(rec['fcls_floor'])} s")
    print(f"  fcls   map / floor              {med(rec['fcls_ratio'])}   target <= 12")
    print(f"  subset map {med(rec['sub_map'])} s   floor {med(rec['sub_floor'])} s")
    print(f"  subset map / floor              {med(rec['sub_ratio'])}   target <= 20")
    print(f"  subset unmix stage / FCLS stage {med(rec['unmix_stage_ratio'])}   target <= 5")
    print(f"  python pipeline / thiomap map   {med(rec['py_ratio'])}   target >= 30")
    print(f"  SciPy loop / thiomap unmix 512² {med(rec['small_ratio'])}   target >= 30")


if __name__ == "__main__":
    main()
