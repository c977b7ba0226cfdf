#!/usr/bin/env python3
"""Side-by-side k-means benchmark: thiomap's k-means (Lloyd's iteration) against
scikit-learn, in one run, with linfa-clustering's k-means on the same problem for the record.

Data: 512 x 512 = 262,144 abundance vectors of 8 members (Dirichlet(1)), float64. Both sides
start from the same 8 given centroids (8 seeded data rows) and run exactly 20 Lloyd
iterations (tolerance 0): scikit-learn KMeans(n_clusters=8, init=C0, n_init=1, max_iter=20,
tol=0, algorithm="lloyd"), single-threaded and with 2 threads (threadpoolctl), against
thiomap's `units::kmeans::lloyd` and linfa-clustering's KMeans with 1 and 2 rayon threads. Median of 5 each. Target
(issue 6): thiomap's time per iteration within 2x scikit-learn's.

Usage: python3 benches/kmeans_vs_sklearn.py   (needs numpy, scikit-learn, threadpoolctl)
"""
import json
import os
import platform
import statistics
import subprocess
import time

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
DATA = os.path.join(ROOT, "bench-data")
N, M, ITERS, REPEATS = 512 * 512, 8, 20, 5


def main():
    import numpy as np
    import sklearn
    from sklearn.cluster import KMeans
    from threadpoolctl import threadpool_limits

    os.makedirs(DATA, exist_ok=True)
    rng = np.random.default_rng(20261202)
    X = rng.dirichlet(np.ones(M), size=N)
    C0 = X[rng.choice(N, size=8, replace=False)].copy()
    xp, cp = os.path.join(DATA, "kmeans-X.npy"), os.path.join(DATA, "kmeans-C0.npy")
    np.save(xp, X)
    np.save(cp, C0)
    subprocess.run(["cargo", "build", "--release", "--quiet", "--example", "bench_kmeans"], cwd=ROOT, check=True)
    exe = os.path.join(ROOT, "target", "release", "examples", "bench_kmeans")
    cpu = next((l.split(":", 1)[1].strip() for l in open("/proc/cpuinfo") if l.startswith("model name")), "")
    print(f"machine: {cpu}, {os.cpu_count()} cores, {platform.platform()}")
    print(f"python {platform.python_version()}, numpy {np.__version__}, scikit-learn {sklearn.__version__}")
    print(f"data: {N} x {M} float64, 8 clusters from the same given centroids, {ITERS} iterations, tol 0")
    for threads in (1, 2):
        ts, its = [], []
        with threadpool_limits(limits=threads):
            for _ in range(REPEATS + 1):
                km = KMeans(n_clusters=8, init=C0, n_init=1, max_iter=ITERS, tol=0, algorithm="lloyd")
                t = time.perf_counter()
                km.fit(X)
                ts.append(time.perf_counter() - t)
                its.append(km.n_iter_)
        sk = statistics.median(ts[1:]) / statistics.median(its[1:])
        out = subprocess.run([exe, xp, cp, str(ITERS), str(threads), str(REPEATS)],
                             check=True, capture_output=True, text=True).stdout
        th = json.loads(out.strip().splitlines()[-1])
        print(f"\n[{threads} thread(s)]")
        print(f"  scikit-learn : {1e3 * sk:8.2f} ms per iteration (n_iter {statistics.median(its[1:])}, mean inertia {km.inertia_ / N:.6f})")
        print(f"  thiomap      : {1e3 * th['seconds_per_iteration']:8.2f} ms per iteration (n_iter {th['iterations']}, mean inertia {th['inertia']:.6f})")
        print(f"  linfa-clust. : {1e3 * th['linfa_seconds_per_iteration']:8.2f} ms per iteration (mean inertia {th['linfa_inertia']:.6f})")
        print(f"  ratio thiomap / scikit-learn: {th['seconds_per_iteration'] / sk:.2f} (target <= 2)")
        print(f"  ratio linfa-clustering / scikit-learn: {th['linfa_seconds_per_iteration'] / sk:.2f}")


if __name__ == "__main__":
    main()
