//! The unmixing engine against outside references (SciPy solutions, published worked
//! examples), optimality conditions, statistical efficiency, and the demo truth.

use ndarray::Array2;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use thiomap::unmix::model::Model;
use thiomap::unmix::solve::{solve_pixel, solve_spectrum};
use thiomap::unmix::{Solver, Subsets, UnmixParams};

use super::support::fixture;

/// A model straight from a matrix (no library, no groups, no shade).
fn model(e: &Array2<f64>, solver: Solver) -> Model {
    Model::from_matrix(e.clone(), solver).unwrap()
}

fn solve64(m: &Model, y: &[f64]) -> Vec<f64> {
    solve_spectrum(m, y).0
}

/// The f32 path as the driver runs it: f32 samples whitened in f32, then the f32 table and
/// steps.
fn solve32(m: &Model, y: &[f64]) -> Vec<f64> {
    let z: Vec<f32> = (0..m.q.ncols())
        .map(|k| {
            (0..y.len())
                .map(|i| m.q[(i, k)] as f32 * y[i] as f32)
                .sum::<f32>()
        })
        .collect();
    let mut a = vec![0.0f32; m.columns()];
    let full = m.full_mask();
    solve_pixel(&m.table32, &z, full, full, m.solver.non_negative(), &mut a);
    a.iter().map(|v| *v as f64).collect()
}

fn matrix(rows: &[Vec<f64>]) -> Array2<f64> {
    Array2::from_shape_fn((rows.len(), rows[0].len()), |(i, j)| rows[i][j])
}

#[test]
fn nnls_worked_example() {
    // REFERENCES #11 (computed): A = [[1,0],[0,1],[1,1]], b = [2,−1,1] → x = [1.5, 0], ‖r‖² = 1.5
    let e = matrix(&[vec![1.0, 0.0], vec![0.0, 1.0], vec![1.0, 1.0]]);
    let y = [2.0, -1.0, 1.0];
    let a = solve64(&model(&e, Solver::Nnls), &y);
    assert!((a[0] - 1.5).abs() < 1e-9 && a[1].abs() < 1e-9, "{a:?}");
    let r2: f64 = (0..3)
        .map(|i| (y[i] - e[(i, 0)] * a[0] - e[(i, 1)] * a[1]).powi(2))
        .sum();
    assert!((r2 - 1.5).abs() < 1e-9);
}

#[test]
fn fcls_worked_example() {
    // REFERENCES #12 (computed): columns [.9,.8,.1,.2], [.1,.3,.7,.6], [.5,.5,.5,.4];
    // y = [.38,.46,.52,.46] → a = [0.2, 0.5, 0.3]
    let e = matrix(&[
        vec![0.9, 0.1, 0.5],
        vec![0.8, 0.3, 0.5],
        vec![0.1, 0.7, 0.5],
        vec![0.2, 0.6, 0.4],
    ]);
    let a = solve64(&model(&e, Solver::Fcls), &[0.38, 0.46, 0.52, 0.46]);
    for (got, want) in a.iter().zip([0.2, 0.5, 0.3]) {
        assert!((got - want).abs() < 1e-6, "{a:?}");
    }
}

#[test]
fn scipy_reference_solutions_are_matched() {
    // REFERENCES #18: SciPy 1.17.1 scipy.optimize.nnls and an exhaustive KKT-checked FCLS
    // (tests/fixtures/reference/solver-checks.json): 1e-9 on the f64 path, and the f32 path
    // within 1e-4 of the f64 path.
    let text = std::fs::read_to_string(fixture("reference/solver-checks.json")).unwrap();
    let json: serde_json::Value = serde_json::from_str(&text).unwrap();
    for p in json["problems"].as_array().unwrap() {
        let name = p["name"].as_str().unwrap();
        let rows: Vec<Vec<f64>> = p["E"]
            .as_array()
            .unwrap()
            .iter()
            .map(|r| {
                r.as_array()
                    .unwrap()
                    .iter()
                    .map(|v| v.as_f64().unwrap())
                    .collect()
            })
            .collect();
        let e = matrix(&rows);
        let y: Vec<f64> = p["y"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_f64().unwrap())
            .collect();
        let vec = |k: &str| -> Vec<f64> {
            p[k].as_array()
                .unwrap()
                .iter()
                .map(|v| v.as_f64().unwrap())
                .collect()
        };
        for (solver, key) in [
            (Solver::Nnls, "nnls"),
            (Solver::Fcls, "fcls_exact_active_set"),
            (Solver::Unconstrained, "unconstrained_ls"),
        ] {
            let m = model(&e, solver);
            let a = solve64(&m, &y);
            let want = vec(key);
            for (g, w) in a.iter().zip(&want) {
                assert!((g - w).abs() < 1e-9, "{name} {key}: {a:?} vs {want:?}");
            }
            let a32 = solve32(&m, &y);
            let worst = a32
                .iter()
                .zip(&a)
                .fold(0.0f64, |m, (g, w)| m.max((g - w).abs()));
            eprintln!("{name} {key}: f32 path within {worst:.1e} of f64");
            assert!(worst < 1e-4, "{name} {key} f32: {a32:?} vs {a:?}");
        }
    }
}

