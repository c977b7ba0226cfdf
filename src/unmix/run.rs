//! The parallel driver: unmixes a cube block of rows by block of rows, so no per-band
//! intermediate (Eᵀy, residuals) is ever held for the whole cube.
//!
//! Per pixel: b = Eᵀy, the active-set solve (or, in subset mode, one solve per allowed
//! subset, keeping the lowest BIC = B ln(RSS/B) + k ln B, with k the number of non-zero
//! abundances — the stated penalty against over-fitting; Roberts et al. 1998 for the
//! per-pixel subsets), the residual r = y − E a computed directly (no cancellation), RMSE
//! = ‖r‖/√B, and standard errors σ √(cov factor) with σ² = RSS / (B − k + c) (c = 1 with
//! the sum-to-one constraint) or the noise level given.
//!
//! Reported abundances have shade removed and are renormalised to sum to one over the
//! materials; their standard errors are divided by the same sum. The shade fraction is
//! reported too: the shade abundance with the sum-to-one constraint, 1 − Σa without.
//!
//! Pixels that are masked with a count, never NaN without a mark: input no-data, zero
//! signal in every band, and pixels whose material sum is below [`DARK_LIMIT`] (almost all
//! shade: night side, deep shadow), whose composition is undefined.
//!
//! Results do not depend on the thread count: rows are the unit of work and each row's
//! pixels are solved in order.

use std::sync::atomic::{AtomicUsize, Ordering};

use ndarray::{Array2, Array3, Axis};
use num_traits::Float;
use rayon::prelude::*;

use super::model::Model;
use super::solve::solve_pixel;
use crate::cube::Cube;

/// Pixels whose materials sum below this are too dark to unmix.
pub const DARK_LIMIT: f64 = 0.02;

/// f32 (the fast path) or f64 (the reference path): the precision of Eᵀy. The
/// M-dimensional active-set steps run in f64 on both paths (see [`Model::table64`]).
pub trait Real: Float + Send + Sync + 'static {}

impl Real for f32 {}
impl Real for f64 {}

/// Pixel counts of a run.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Counts {
    pub unmixed: usize,
    pub nodata: usize,
    pub zero_signal: usize,
    pub dark: usize,
    /// Pixels solved by the enumeration fallback.
    pub enumerated: usize,
}

/// Everything unmixing produces.
#[derive(Debug, Clone)]
pub struct UnmixOutput {
    /// Plane ids: materials (members or groups), then `shade` when reported.
    pub ids: Vec<String>,
    /// (row, col, plane); NaN where `unmixed` is false.
    pub abundance: Array3<f32>,
    pub stderr: Array3<f32>,
    pub rmse: Array2<f32>,
    /// Non-zero abundances per pixel (0 where not unmixed).
    pub active: Array2<u8>,
    /// Subset mode: index + 1 into the model's subsets of the winning subset (0 = none).
    pub subset: Option<Array2<u16>>,
    pub residual: Option<Array3<f32>>,
    pub unmixed: Array2<bool>,
    pub counts: Counts,
}

/// Options of a run that are not model parameters.
#[derive(Debug, Clone, Copy)]
pub struct RunOptions {
    /// Report the shade fraction as a plane.
    pub report_shade: bool,
    /// Noise σ for standard errors; `None` estimates per pixel.
    pub noise: Option<f64>,
    pub residuals: bool,
}

/// Rows per parallel task.
const ROWS_PER_TASK: usize = 8;

