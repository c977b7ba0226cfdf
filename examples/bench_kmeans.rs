//! Times linfa-clustering's k-means as thiomap calls it (Lloyd's algorithm) from given
//! centroids for a fixed number of iterations (no tolerance stop), and prints one JSON line.
//! Used by `benches/kmeans_vs_sklearn.py`; not part of the tool.
//!
//! Usage: bench_kmeans X.npy C0.npy ITERATIONS THREADS REPEATS

use std::time::Instant;

use linfa::prelude::*;
use linfa_clustering::{KMeans, KMeansInit};
use ndarray::Array2;
use ndarray_npy::read_npy;
use rand::SeedableRng;
use thiomap::units::cluster::SquaredEuclidean;

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
    let iters: u64 = iters.parse()?;
    let data = DatasetBase::from(x);
    let mut times = Vec::new();
    let mut inertia = 0.0;
    for _ in 0..repeats.parse::<usize>()? {
        let t = Instant::now();
        let model = KMeans::params_with(
            c0.nrows(),
            rand_chacha::ChaCha8Rng::seed_from_u64(1),
            SquaredEuclidean,
        )
        .init_method(KMeansInit::Precomputed(c0.clone()))
        .n_runs(1)
        .max_n_iterations(iters)
        // linfa refuses 0; the smallest positive tolerance stops only at strict convergence,
        // as scikit-learn's tol = 0 does.
        .tolerance(f64::MIN_POSITIVE)
        .fit(&data)?;
        times.push(t.elapsed().as_secs_f64());
        inertia = model.inertia();
    }
    times.sort_by(f64::total_cmp);
    let median = times[times.len() / 2];
    println!(
        "{{\"seconds\": {median:.5}, \"seconds_per_iteration\": {:.6}, \"inertia\": {inertia:.6}}}",
        median / iters as f64
    );
    Ok(())
}