#[test]
fn fcls_and_nnls_satisfy_the_kkt_conditions_on_many_random_problems() {
    // Karush–Kuhn–Tucker conditions (common practice), checked independently of the solver:
    // with g = Eᵀ(Ea − y), FCLS needs a ≥ 0, Σa = 1, g_i equal (= −λ) on the support and
    // g_j ≥ that value off it; NNLS needs g_i = 0 on the support and g_j ≥ 0 off it.
    let mut rng = ChaCha8Rng::seed_from_u64(42);
    for trial in 0..300 {
        let bands = rng.gen_range(6..32);
        let m = rng.gen_range(2..=8.min(bands));
        let e = Array2::from_shape_fn((bands, m), |_| rng.gen_range(0.02..1.0));
        let y: Vec<f64> = (0..bands).map(|_| rng.gen_range(0.0..1.0)).collect();
        for solver in [Solver::Fcls, Solver::Nnls] {
            let md = model(&e, solver);
            let a = solve64(&md, &y);
            let fit: Vec<f64> = (0..bands)
                .map(|i| (0..m).map(|j| e[(i, j)] * a[j]).sum())
                .collect();
            let g: Vec<f64> = (0..m)
                .map(|j| (0..bands).map(|i| e[(i, j)] * (fit[i] - y[i])).sum())
                .collect();
            let tol = 1e-8;
            assert!(a.iter().all(|v| *v >= 0.0), "trial {trial}: {a:?}");
            let support: Vec<usize> = (0..m).filter(|&j| a[j] > 1e-12).collect();
            let level = if solver == Solver::Fcls {
                assert!((a.iter().sum::<f64>() - 1.0).abs() < 1e-9, "trial {trial}");
                support.iter().map(|&j| g[j]).sum::<f64>() / support.len() as f64
            } else {
                0.0
            };
            for &j in &support {
                assert!(
                    (g[j] - level).abs() < tol,
                    "trial {trial} {solver:?}: g {g:?} a {a:?}"
                );
            }
            for j in (0..m).filter(|j| !support.contains(j)) {
                assert!(
                    g[j] >= level - tol,
                    "trial {trial} {solver:?}: g {g:?} a {a:?}"
                );
            }
        }
    }
}

