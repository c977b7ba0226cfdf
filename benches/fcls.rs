//! Criterion bench of the unmixing driver: FCLS in f32 on 512 × 512 pixels × 32 bands ×
//! 8 members, dense (Dirichlet(1)) and sparse (1–3 members) abundances, noise σ = 0.005;
//! ids encode bands × members × pixels. The data are built outside the timed code. The
//! side-by-side comparison with numpy and scipy is `benches/unmix_vs_numpy.py`.

use criterion::{criterion_group, criterion_main, Criterion};
use ndarray::{Array2, Array3};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use thiomap::cube::{BandTable, Cube};
use thiomap::unmix::{unmix, Model, RunOptions, Solver};

const B: usize = 32;
const M: usize = 8;
const SIDE: usize = 512;

/// Smooth positive spectra: a baseline plus three Gaussian bumps, peak 1.
fn endmembers(rng: &mut ChaCha8Rng) -> Array2<f64> {
    let mut e = Array2::<f64>::zeros((B, M));
    for j in 0..M {
        let base = rng.gen_range(0.03..0.15);
        let bumps: Vec<(f64, f64, f64)> = (0..3)
            .map(|_| {
                (
                    rng.gen_range(-4.0..B as f64 + 4.0),
                    rng.gen_range(3.0..9.0),
                    rng.gen_range(0.15..0.8),
                )
            })
            .collect();
        for b in 0..B {
            e[(b, j)] = base
                + bumps
                    .iter()
                    .map(|(c, w, a)| a * (-0.5 * ((b as f64 - c) / w).powi(2)).exp())
                    .sum::<f64>();
        }
    }
    let max = e.iter().cloned().fold(0.0, f64::max);
    e / max
}

fn normal(rng: &mut ChaCha8Rng) -> f64 {
    let u1: f64 = 1.0 - rng.gen::<f64>();
    let u2: f64 = rng.gen();
    (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
}

fn problem(sparse: bool) -> (Model, Cube) {
    let mut rng = ChaCha8Rng::seed_from_u64(20261201);
    let e = endmembers(&mut rng);
    let mut data = Array3::<f32>::zeros((SIDE, SIDE, B));
    for r in 0..SIDE {
        for c in 0..SIDE {
            // Dirichlet(1) over a support: normalised exponential draws.
            let k = if sparse { rng.gen_range(1..=3) } else { M };
            let mut a = [0.0f64; M];
            let mut idx: Vec<usize> = (0..M).collect();
            for i in 0..k {
                let pick = rng.gen_range(i..M);
                idx.swap(i, pick);
                a[idx[i]] = -(1.0 - rng.gen::<f64>()).ln();
            }
            let s: f64 = a.iter().sum();
            for b in 0..B {
                let clean: f64 = (0..M).map(|j| e[(b, j)] * a[j] / s).sum();
                data[(r, c, b)] = (clean + 0.005 * normal(&mut rng)) as f32;
            }
        }
    }
    let model = Model::from_matrix(e, Solver::Fcls).expect("a well-posed problem");
    let bands = BandTable::evenly_spaced(B, 0.4, 0.05).expect("increasing centres");
    let cube = Cube::from_pixels(data, bands);
    (model, cube)
}

fn bench(c: &mut Criterion) {
    let opts = RunOptions {
        report_shade: false,
        noise: None,
        residuals: false,
        ..Default::default()
    };
    let mut group = c.benchmark_group("fcls-f32");
    group.sample_size(10);
    for (name, sparse) in [("dense", false), ("sparse", true)] {
        let (model, cube) = problem(sparse);
        group.bench_function(format!("{name}/{B}x{M}x{}", SIDE * SIDE), |bch| {
            bch.iter(|| unmix::<f32>(cube.data.view(), cube.valid.view(), &model, &opts, &|_| {}))
        });
    }
    group.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
