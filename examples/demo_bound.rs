//! The noise part of the demo globes' abundance error: for a cube, the abundance RMSE
//! against its truth (on unmixed pixels with incidence and emission below 70°, as
//! `tests/it/unmix.rs` measures it) beside the RMS of the standard error thiomap reports
//! there — the constrained Cramér–Rao form with σ from each pixel's residual, which the
//! coverage tests show is calibrated. Run on the scene before and after a change of its
//! noise model, the difference of the squared standard errors is what the noise alone adds
//! to the squared RMSE; the rest is bias, which noise does not change.
//!
//! With `known`, the noise is the scene's true one instead: each band's σ at its mean
//! signal (the cube's band table, or for a scene made before cubes carried it, its
//! truth.json), bands weighted by 1/σ and the standard error σ·√K of the whitened problem
//! with σ given — the constrained Cramér–Rao bound of the chosen passive set or subset.
//!
//! With `profile`, subset mode scores subsets by the profile-likelihood BIC even where the
//! band table states the noise.
//!
//! `cargo run --release --example demo_bound -- CUBE.fits [lambert] [subset K] [none] [known] [profile]`

use thiomap::cube::{Backplane, OpenOptions};
use thiomap::unmix::weights::BandWeighting;
use thiomap::unmix::{RunOptions, Subsets, UnmixParams};

fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let path = std::path::PathBuf::from(&args[0]);
    let has = |w: &str| args.iter().any(|a| a == w);
    let mut cube = thiomap::cube::load(&path, &OpenOptions::default()).unwrap();
    if has("lambert") {
        thiomap::pipeline::normalise(&mut cube, thiomap::photometry::Law::Lambert).unwrap();
    }
    let params = UnmixParams {
        subsets: match args.iter().position(|a| a == "subset") {
            Some(i) => Subsets::UpTo(args[i + 1].parse().unwrap()),
            None => Subsets::Auto,
        },
        ..Default::default()
    };
    let how = if has("none") {
        BandWeighting::None
    } else {
        BandWeighting::Auto
    };
    let truth = thiomap::demo::files::TruthFiles::read(&path).unwrap();
    let mut noise = None;
    if has("known") {
        let sigma: Vec<f64> = match cube.info.bands.noise_sigma() {
            Some(s) => s.to_vec(),
            None => {
                let stem = path.to_str().unwrap().trim_end_matches(".fits");
                let text = std::fs::read_to_string(format!("{stem}.truth.json")).unwrap();
                let json: serde_json::Value = serde_json::from_str(&text).unwrap();
                json["noise"]
                    .as_array()
                    .unwrap()
                    .iter()
                    .map(|n| {
                        let f = |k: &str| n[k].as_f64().unwrap();
                        (f("read_sigma").powi(2) + f("signal_coeff") * f("mean_signal")).sqrt()
                    })
                    .collect()
            }
        };
        let mut sorted = sigma.clone();
        sorted.sort_by(f64::total_cmp);
        noise = Some(sorted[sorted.len() / 2]);
        cube.info.bands = cube.info.bands.clone().with_noise_sigma(sigma).unwrap();
    }
    let lib = thiomap::library::Library::embedded();
    let r = thiomap::library::resample::resample(&lib, &cube.info.bands).unwrap();
    let (model, weights, _) =
        thiomap::pipeline::weighted_model(&cube, &r, &params, how, &mut Default::default())
            .unwrap();
    thiomap::pipeline::scale_bands(&mut cube.data, &weights.weights, false);
    let out = thiomap::unmix::unmix::<f64>(
        cube.data.view(),
        cube.valid.view(),
        &model,
        &RunOptions {
            // `profile`: score subsets as if the noise were unknown.
            stated_noise: if has("profile") {
                None
            } else {
                weights.stated_sigma
            },
            noise,
            ..Default::default()
        },
        &|_| {},
    );
    let materials: Vec<String> = out.ids.iter().filter(|i| *i != "shade").cloned().collect();
    let t = truth.over(&materials);
    let se = out.stderr();
    let (inc, emi) = (
        &cube.backplanes[&Backplane::Incidence],
        &cube.backplanes[&Backplane::Emission],
    );
    let (mut err2, mut se2, mut n) = (0.0, 0.0, 0usize);
    for ((row, col), ok) in out.unmixed.indexed_iter() {
        if !ok || inc[(row, col)] >= 70.0 || emi[(row, col)] >= 70.0 {
            continue;
        }
        for j in 0..materials.len() {
            err2 += (out.abundance[(row, col, j)] as f64 - t[(row, col, j)] as f64).powi(2);
            se2 += (se[(row, col, j)] as f64).powi(2);
        }
        n += materials.len();
    }
    println!(
        "{}: weights {:?}, {} pixel-planes: RMSE {:.4}, RMS standard error {:.4}, \
         mean squared error {:.6}, mean squared standard error {:.6}",
        path.display(),
        weights.source,
        n,
        (err2 / n as f64).sqrt(),
        (se2 / n as f64).sqrt(),
        err2 / n as f64,
        se2 / n as f64
    );
}