#[test]
fn fcls_is_efficient_inside_the_simplex() {
    // The constrained Cramér–Rao bound σ²[G⁻¹ − G⁻¹11ᵀG⁻¹/(1ᵀG⁻¹1)] (REFERENCES, formulas):
    // well inside the simplex FCLS is the equality-constrained LS estimator, which attains
    // it. 4000 Monte Carlo draws: the empirical variance lies within 0.8–1.25× the bound
    // (the sampling error of a variance from 4000 draws is about 2.2 %).
    let lib = thiomap::library::Library::embedded();
    let bands = thiomap::cube::bandsets::resolve("spectrometer-24")
        .unwrap()
        .bands;
    let r = thiomap::library::resample::resample(&lib, &bands).unwrap();
    let keep = [
        "s8-alpha-room",
        "sulfur-red-short-chain",
        "so2-frost-fine",
        "basalt-dark",
    ];
    let idx: Vec<usize> = keep
        .iter()
        .map(|k| r.ids.iter().position(|x| x == k).unwrap())
        .collect();
    let e = Array2::from_shape_fn((r.matrix.nrows(), idx.len()), |(i, j)| {
        r.matrix[(i, idx[j])]
    });
    let md = model(&e, Solver::Fcls);
    let truth = [0.25, 0.25, 0.25, 0.25];
    let clean: Vec<f64> = (0..e.nrows())
        .map(|i| (0..4).map(|j| e[(i, j)] * truth[j]).sum())
        .collect();
    let sigma = 0.01;
    let mut rng = ChaCha8Rng::seed_from_u64(3);
    let draws = 4000;
    let mut sums = [0.0; 4];
    let mut sq = [0.0; 4];
    for _ in 0..draws {
        let y: Vec<f64> = clean
            .iter()
            .map(|v| {
                let u1: f64 = 1.0 - rng.gen::<f64>();
                let u2: f64 = rng.gen();
                v + sigma * (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
            })
            .collect();
        let a = solve64(&md, &y);
        for j in 0..4 {
            sums[j] += a[j];
            sq[j] += a[j] * a[j];
        }
    }
    let var = md.covariance_factor(md.full_mask()).unwrap();
    for j in 0..4 {
        let mean = sums[j] / draws as f64;
        let emp = sq[j] / draws as f64 - mean * mean;
        let bound = sigma * sigma * var[j];
        let ratio = emp / bound;
        assert!(
            (0.8..=1.25).contains(&ratio),
            "{}: empirical / bound = {ratio}",
            keep[j]
        );
    }
}

/// Unmixes a shipped demo cube with `params` (after photometric normalisation by `law`) and
/// returns the abundance RMSE against the truth over the reported ids, on unmixed surface
/// pixels with incidence and emission below 70°, and the number of such pixels.
fn demo_rmse(
    name: &str,
    params: &UnmixParams,
    law: Option<thiomap::photometry::Law>,
) -> (f64, usize, thiomap::unmix::UnmixOutput) {
    use thiomap::cube::{Backplane, OpenOptions};
    let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("demo-cubes")
        .join(name);
    let mut cube = thiomap::cube::load(&path, &OpenOptions::default()).unwrap();
    if let Some(law) = law {
        thiomap::pipeline::normalise(&mut cube, law).unwrap();
    }
    let truth = thiomap::demo::files::TruthFiles::read(&path).unwrap();
    let lib = thiomap::library::Library::embedded();
    let r = thiomap::library::resample::resample(&lib, &cube.info.bands).unwrap();
    // As `unmix` runs it, band weights included.
    let (model, opts) = super::support::as_map_runs(
        &mut cube,
        &r,
        params,
        thiomap::unmix::RunOptions {
            report_shade: true,
            ..Default::default()
        },
    );
    let out =
        thiomap::unmix::unmix::<f32>(cube.data.view(), cube.valid.view(), &model, &opts, &|_| {});
    let materials: Vec<String> = out.ids.iter().filter(|i| *i != "shade").cloned().collect();
    let t = truth.over(&materials);
    let (inc, emi) = (
        &cube.backplanes[&Backplane::Incidence],
        &cube.backplanes[&Backplane::Emission],
    );
    let (mut sum, mut n) = (0.0, 0usize);
    for ((r, c), ok) in out.unmixed.indexed_iter() {
        if !ok || inc[(r, c)] >= 70.0 || emi[(r, c)] >= 70.0 {
            continue;
        }
        for j in 0..materials.len() {
            sum += (out.abundance[(r, c, j)] as f64 - t[(r, c, j)] as f64).powi(2);
        }
        n += 1;
    }
    ((sum / (n * materials.len()) as f64).sqrt(), n, out)
}

#[test]
fn hyperspectral_globe_abundances_match_the_truth() {
    // Synthetic truth of our own scene (demo-cubes/brimveil-globe-mapper96, SNR 200).
    let (rmse, n, out) = demo_rmse(
        "brimveil-globe-mapper96.fits",
        &UnmixParams::default(),
        None,
    );
    eprintln!(
        "mapper-96 globe: abundance RMSE {rmse:.4} over {n} pixels; {:?}",
        out.counts
    );
    assert!(n > 2000);
    assert!(rmse <= 0.03, "abundance RMSE {rmse}");
}

#[test]
fn imager_globe_abundances_match_the_truth_in_subset_mode() {
    // Synthetic truth of our own scene (demo-cubes/brimveil-globe-imager7, SNR 100), with
    // the Lambert normalisation the scene was made with (its truth.json names the law):
    // without it the shade member must absorb the whole cos i darkening, and seven visible
    // bands leave it nearly collinear with dark basalt (0.070 without, measured).
    let params = UnmixParams {
        subsets: Subsets::UpTo(3),
        ..Default::default()
    };
    let (rmse, n, out) = demo_rmse(
        "brimveil-globe-imager7.fits",
        &params,
        Some(thiomap::photometry::Law::Lambert),
    );
    eprintln!(
        "imager-7 globe: abundance RMSE {rmse:.4} over {n} pixels; {:?}",
        out.counts
    );
    assert!(n > 4000);
    assert!(rmse <= 0.06, "abundance RMSE {rmse}");
}

#[test]
fn the_vectorised_kernels_agree_with_the_portable_ones() {
    // The AVX2 + FMA kernels are chosen at run time; the portable ones are their fallback.
    // (With at most eight materials in f32, the AVX2 path whitens, takes the full-set step
    // and finishes with intrinsics of its own.)
    // Both run the same code, so they may differ only by the rounding of fused
    // multiply-adds. Up to 11 members, so the eight-at-a-time sign masks of the AVX2 path
    // run with and without values past the last whole eight.
    use thiomap::cube::{BandTable, Cube};
    use thiomap::unmix::solve::avx2_available;
    if !avx2_available() {
        eprintln!("no AVX2 on this processor: only the portable kernels run here");
        return;
    }
    let mut rng = ChaCha8Rng::seed_from_u64(5);
    for trial in 0..40 {
        let bands = rng.gen_range(12..40);
        let m = rng.gen_range(2..=11);
        let e = Array2::from_shape_fn((bands, m), |_| rng.gen_range(0.02..1.0));
        let y = ndarray::Array3::from_shape_fn((4, 9, bands), |_| rng.gen_range(0.0f32..1.0));
        let table = BandTable::evenly_spaced(bands, 0.4, 0.01).unwrap();
        let cube = Cube::from_pixels(y, table);
        // Without --residuals the RSS comes from the eight-band kernels, with it from the
        // band-by-band residual; band counts that are not multiples of eight included.
        let opts = thiomap::unmix::RunOptions {
            report_shade: false,
            noise: None,
            residuals: trial % 2 == 0,
            ..Default::default()
        };
        for solver in [Solver::Fcls, Solver::Nnls, Solver::SumToOne] {
            let md = model(&e, solver);
            let run = |vector| {
                thiomap::unmix::unmix_with::<f32>(
                    cube.data.view(),
                    cube.valid.view(),
                    &md,
                    &opts,
                    &|_| {},
                    vector,
                )
            };
            let (v, p) = (run(true), run(false));
            assert_eq!(v.unmixed, p.unmixed, "trial {trial} {solver:?}");
            assert_eq!(
                v.active, p.active,
                "trial {trial} {solver:?}: active counts"
            );
            for (x, z) in v.abundance.iter().zip(p.abundance.iter()) {
                assert!(
                    (x - z).abs() < 1e-4 || (x.is_nan() && z.is_nan()),
                    "trial {trial} {solver:?}: {x} vs {z}"
                );
            }
            for (x, z) in v.rmse.iter().zip(p.rmse.iter()) {
                assert!((x - z).abs() <= 1e-5 * (1.0 + z.abs()) || (x.is_nan() && z.is_nan()));
            }
        }
    }
    // A library model with its shade column (one column more than the whitened
    // dimensions, nine in all), on the demo tile, shade reported.
    let (cube, md) = tile_with_default_model();
    let opts = thiomap::unmix::RunOptions {
        report_shade: true,
        noise: None,
        residuals: false,
        ..Default::default()
    };
    let run = |vector| {
        thiomap::unmix::unmix_with::<f32>(
            cube.data.view(),
            cube.valid.view(),
            &md,
            &opts,
            &|_| {},
            vector,
        )
    };
    let (v, p) = (run(true), run(false));
    assert_eq!(v.unmixed, p.unmixed);
    assert_eq!(v.active, p.active);
    assert_eq!(v.errors.passive, p.errors.passive);
    for (x, z) in v.abundance.iter().zip(p.abundance.iter()) {
        assert!(
            (x - z).abs() < 1e-4 || (x.is_nan() && z.is_nan()),
            "{x} vs {z}"
        );
    }
    for (x, z) in v.stderr().iter().zip(p.stderr().iter()) {
        assert!(
            (x - z).abs() <= 1e-4 * z.abs() || (x.is_nan() && z.is_nan()),
            "{x} vs {z}"
        );
    }
    for (x, z) in v.rmse.iter().zip(p.rmse.iter()) {
        assert!((x - z).abs() <= 1e-5 * (1.0 + z.abs()) || (x.is_nan() && z.is_nan()));
    }
}

#[test]
fn the_rmse_agrees_however_it_is_computed() {
    // Without --residuals the direct path (spectrometer tile) sums the residual eight bands
    // at a time and subset mode (imager globe) uses ‖y − Qz‖² + ‖z − Ra‖² from f64 sums;
    // with --residuals the residual y − Ea is formed band by band and kept. Pythagoras
    // (common practice) says all agree. The f32 RMSEs stay within 0.2 % of the f64 ones
    // (float32 cancellation would cost up to 0.5 %; the few pixels near 0.1 % sit on the
    // edge of two active sets, where f32 and f64 may settle differently).
    use thiomap::cube::OpenOptions;
    for name in [
        "brimveil-tile-spectrometer24.fits",
        "brimveil-globe-imager7.fits",
    ] {
        let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("demo-cubes")
            .join(name);
        let cube = thiomap::cube::load(&path, &OpenOptions::default()).unwrap();
        let lib = thiomap::library::Library::embedded();
        let r = thiomap::library::resample::resample(&lib, &cube.info.bands).unwrap();
        let model = Model::build(&r, &UnmixParams::default()).unwrap();
        let run = |residuals| {
            let opts = thiomap::unmix::RunOptions {
                report_shade: true,
                noise: None,
                residuals,
                ..Default::default()
            };
            (
                thiomap::unmix::unmix::<f32>(
                    cube.data.view(),
                    cube.valid.view(),
                    &model,
                    &opts,
                    &|_| {},
                ),
                thiomap::unmix::unmix::<f64>(
                    cube.data.view(),
                    cube.valid.view(),
                    &model,
                    &opts,
                    &|_| {},
                ),
            )
        };
        let ((w32, w64), (d32, d64)) = (run(false), run(true));
        let mut compared = 0;
        for (x, y) in w32.rmse.iter().zip(w64.rmse.iter()) {
            assert_eq!(x.is_nan(), y.is_nan(), "{name}: f32 {x} vs f64 {y}");
            if !x.is_nan() {
                // f32 solves to a few ulps of the *signal* (≈ 0.5 in I/F), not of the
                // residual: where the fit is near-perfect (RMSE ≈ 0.003 on the tile) and the
                // members nearly collinear, a relative bound alone asks more than f32 holds,
                // so 1e-5 absolute (2·10⁻⁵ of the signal) is allowed beside 0.2 % relative.
                assert!(
                    (x - y).abs() <= 2e-3 * y.abs() + 1e-5,
                    "{name}: f32 {x} vs f64 {y}"
                );
            }
        }
        for (w, d) in [(&w32, &d32), (&w64, &d64)] {
            for (x, y) in w.rmse.iter().zip(d.rmse.iter()) {
                if x.is_nan() || y.is_nan() {
                    assert_eq!(x.is_nan(), y.is_nan());
                    continue;
                }
                // 1e-7 reflectance: the f32 residual's own rounding (ε·|y| per band).
                assert!((x - y).abs() <= 1e-5 * y.abs() + 1e-7, "{name}: {x} vs {y}");
                compared += 1;
            }
        }
        assert!(compared > 2 * 5000, "{name}: {compared}");
    }
}

#[test]
fn standard_errors_follow_the_constrained_cramer_rao_form() {
    // REFERENCES (formulas): the raw abundances' covariance is σ²K with K the top-left
    // block of the bordered (KKT) system's inverse on the pixel's passive set,
    // G⁻¹ − G⁻¹11ᵀG⁻¹/(1ᵀG⁻¹1), and σ² = RSS / (B − k + 1); the reported materials
    // f = a / S (S the material sum) have covariance J σ²K Jᵀ with J = (I − f 1ᵀ) / S
    // (delta method, REFERENCES #27, common practice); the shade's is σ²K_ss. Recomputed
    // here pixel by pixel with explicit matrix products from an f64 solve and
    // `Model::covariance_matrix`, apart from the factored form the run keeps.
    let (cube, model) = tile_with_default_model();
    let opts = thiomap::unmix::RunOptions {
        report_shade: true,
        noise: None,
        residuals: false,
        ..Default::default()
    };
    let out =
        thiomap::unmix::unmix::<f64>(cube.data.view(), cube.valid.view(), &model, &opts, &|_| {});
    let planes = out.stderr();
    let (rows, cols, nb) = cube.data.dim();
    let mat = model.material_columns();
    let m = model.columns();
    let mut checked = 0;
    let mut moved = 0;
    for (r, c) in (0..rows * cols).step_by(7).map(|i| (i / cols, i % cols)) {
        if !out.unmixed[(r, c)] {
            for j in 0..=mat {
                assert!(planes[(r, c, j)].is_nan(), "no error without a solution");
            }
            continue;
        }
        let y: Vec<f64> = (0..nb).map(|b| cube.data[(r, c, b)] as f64).collect();
        let (a, o) = solve_spectrum(&model, &y);
        assert_eq!(
            o.passive,
            out.errors.passive[(r, c)] as u32,
            "pixel {r},{c}"
        );
        let sum: f64 = a[..mat].iter().sum();
        let k = out.active[(r, c)] as f64;
        let rss = (out.rmse[(r, c)] as f64).powi(2) * nb as f64;
        let sigma = (rss / (nb as f64 - k + 1.0)).sqrt();
        let kk = model.covariance_matrix(o.passive).unwrap();
        let f: Vec<f64> = a[..mat].iter().map(|v| v / sum).collect();
        // J (mat × mat) = (I − f 1ᵀ) / S.
        let jac = |i: usize, l: usize| ((i == l) as u8 as f64 - f[i]) / sum;
        for j in 0..=mat {
            let want = if j < mat {
                let mut v = 0.0;
                for l in 0..mat {
                    for q in 0..mat {
                        v += jac(j, l) * kk[l * m + q] * jac(j, q);
                    }
                }
                sigma * v.max(0.0).sqrt()
            } else {
                sigma * kk[j * m + j].sqrt()
            };
            let old_form = if j < mat {
                sigma * kk[j * m + j].sqrt() / sum
            } else {
                want
            };
            if (old_form - want).abs() > 0.05 * want {
                moved += 1;
            }
            let got = out.stderr_at(r, c, j) as f64;
            assert_eq!(planes[(r, c, j)], got as f32);
            assert!(
                (got - want).abs() <= 1e-4 * want + 1e-9,
                "pixel {r},{c} plane {j}: {got} vs {want}"
            );
        }
        checked += 1;
    }
    assert!(checked > 1000, "only {checked} pixels compared");
    // The renormalisation matters on this tile: dividing by S alone would be off by more
    // than 5 % for many of the errors.
    assert!(
        moved > checked / 10,
        "only {moved} errors moved by the delta method"
    );
}

/// The shipped spectrometer tile and the default model for its bands (embedded library,
/// groups, shade column).
fn tile_with_default_model() -> (thiomap::cube::Cube, Model) {
    use thiomap::cube::OpenOptions;
    let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("demo-cubes")
        .join("brimveil-tile-spectrometer24.fits");
    let cube = thiomap::cube::load(&path, &OpenOptions::default()).unwrap();
    let lib = thiomap::library::Library::embedded();
    let r = thiomap::library::resample::resample(&lib, &cube.info.bands).unwrap();
    let model = Model::build(&r, &UnmixParams::default()).unwrap();
    assert!(model.shade, "the default model has a shade column");
    (cube, model)
}
