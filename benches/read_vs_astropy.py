#!/usr/bin/env python3
"""Side-by-side read benchmark: thiomap vs astropy + numpy, same file, one run.

Makes (once) a 1024 x 1024 x 64 float32 FITS cube (256 MiB) under bench-data/, warms
the page cache, then alternates N reads by each reader and prints medians and ratios:

  thiomap: cube::load (examples/read_cube.rs), pixel-interleaved f32, mask computed
  astropy: np.ascontiguousarray(np.transpose(fits.getdata(f), (1, 2, 0)), dtype=float32)

Each side times only its read inside its own process; peak memory is the process's
peak resident set (VmHWM / ru_maxrss). Targets (issue 2): thiomap's time <= 1.5x
astropy's, and peak memory <= 1.3x the cube's f32 size.

Usage: python3 benches/read_vs_astropy.py [N]   (needs astropy, numpy; run from the repo)
"""
import json
import os
import platform
import statistics
import subprocess
import sys

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
DATA = os.path.join(ROOT, "bench-data")
CUBE = os.path.join(DATA, "read-1024x1024x64.fits")

ASTROPY_READ = r"""
import json, resource, sys, time
import numpy as np
from astropy.io import fits
t = time.perf_counter()
data = np.ascontiguousarray(np.transpose(fits.getdata(sys.argv[1]), (1, 2, 0)), dtype=np.float32)
seconds = time.perf_counter() - t
print(json.dumps({"seconds": seconds, "peak_rss_bytes": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024,
                  "checksum": float(data.ravel()[::4099].astype(np.float64).sum())}))
"""


def make_cube():
    import numpy as np
    from astropy.io import fits

    os.makedirs(DATA, exist_ok=True)
    if os.path.exists(CUBE):
        return
    rng = np.random.default_rng(7)
    data = rng.random((64, 1024, 1024), dtype=np.float32)
    hdu = fits.PrimaryHDU(data)
    for k, v in {"CTYPE3": "WAVE", "CUNIT3": "um", "CRPIX3": 1.0, "CRVAL3": 0.4, "CDELT3": 0.03}.items():
        hdu.header[k] = v
    hdu.writeto(CUBE)


def run(cmd):
    out = subprocess.run(cmd, check=True, capture_output=True, text=True).stdout
    return json.loads(out.strip().splitlines()[-1])


def main():
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 5
    make_cube()
    subprocess.run(["cargo", "build", "--release", "--quiet", "--example", "read_cube"], cwd=ROOT, check=True)
    reader = os.path.join(ROOT, "target", "release", "examples", "read_cube")
    with open(CUBE, "rb") as f:  # warm the page cache for both sides
        while f.read(1 << 24):
            pass
    size = os.path.getsize(CUBE)
    results = {"thiomap 2 threads": [], "thiomap 1 thread": [], "astropy+numpy": []}
    for _ in range(n):
        results["thiomap 2 threads"].append(run([reader, CUBE, "2"]))
        results["thiomap 1 thread"].append(run([reader, CUBE, "1"]))
        results["astropy+numpy"].append(run([sys.executable, "-c", ASTROPY_READ, CUBE]))
    import astropy
    import numpy

    print(f"machine: {platform.machine()}, {os.cpu_count()} cores, {platform.platform()}; "
          f"python {platform.python_version()}, numpy {numpy.__version__}, astropy {astropy.__version__}")
    print(f"cube: {CUBE} ({size / 2**20:.0f} MiB file, 1024 x 1024 x 64 float32), {n} alternating runs, warm cache")
    cube_bytes = 1024 * 1024 * 64 * 4
    med = {}
    for name, runs in results.items():
        t = statistics.median(r["seconds"] for r in runs)
        m = max(r["peak_rss_bytes"] for r in runs)
        med[name] = t
        print(f"{name:18s} median {t:7.3f} s   ({cube_bytes / t / 2**20:7.0f} MiB/s)   "
              f"peak RSS {m / 2**20:6.0f} MiB = {m / cube_bytes:.2f} x cube")
    a = med["astropy+numpy"]
    for name in ("thiomap 2 threads", "thiomap 1 thread"):
        print(f"{name} time / astropy time = {med[name] / a:.2f} (target <= 1.5)")


if __name__ == "__main__":
    main()
