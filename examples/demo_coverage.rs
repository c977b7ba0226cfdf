//! How well the reported standard errors describe the demo cubes' errors: per cube, unit
//! and member present, the error decomposed into bias (the mean error), spread and the
//! part active-set switching adds, and the share within ±1σ and ±2σ.
//!
//! Pixels: core pixels of each unit (away from unit borders), incidence and emission below
//! 70°, unmixed, whose truth has every present member at 0.1 or more. The scenes are unmixed
//! as `map` does by default (the imager globe after the Lambert normalisation it was made
//! with). Truth is the demo's own synthetic truth; this measures thiomap against itself, not
//! against an outside reference.
//!
//! `cargo run --release --example demo_coverage [-- none]`

use std::collections::HashMap;
use std::path::Path;

use thiomap::cube::{Backplane, OpenOptions};
use thiomap::unmix::{RunOptions, UnmixParams};

fn main() {
    // `-- none`: equal band weights instead of the default.
    let how = if std::env::args().any(|a| a == "none") {
        thiomap::unmix::weights::BandWeighting::None
    } else {
        thiomap::unmix::weights::BandWeighting::Auto
    };
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-cubes");
    println!(
        "{:<26} {:<24} {:<32} {:>5} {:>7} {:>7} {:>7} {:>6} {:>6} {:>6} {:>6} {:>6}",
        "cube",
        "unit",
        "member",
        "n",
        "bias",
        "spread",
        "mean σ",
        "sd/σ",
        "rms/σ",
        "switch",
        "in 1σ",
        "in 2σ"
    );
    for (name, law) in [
        ("brimveil-globe-mapper96.fits", None),
        (
            "brimveil-globe-imager7.fits",
            Some(thiomap::photometry::Law::Lambert),
        ),
        ("brimveil-tile-spectrometer24.fits", None),
    ] {
        let path = root.join(name);
        let mut cube = thiomap::cube::load(&path, &OpenOptions::default()).unwrap();
        if let Some(law) = law {
            thiomap::pipeline::normalise(&mut cube, law).unwrap();
        }
        let truth = thiomap::demo::files::TruthFiles::read(&path).unwrap();
        let lib = thiomap::library::Library::embedded();
        let r = thiomap::library::resample::resample(&lib, &cube.info.bands).unwrap();
        // As `map` runs it, band weights included.
        let (model, weights, _) = thiomap::pipeline::weighted_model(
            &cube,
            &r,
            &UnmixParams::default(),
            how,
            &mut Default::default(),
        )
        .unwrap();
        thiomap::pipeline::scale_bands(&mut cube.data, &weights.weights, false);
        let opts = weights.apply(RunOptions {
            report_shade: true,
            ..Default::default()
        });
        let out = thiomap::unmix::unmix::<f32>(
            cube.data.view(),
            cube.valid.view(),
            &model,
            &opts,
            &|_| {},
        );
        let materials: Vec<String> = out.ids.iter().filter(|i| *i != "shade").cloned().collect();
        let t = truth.over(&materials);
        let se = out.stderr();
        let inc = cube.backplanes.get(&Backplane::Incidence);
        let emi = cube.backplanes.get(&Backplane::Emission);
        // Pixels per unit label.
        let mut units: HashMap<i16, Vec<(usize, usize)>> = HashMap::new();
        for ((r, c), ok) in out.unmixed.indexed_iter() {
            let geometry_ok =
                inc.is_none_or(|p| p[(r, c)] < 70.0) && emi.is_none_or(|p| p[(r, c)] < 70.0);
            let clean = (0..materials.len()).all(|j| {
                let v = t[(r, c, j)];
                v.is_finite() && !(1e-6..0.1).contains(&v)
            });
            if *ok && truth.core[(r, c)] && geometry_ok && clean {
                units.entry(truth.labels[(r, c)]).or_default().push((r, c));
            }
        }
        // Pooled over units and present members: count, within 1σ, within 2σ, Σ n·bias²,
        // Σ n·spread².
        let mut pooled = [0.0f64; 5];
        let mut labels: Vec<_> = units.keys().copied().collect();
        labels.sort();
        for label in labels {
            let px = &units[&label];
            if px.len() < 20 {
                continue;
            }
            let unit = truth
                .unit_names
                .get(label as usize - 1)
                .cloned()
                .unwrap_or_else(|| label.to_string());
            // The unit's most common passive set (or chosen subset).
            let key = |r: usize, c: usize| match &out.subset {
                Some(s) => s[(r, c)] as u32,
                None => out.errors.passive[(r, c)] as u32,
            };
            let mut sets: HashMap<u32, usize> = HashMap::new();
            for &(r, c) in px {
                *sets.entry(key(r, c)).or_default() += 1;
            }
            let modal = sets
                .iter()
                .max_by_key(|(_, n)| **n)
                .map(|(k, _)| *k)
                .unwrap();
            for (j, id) in materials.iter().enumerate() {
                let present = px.iter().filter(|&&(r, c)| t[(r, c, j)] >= 0.1).count();
                if present * 2 < px.len() {
                    continue;
                }
                let errs: Vec<(f64, f64, bool)> = px
                    .iter()
                    .map(|&(r, c)| {
                        (
                            out.abundance[(r, c, j)] as f64 - t[(r, c, j)] as f64,
                            se[(r, c, j)] as f64,
                            key(r, c) != modal,
                        )
                    })
                    .collect();
                let n = errs.len() as f64;
                let bias = errs.iter().map(|e| e.0).sum::<f64>() / n;
                let spread =
                    (errs.iter().map(|e| (e.0 - bias).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
                let sigma = errs.iter().map(|e| e.1).sum::<f64>() / n;
                let rms_z = (errs.iter().map(|e| (e.0 / e.1).powi(2)).sum::<f64>() / n).sqrt();
                let switched = errs.iter().filter(|e| e.2).count() as f64 / n;
                let within =
                    |k: f64| errs.iter().filter(|e| e.0.abs() < k * e.1).count() as f64 / n;
                pooled[0] += n;
                pooled[1] += within(1.0) * n;
                pooled[2] += within(2.0) * n;
                pooled[3] += n * bias * bias;
                pooled[4] += n * spread * spread;
                println!(
                    "{:<26} {:<24} {:<32} {:>5} {:>7.4} {:>7.4} {:>7.4} {:>6.2} {:>6.2} {:>6.3} {:>6.3} {:>6.3}",
                    name.trim_end_matches(".fits").trim_start_matches("brimveil-"),
                    unit,
                    id,
                    errs.len(),
                    bias,
                    spread,
                    sigma,
                    spread / sigma,
                    rms_z,
                    switched,
                    within(1.0),
                    within(2.0)
                );
            }
        }
        println!(
            "{:<26} pooled: {} pixel-members, within 1σ {:.3}, within 2σ {:.3}, RMS bias {:.3}, RMS spread {:.3}",
            name.trim_end_matches(".fits").trim_start_matches("brimveil-"),
            pooled[0],
            pooled[1] / pooled[0],
            pooled[2] / pooled[0],
            (pooled[3] / pooled[0]).sqrt(),
            (pooled[4] / pooled[0]).sqrt()
        );
    }
}
