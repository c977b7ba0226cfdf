//! Times thiomap's FCLS end to end (Eᵀy, active-set solve, residual RMSE, standard errors
//! in their factored form) on a synthetic problem written by `benches/unmix_vs_numpy.py`,
//! and prints one JSON line. Not part of the tool.
//!
//! Usage: bench_unmix E.npy Y.npy A.npy THREADS REPEATS
//!   E: (B, M) f64 endmembers; Y: (H, W, B) f32 pixels; A: (H·W, M) f64 true abundances.

use std::time::Instant;

use ndarray::{Array2, Array3};
use ndarray_npy::read_npy;
use thiomap::cube::{BandTable, Cube};
use thiomap::unmix::{unmix, Model, RunOptions, Solver};

fn main() -> anyhow::Result<()> {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let [e_path, y_path, a_path, threads, repeats] = args.as_slice() else {
        anyhow::bail!("usage: bench_unmix E.npy Y.npy A.npy THREADS REPEATS");
    };
    rayon::ThreadPoolBuilder::new()
        .num_threads(threads.parse()?)
        .build_global()?;
    let e: Array2<f64> = read_npy(e_path)?;
    let y: Array3<f32> = read_npy(y_path)?;
    let truth: Array2<f64> = read_npy(a_path)?;
    let (h, w, b) = y.dim();
    let m = e.ncols();
    let model = Model::from_matrix(e, Solver::Fcls)?;
    let bands = BandTable::evenly_spaced(b, 0.4, 0.05)?;
    let cube = Cube::from_pixels(y, bands);
    let opts = RunOptions {
        report_shade: false,
        noise: None,
        residuals: false,
        ..Default::default()
    };
    let mut times = Vec::new();
    let mut out = None;
    for _ in 0..repeats.parse::<usize>()? {
        // The previous result goes first, as numpy's product is discarded between calls.
        drop(out.take());
        let t = Instant::now();
        out = Some(unmix::<f32>(
            cube.data.view(),
            cube.valid.view(),
            &model,
            &opts,
            &|_| {},
        ));
        times.push(t.elapsed().as_secs_f64());
    }
    times.sort_by(f64::total_cmp);
    let median = times[times.len() / 2];
    let fastest = times[0];
    let out = out.expect("at least one repeat");
    let mut se = 0.0;
    for r in 0..h {
        for c in 0..w {
            for j in 0..m {
                se += (out.abundance[(r, c, j)] as f64 - truth[(r * w + c, j)]).powi(2);
            }
        }
    }
    let peak = thiomap::results::peak_rss_bytes();
    println!(
        "{{\"seconds\": {median:.5}, \"fastest_seconds\": {fastest:.5}, \"pixels_per_s\": {:.1}, \"abundance_rmse\": {:.5}, \"peak_rss_bytes\": {peak}, \"enumerated\": {}, \"steps_per_pixel\": {:.3}}}",
        (h * w) as f64 / median,
        (se / (h * w * m) as f64).sqrt(),
        out.counts.enumerated,
        out.counts.steps as f64 / (h * w) as f64
    );
    Ok(())
}
