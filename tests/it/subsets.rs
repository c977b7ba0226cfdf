//! Subset mode's residual bound against solving every subset: the bound only skips
//! subsets whose BIC weight is provably below the truncation, so with it the results equal
//! those of the exhaustive evaluation at the same truncation bit for bit, and differ from
//! the untruncated evaluation by no more than the weights left out can move them.
//! Our own synthetic truth (the imager demo globe) and seeded random problems.

use ndarray::{Array2, Array3};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use thiomap::unmix::{RunOptions, Solver, Subsets, UnmixOutput, UnmixParams};

/// The three runs of one problem: bound on (the default), every subset solved at the
/// same truncation, and every subset solved and kept (truncation 0).
fn three_ways(
    data: &Array3<f32>,
    valid: &Array2<bool>,
    model: &thiomap::unmix::Model,
    opts: RunOptions,
) -> [UnmixOutput; 3] {
    let run =
        |o: RunOptions| thiomap::unmix::unmix::<f32>(data.view(), valid.view(), model, &o, &|_| {});
    [
        run(opts),
        run(RunOptions {
            exhaustive_subsets: true,
            ..opts
        }),
        run(RunOptions {
            exhaustive_subsets: true,
            subset_truncation: 0.0,
            ..opts
        }),
    ]
}

/// Checks the three runs; returns the largest abundance and standard-error differences
/// between the truncated and the untruncated evaluation.
fn check(outs: &[UnmixOutput; 3], subsets: usize, t: f64, what: &str) -> (f64, f64) {
    let [bound, exhaustive, all] = outs;
    let bits = |a: &Array3<f32>| a.iter().map(|v| v.to_bits()).collect::<Vec<_>>();
    assert_eq!(
        bits(&bound.abundance),
        bits(&exhaustive.abundance),
        "{what}: abundances"
    );
    assert_eq!(
        bits(&bound.stderr()),
        bits(&exhaustive.stderr()),
        "{what}: standard errors"
    );
    assert_eq!(bound.subset, exhaustive.subset, "{what}: chosen subsets");
    assert_eq!(
        bound.rmse.iter().map(|v| v.to_bits()).collect::<Vec<_>>(),
        exhaustive
            .rmse
            .iter()
            .map(|v| v.to_bits())
            .collect::<Vec<_>>(),
        "{what}: fit RMSE"
    );
    // The best subset always keeps its weight 1, so the choice is the same untruncated.
    assert_eq!(
        exhaustive.subset, all.subset,
        "{what}: chosen subsets, untruncated"
    );
    // Leaving out weights w_o < t of N subsets (Σ w ≥ 1, the best's) moves each raw
    // abundance by at most N t / (1 − N t) (raw abundances lie in 0–1), and the reported
    // f = a / S, S the material sum, by at most (1 + D) N t / ((1 − N t) S), D materials.
    let nt = subsets as f64 * t;
    let (p, shade) = (all.ids.len(), all.ids.iter().position(|i| i == "shade"));
    let d = p - shade.is_some() as usize;
    let (mut worst_a, mut worst_e, mut n) = (0.0f64, 0.0f64, 0usize);
    let (e1, e2) = (exhaustive.stderr(), all.stderr());
    for ((r, c), ok) in all.unmixed.indexed_iter() {
        if !ok {
            continue;
        }
        n += 1;
        let s = shade.map_or(1.0, |sh| 1.0 - all.abundance[(r, c, sh)] as f64);
        let limit = (1 + d) as f64 * nt / ((1.0 - nt) * s) + 2e-6;
        for j in 0..d {
            let diff =
                (exhaustive.abundance[(r, c, j)] as f64 - all.abundance[(r, c, j)] as f64).abs();
            assert!(
                diff <= limit,
                "{what}: pixel ({r}, {c}) member {j} moved {diff} > {limit}"
            );
            worst_a = worst_a.max(diff);
            worst_e = worst_e.max((e1[(r, c, j)] as f64 - e2[(r, c, j)] as f64).abs());
        }
    }
    assert!(n > 0, "{what}: no pixel unmixed");
    (worst_a, worst_e)
}

