//! Times thiomap's k-means (Lloyd's iteration, `thiomap::units::kmeans::lloyd`) from given
//! centroids for a fixed number of iterations (no tolerance stop), and, for the record,
//! linfa-clustering's k-means on the same problem; prints one JSON line.
//! Used by `benches/kmeans_vs_sklearn.py`; not part of the tool.
//!
//! Usage: bench_kmeans X.npy C0.npy ITERATIONS THREADS REPEATS

use std::time::Instant;

use linfa::prelude::*;
use linfa_clustering::{KMeans, KMeansInit};
use ndarray::Array2;
use ndarray_npy::read_npy;
use rand::SeedableRng;
use thiomap::units::kmeans::lloyd;

/// Median seconds of `repeats` calls of `f`, and the last call's result.
fn median<T>(repeats: usize, mut f: impl FnMut() -> T) -> (f64, T) {
    let mut times = Vec::new();
    let mut last = None;
    for _ in 0..repeats {
        let t = Instant::now();
        last = Some(f());
        times.push(t.elapsed().as_secs_f64());
    }
    times.sort_by(f64::total_cmp);
    (times[times.len() / 2], last.expect("repeats ≥ 1"))
}

fn main() -> anyhow::Result<()> {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let [x_path, c_path, iters, threads, repeats] = args.as_slice() else {
        anyhow::bail!("usage: bench_kmeans X.npy C0.npy ITERATIONS THREADS REPEATS");
    };
    rayon::ThreadPoolBuilder::new()
        .num_threads(threads.parse()?)
        .build_global()?;
    let x: Array2<f64> = read_npy(x_path)?;
    let c0: Array2<f64> = read_npy(c_path)?;
    let iters: usize = iters.parse()?;
    let repeats: usize = repeats.parse()?;
    let (t, fit) = median(repeats, || lloyd(x.view(), &c0, iters, 0.0));
    let data = DatasetBase::from(x.clone());
    let (tl, linfa) = median(repeats, || {
        KMeans::params_with_rng(c0.nrows(), rand_chacha::ChaCha8Rng::seed_from_u64(1))
            .init_method(KMeansInit::Precomputed(c0.clone()))
            .n_runs(1)
            .max_n_iterations(iters as u64)
            // linfa refuses 0; the smallest positive tolerance stops only at strict
            // convergence, as a tolerance of 0 does.
            .tolerance(f64::MIN_POSITIVE)
            .fit(&data)
    });
    println!(
        "{{\"seconds\": {t:.5}, \"iterations\": {}, \"seconds_per_iteration\": {:.6}, \
         \"inertia\": {:.6}, \"linfa_seconds_per_iteration\": {:.6}, \"linfa_inertia\": {:.6}}}",
        fit.iterations,
        t / fit.iterations.max(1) as f64,
        fit.inertia,
        tl / iters as f64,
        linfa?.inertia()
    );
    Ok(())
}
