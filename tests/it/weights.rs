//! Band weights 1/σ_b: better abundances where band noise differs, from a stated σ or an
//! estimated one.

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use thiomap::unmix::weights::{BandWeighting, WeightSource};
use thiomap::unmix::{RunOptions, UnmixParams};

/// A small hyperspectral demo globe whose odd bands carry 15× more noise; the band table
/// states each band's σ when `state_sigma`.
fn noisy_scene(state_sigma: bool) -> (thiomap::demo::Scene, Vec<f64>) {
    let bands = thiomap::cube::bandsets::resolve("mapper-96").unwrap().bands;
    let lib = thiomap::library::Library::embedded();
    let p = thiomap::demo::SceneParams {
        rows: 64,
        cols: 64,
        snr: 200.0,
        seed: 21,
        ..Default::default()
    };
    let mut scene = thiomap::demo::generate(&p, &lib, &bands, "test").unwrap();
    let mut rng = ChaCha8Rng::seed_from_u64(22);
    let nb = bands.len();
    let base: Vec<f64> = scene
        .truth
        .noise
        .iter()
        .map(|n| n.sigma(n.mean_signal))
        .collect();
    let extra: Vec<f64> = (0..nb)
        .map(|b| if b % 2 == 1 { 14.0 * base[b] } else { 0.0 })
        .collect();
    for ((_, _, b), v) in scene.cube.data.indexed_iter_mut() {
        if v.is_finite() && extra[b] > 0.0 {
            let (u1, u2): (f64, f64) = (1.0 - rng.gen::<f64>(), rng.gen());
            *v += (extra[b] * (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()) as f32;
        }
    }
    let sigma: Vec<f64> = (0..nb).map(|b| base[b].hypot(extra[b])).collect();
    // The demo states its own detector noise; replace it with the true σ, or state none.
    scene.cube.info.bands = if state_sigma {
        bands.with_noise_sigma(sigma.clone()).unwrap()
    } else {
        bands
    };
    (scene, sigma)
}

/// Abundance RMSE against the truth over the surface, and the weights used.
fn rmse(
    scene: &thiomap::demo::Scene,
    how: BandWeighting,
) -> (f64, thiomap::unmix::weights::BandWeights) {
    let lib = thiomap::library::Library::embedded();
    let mut cube = scene.cube.clone();
    let r = thiomap::library::resample::resample(&lib, &cube.info.bands).unwrap();
    let params = UnmixParams {
        groups: false,
        ..Default::default()
    };
    let (model, w, _) =
        thiomap::pipeline::weighted_model(&cube, &r, &params, how, &mut Default::default())
            .unwrap();
    thiomap::pipeline::scale_bands(&mut cube.data, &w.weights, false);
    let out = thiomap::unmix::unmix::<f64>(
        cube.data.view(),
        cube.valid.view(),
        &model,
        &RunOptions::default(),
        &|_| {},
    );
    let ids: Vec<&String> = out.ids.iter().filter(|i| *i != "shade").collect();
    let (mut s, mut n) = (0.0, 0usize);
    for ((row, col), ok) in out.unmixed.indexed_iter() {
        if !ok {
            continue;
        }
        for (j, id) in ids.iter().enumerate() {
            let k = scene.truth.ids.iter().position(|x| x == *id).unwrap();
            s += (out.abundance[(row, col, j)] as f64
                - scene.truth.abundance[(row, col, k)] as f64)
                .powi(2);
            n += 1;
        }
    }
    ((s / n as f64).sqrt(), w)
}

#[test]
fn weighting_by_the_stated_noise_beats_equal_weights() {
    // Weighted least squares with W = Σ^(-1/2) is the minimum-variance linear unbiased
    // estimator (Aitken 1935, generalised least squares): where half the bands carry 15×
    // the noise, it must do clearly better than equal weights.
    let (scene, sigma) = noisy_scene(true);
    let (weighted, w) = rmse(&scene, BandWeighting::Auto);
    let (plain, u) = rmse(&scene, BandWeighting::None);
    eprintln!("stated σ: weighted RMSE {weighted:.4}, equal weights {plain:.4}");
    assert_eq!(w.source, WeightSource::BandTable);
    assert_eq!(u.source, WeightSource::Uniform);
    assert!((w.weights[0] / w.weights[1] - sigma[1] / sigma[0]).abs() < 1e-9);
    assert!(weighted < 0.8 * plain, "{weighted} vs {plain}");
}

#[test]
fn without_a_stated_noise_it_is_estimated_from_the_residuals() {
    let (scene, sigma) = noisy_scene(false);
    let (weighted, w) = rmse(&scene, BandWeighting::Auto);
    let (plain, _) = rmse(&scene, BandWeighting::None);
    eprintln!("estimated σ: weighted RMSE {weighted:.4}, equal weights {plain:.4}");
    assert_eq!(w.source, WeightSource::Residuals);
    // The noisy bands' estimated weight relative to their clean neighbours is the true
    // σ ratio (1/15) within 25 %.
    let ratio: Vec<f64> = (1..sigma.len() - 1)
        .step_by(2)
        .map(|b| (w.weights[b] / w.weights[b - 1]) / (sigma[b - 1] / sigma[b]))
        .collect();
    let mut sorted = ratio.clone();
    sorted.sort_by(f64::total_cmp);
    let median = sorted[sorted.len() / 2];
    assert!((median - 1.0).abs() < 0.25, "median ratio {median}");
    assert!(weighted < 0.8 * plain, "{weighted} vs {plain}");
}

#[test]
fn the_choice_is_a_recipe_key_and_a_flag() {
    let dir = tempfile::tempdir().unwrap();
    let cube = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("demo-cubes")
        .join("brimveil-globe-imager7.fits");
    let out = dir.path().join("r");
    let run = super::support::thiomap(&[
        "unmix",
        cube.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--band-weights",
        "none",
    ]);
    assert!(run.status.success(), "{}", super::support::stderr(&run));
    let run_json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("run.json")).unwrap()).unwrap();
    assert_eq!(run_json["recipe"]["band_weights"], "none");
    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("summary.json")).unwrap()).unwrap();
    assert_eq!(summary["band_weights"]["source"], "uniform");
    let bad = super::support::thiomap(&[
        "unmix",
        cube.to_str().unwrap(),
        "--out",
        "x",
        "--band-weights",
        "sigma",
    ]);
    assert_eq!(bad.status.code(), Some(2));
    // auto on the shipped cube: its band table states the noise, and the summary says so.
    let out1 = dir.path().join("s");
    let run = super::support::thiomap(&[
        "unmix",
        cube.to_str().unwrap(),
        "--out",
        out1.to_str().unwrap(),
    ]);
    assert!(run.status.success(), "{}", super::support::stderr(&run));
    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out1.join("summary.json")).unwrap()).unwrap();
    assert_eq!(summary["band_weights"]["source"], "band-table");
    assert!(summary["band_weights"]["stated_sigma"].as_f64().unwrap() > 0.0);
    // auto on a 7-band cube without a stated noise: too few bands to estimate, and it says so.
    let mut plain = thiomap::cube::load(&cube, &Default::default()).unwrap();
    plain.info.bands = thiomap::cube::bandsets::resolve("imager-7").unwrap().bands;
    let bare = dir.path().join("bare.fits");
    thiomap::cube::fits::write_cube(&bare, &plain).unwrap();
    let out2 = dir.path().join("a");
    let run = super::support::thiomap(&[
        "unmix",
        bare.to_str().unwrap(),
        "--out",
        out2.to_str().unwrap(),
    ]);
    assert!(run.status.success(), "{}", super::support::stderr(&run));
    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out2.join("summary.json")).unwrap()).unwrap();
    assert_eq!(summary["band_weights"]["source"], "uniform");
    assert!(summary["band_weights"]["note"]
        .as_str()
        .unwrap()
        .contains("too few"));
}