#[test]
fn the_bound_skips_only_subsets_below_the_truncation_on_the_imager_globe() {
    use thiomap::cube::OpenOptions;
    let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("demo-cubes")
        .join("brimveil-globe-imager7.fits");
    let mut cube = thiomap::cube::load(&path, &OpenOptions::default()).unwrap();
    let lib = thiomap::library::Library::embedded();
    let r = thiomap::library::resample::resample(&lib, &cube.info.bands).unwrap();
    let params = UnmixParams {
        subsets: Subsets::UpTo(3),
        ..Default::default()
    };
    let (model, opts) = super::support::as_map_runs(&mut cube, &r, &params, RunOptions::default());
    assert!(model.subsets.len() > 20, "{} subsets", model.subsets.len());
    let outs = three_ways(&cube.data, &cube.valid, &model, opts);
    let (a, e) = check(
        &outs,
        model.subsets.len(),
        opts.subset_truncation,
        "imager globe",
    );
    eprintln!(
        "imager globe, {} subsets: truncated vs untruncated, abundance {a:.2e}, standard error {e:.2e}",
        model.subsets.len()
    );
}

#[test]
fn the_bound_skips_only_subsets_below_the_truncation_on_random_problems() {
    let mut rng = ChaCha8Rng::seed_from_u64(11);
    for trial in 0..12 {
        let bands = rng.gen_range(5..10);
        let m = rng.gen_range(bands..bands + 4);
        let k = rng.gen_range(1..=3);
        // Smooth positive spectra, so that members are alike as library spectra are.
        let e = Array2::from_shape_fn((bands, m), |(b, j)| {
            0.3 + 0.25 * ((b as f64 * 0.4 + j as f64 * 1.7).sin()) + 0.05 * rng.gen::<f64>()
        });
        let r = thiomap::library::resample::Resampled {
            ids: (0..m).map(|j| format!("m{j}")).collect(),
            classes: vec![thiomap::library::Class::Other; m],
            centres_um: (0..bands).map(|i| 0.4 + 0.05 * i as f64).collect(),
            matrix: e.clone(),
        };
        let params = UnmixParams {
            solver: Solver::Fcls,
            shade: true,
            subsets: Subsets::UpTo(k),
            groups: false,
            force: true,
            ..Default::default()
        };
        let model = thiomap::unmix::Model::build(&r, &params).unwrap();
        // Mixtures of up to three members, darkened, with noise of σ = 0.003 or unknown.
        let (rows, cols) = (6, 40);
        let data = Array3::from_shape_fn((rows, cols, bands), |_| 0.0f32);
        let mut data = data;
        for rr in 0..rows {
            for c in 0..cols {
                let mut a = vec![0.0; m];
                for _ in 0..rng.gen_range(1..=3) {
                    a[rng.gen_range(0..m)] += rng.gen::<f64>();
                }
                let sum: f64 = a.iter().sum();
                let bright = rng.gen_range(0.3..1.0);
                for b in 0..bands {
                    let y: f64 = (0..m).map(|j| e[(b, j)] * a[j] / sum).sum::<f64>() * bright;
                    data[(rr, c, b)] = (y + 0.003 * (rng.gen::<f64>() - 0.5) * 3.46) as f32;
                }
            }
        }
        let valid = Array2::from_elem((rows, cols), true);
        let opts = RunOptions {
            noise: (trial % 2 == 0).then_some(0.003),
            stated_noise: (trial % 2 == 0).then_some(0.003),
            ..Default::default()
        };
        let outs = three_ways(&data, &valid, &model, opts);
        check(
            &outs,
            model.subsets.len(),
            opts.subset_truncation,
            &format!("trial {trial}"),
        );
    }
}