/// Unmixes every pixel of `cube`. `progress` is called with the number of rows finished.
pub fn unmix<T: Real>(
    cube: &Cube,
    model: &Model,
    opts: &RunOptions,
    progress: &(dyn Fn(usize) + Sync),
) -> UnmixOutput {
    let (rows, cols, nb) = cube.data.dim();
    let m = model.columns();
    let mat = model.material_columns();
    let planes = mat + opts.report_shade as usize;
    let mut ids: Vec<String> = model.ids[..mat].to_vec();
    if opts.report_shade {
        ids.push("shade".into());
    }
    let mut abundance = Array3::<f32>::from_elem((rows, cols, planes), f32::NAN);
    let mut stderr = Array3::<f32>::from_elem((rows, cols, planes), f32::NAN);
    let mut rmse = Array2::<f32>::from_elem((rows, cols), f32::NAN);
    let mut active = Array2::<u8>::zeros((rows, cols));
    let mut subset = model
        .subset_size
        .map(|_| Array2::<u16>::zeros((rows, cols)));
    let mut residual = opts
        .residuals
        .then(|| Array3::<f32>::from_elem((rows, cols, nb), f32::NAN));
    let mut unmixed = Array2::<bool>::from_elem((rows, cols), false);

    // E band-major (B × material columns) in T for Eᵀy; f64 for residuals and the Gram.
    let et: Vec<T> = (0..nb)
        .flat_map(|b| (0..mat).map(move |j| (b, j)))
        .map(|(b, j)| T::from(model.e[(b, j)]).expect("finite"))
        .collect();
    let e64 = &model.e;
    let g = e64.t().dot(e64);
    let table = &model.table64;
    let full = model.full_mask();
    let nonneg = model.solver.non_negative();
    let done = AtomicUsize::new(0);

    // Subset picks and residuals are gathered per task and placed after the pass.
    let chunks: Vec<Counts> = abundance
        .axis_chunks_iter_mut(Axis(0), ROWS_PER_TASK)
        .into_par_iter()
        .zip(stderr.axis_chunks_iter_mut(Axis(0), ROWS_PER_TASK))
        .zip(rmse.axis_chunks_iter_mut(Axis(0), ROWS_PER_TASK))
        .zip(active.axis_chunks_iter_mut(Axis(0), ROWS_PER_TASK))
        .zip(unmixed.axis_chunks_iter_mut(Axis(0), ROWS_PER_TASK))
        .enumerate()
        .map(|(k, ((((mut ab, mut se), mut rm), mut ac), mut um))| {
            let mut counts = Counts::default();
            let mut bt = vec![T::zero(); m];
            let mut b = vec![0.0f64; m];
            let mut a = vec![0.0f64; m];
            let mut work = vec![0.0f64; 2 * m];
            let mut best = vec![0.0f64; m];
            let mut scores: Vec<f64> = Vec::new();
            let mut sols: Vec<f64> = Vec::new();
            let r0 = k * ROWS_PER_TASK;
            let mut picks: Vec<(usize, usize, u16)> = Vec::new();
            let mut resid: Vec<(usize, usize, Vec<f32>)> = Vec::new();
            for dr in 0..ab.dim().0 {
                let r = r0 + dr;
                let mut start = full;
                for c in 0..cols {
                    if !cube.valid[(r, c)] {
                        counts.nodata += 1;
                        continue;
                    }
                    let y = cube.data.slice(ndarray::s![r, c, ..]);
                    let y = y.as_slice().expect("pixels are contiguous");
                    if y.iter().all(|v| *v == 0.0) {
                        counts.zero_signal += 1;
                        continue;
                    }
                    // b = Eᵀy (the shade column's entry is zero).
                    bt.iter_mut().for_each(|v| *v = T::zero());
                    for (band, &yv) in y.iter().enumerate() {
                        let yv = T::from(yv).expect("finite");
                        let row = &et[band * mat..(band + 1) * mat];
                        for (bj, ej) in bt[..mat].iter_mut().zip(row) {
                            *bj = *bj + *ej * yv;
                        }
                    }
                    for (d, s) in b.iter_mut().zip(&bt) {
                        *d = s.to_f64().unwrap_or(f64::NAN);
                    }
                    let (passive, enumerated, pick) = match model.subset_size {
                        None => {
                            let o = solve_pixel(table, &b, full, start, nonneg, &mut a, &mut work);
                            start = o.passive;
                            (o.passive, o.enumerated, 0u16)
                        }
                        Some(_) => {
                            // Every allowed subset, scored by BIC; the estimate averages
                            // the subsets' solutions with weights exp(−ΔBIC/2) (Bayesian
                            // model averaging), so members the bands cannot tell apart share
                            // the abundance instead of one being picked by the noise.
                            let yy: f64 = y.iter().map(|v| (*v as f64).powi(2)).sum();
                            let n = nb as f64;
                            scores.clear();
                            sols.clear();
                            let mut best_score = f64::INFINITY;
                            let mut best_out = (0u32, false, 0u16);
                            for (s, &allowed) in model.subsets.iter().enumerate() {
                                let o = solve_pixel(
                                    table, &b, allowed, allowed, nonneg, &mut a, &mut work,
                                );
                                let rss = gram_rss(&g, &a, &b, yy).max(1e-30);
                                let k = a.iter().filter(|v| **v > 0.0).count() as f64;
                                let score = n * (rss / n).ln() + k * n.ln();
                                scores.push(score);
                                sols.extend_from_slice(&a);
                                if score < best_score {
                                    best_score = score;
                                    best_out = (o.passive, o.enumerated, s as u16 + 1);
                                }
                            }
                            let mut wsum = 0.0;
                            best.iter_mut().for_each(|v| *v = 0.0);
                            for (s, score) in scores.iter().enumerate() {
                                let w = (-(score - best_score) / 2.0).exp();
                                wsum += w;
                                for (acc, v) in best.iter_mut().zip(&sols[s * m..(s + 1) * m]) {
                                    *acc += w * v;
                                }
                            }
                            for (dst, v) in a.iter_mut().zip(&best) {
                                *dst = v / wsum;
                            }
                            best_out
                        }
                    };
                    if enumerated {
                        counts.enumerated += 1;
                    }
                    // Direct residual, accumulated in f64.
                    let mut rss = 0.0f64;
                    let mut res = opts.residuals.then(|| Vec::with_capacity(nb));
                    for (band, &yv) in y.iter().enumerate() {
                        let fit: f64 = (0..mat).map(|j| e64[(band, j)] * a[j]).sum();
                        let d = yv as f64 - fit;
                        rss += d * d;
                        if let Some(res) = res.as_mut() {
                            res.push(d as f32);
                        }
                    }
                    let af = &a;
                    let sum: f64 = af[..mat].iter().sum();
                    if sum.is_nan() || sum < DARK_LIMIT {
                        counts.dark += 1;
                        continue;
                    }
                    let k = af.iter().filter(|v| **v > 0.0).count();
                    let dof =
                        (nb as f64 - k as f64 + model.solver.sum_to_one() as u8 as f64).max(1.0);
                    let sigma2 = match opts.noise {
                        Some(n) => n * n,
                        None => rss / dof,
                    };
                    let var = &table[passive as usize]
                        .as_ref()
                        .expect("a solved passive set has an entry")
                        .var;
                    for j in 0..mat {
                        ab[(dr, c, j)] = (af[j] / sum) as f32;
                        se[(dr, c, j)] = ((sigma2 * var[j]).sqrt() / sum) as f32;
                    }
                    if opts.report_shade {
                        let (shade, shade_se) = if model.shade {
                            (af[mat], (sigma2 * var[mat]).sqrt())
                        } else {
                            (1.0 - sum, f64::NAN)
                        };
                        ab[(dr, c, mat)] = shade as f32;
                        se[(dr, c, mat)] = shade_se as f32;
                    }
                    rm[(dr, c)] = (rss / nb as f64).sqrt() as f32;
                    ac[(dr, c)] = k as u8;
                    um[(dr, c)] = true;
                    counts.unmixed += 1;
                    if pick > 0 {
                        picks.push((r, c, pick));
                    }
                    if let Some(res) = res {
                        resid.push((r, c, res));
                    }
                }
            }
            progress(done.fetch_add(ab.dim().0, Ordering::Relaxed) + ab.dim().0);
            (counts, picks, resid)
        })
        .collect::<Vec<_>>()
        .into_iter()
        .map(|(counts, picks, resid)| {
            if let Some(s) = subset.as_mut() {
                for (r, c, p) in picks {
                    s[(r, c)] = p;
                }
            }
            if let Some(res) = residual.as_mut() {
                for (r, c, v) in resid {
                    for (band, x) in v.into_iter().enumerate() {
                        res[(r, c, band)] = x;
                    }
                }
            }
            counts
        })
        .collect();
    let counts = chunks.iter().fold(Counts::default(), |t, c| Counts {
        unmixed: t.unmixed + c.unmixed,
        nodata: t.nodata + c.nodata,
        zero_signal: t.zero_signal + c.zero_signal,
        dark: t.dark + c.dark,
        enumerated: t.enumerated + c.enumerated,
    });
    UnmixOutput {
        ids,
        abundance,
        stderr,
        rmse,
        active,
        subset,
        residual,
        unmixed,
        counts,
    }
}

/// RSS by the Gram form in f64: yᵀy − 2aᵀb + aᵀGa (for ranking subsets).
fn gram_rss(g: &Array2<f64>, a: &[f64], b: &[f64], yy: f64) -> f64 {
    let m = a.len();
    let mut quad = 0.0;
    let mut lin = 0.0;
    for i in 0..m {
        lin += a[i] * b[i];
        for j in 0..m {
            quad += a[i] * g[(i, j)] * a[j];
        }
    }
    yy - 2.0 * lin + quad
}
