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
    /// Active-set steps beyond the first, summed over pixels.
    pub steps: usize,
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

/// Eᵀy for one pixel with the member count fixed at compile time, so the accumulators
/// live in registers and each band is one vector multiply-add; four interleaved
/// accumulator sets hide the multiply-add latency.
#[inline]
fn ety_fixed<const MM: usize>(y: &[f32], et: &[f32], out: &mut [f64]) {
    let mut acc = [[0f32; MM]; 4];
    let mut bands = y.chunks_exact(4);
    let mut rows = et.chunks_exact(4 * MM);
    for (yy, rr) in (&mut bands).zip(&mut rows) {
        for k in 0..4 {
            let row = &rr[k * MM..(k + 1) * MM];
            for j in 0..MM {
                acc[k][j] += row[j] * yy[k];
            }
        }
    }
    let tail = bands.remainder();
    let rest = &et[et.len() - tail.len() * MM..];
    for (k, yv) in tail.iter().enumerate() {
        for j in 0..MM {
            acc[0][j] += rest[k * MM + j] * yv;
        }
    }
    for j in 0..MM {
        out[j] = ((acc[0][j] + acc[1][j]) + (acc[2][j] + acc[3][j])) as f64;
    }
}

/// Eᵀy in f32 for any member count.
fn ety_any(y: &[f32], et: &[f32], out: &mut [f64]) {
    let mat = et.len() / y.len().max(1);
    let mut acc = vec![0f32; mat];
    for (band, &yv) in y.iter().enumerate() {
        for (a, e) in acc.iter_mut().zip(&et[band * mat..(band + 1) * mat]) {
            *a += e * yv;
        }
    }
    for (o, a) in out.iter_mut().zip(&acc) {
        *o = *a as f64;
    }
}

type EtyFn = fn(&[f32], &[f32], &mut [f64]);

fn ety_kernel(mat: usize) -> EtyFn {
    macro_rules! pick {
        ($($n:literal)*) => {
            match mat {
                $($n => ety_fixed::<$n>,)*
                _ => ety_any,
            }
        };
    }
    pick!(1 2 3 4 5 6 7 8 9 10 11 12)
}

/// The per-pixel arithmetic of one precision.
struct Kernel {
    /// E band-major (B × materials) for Eᵀy.
    et32: Vec<f32>,
    et64: Vec<f64>,
    /// E column-major (materials × B) for the residual.
    ecol32: Vec<f32>,
    ecol64: Vec<f64>,
    ety32: EtyFn,
    f64_path: bool,
    /// Material columns (members and groups; shade excluded).
    mat: usize,
}

impl Kernel {
    fn new(model: &Model, f64_path: bool) -> Kernel {
        let (nb, mat) = (model.bands(), model.material_columns());
        let e = &model.e;
        let et64: Vec<f64> = (0..nb)
            .flat_map(|b| (0..mat).map(move |j| e[(b, j)]))
            .collect();
        let ecol64: Vec<f64> = (0..mat)
            .flat_map(|j| (0..nb).map(move |b| e[(b, j)]))
            .collect();
        Kernel {
            et32: et64.iter().map(|v| *v as f32).collect(),
            ecol32: ecol64.iter().map(|v| *v as f32).collect(),
            et64,
            ecol64,
            ety32: ety_kernel(mat),
            f64_path,
            mat,
        }
    }

    /// b = Eᵀy over the materials (the shade entry stays 0).
    #[inline]
    fn ety(&self, y: &[f32], b: &mut [f64]) {
        let mat = self.mat;
        if self.f64_path {
            // f32 × f32 products are exact in f64: this is Eᵀy of the f32 inputs.
            for v in b[..mat].iter_mut() {
                *v = 0.0;
            }
            for (band, &yv) in y.iter().enumerate() {
                let yv = yv as f64;
                for (bj, e) in b[..mat]
                    .iter_mut()
                    .zip(&self.et64[band * mat..(band + 1) * mat])
                {
                    *bj += e * yv;
                }
            }
        } else {
            (self.ety32)(y, &self.et32, &mut b[..mat]);
        }
    }

    /// RSS of the direct residual y − E a (accumulated in f64); fills `res` when given.
    #[inline]
    fn rss(
        &self,
        y: &[f32],
        a: &[f64],
        fit32: &mut [f32],
        fit64: &mut [f64],
        res: Option<&mut Vec<f32>>,
    ) -> f64 {
        let nb = y.len();
        let mut rss = 0.0f64;
        if self.f64_path {
            fit64.iter_mut().for_each(|v| *v = 0.0);
            for (col, &aj) in self.ecol64.chunks_exact(nb).zip(a) {
                for (f, e) in fit64.iter_mut().zip(col) {
                    *f += e * aj;
                }
            }
            for (f, &yv) in fit64.iter_mut().zip(y) {
                let d = yv as f64 - *f;
                *f = d;
                rss += d * d;
            }
            if let Some(res) = res {
                res.extend(fit64.iter().map(|d| *d as f32));
            }
        } else {
            // Eight bands at a time: the fit stays in registers while the members are
            // added, then the squared residuals go into eight f32 lanes (positive terms, no
            // cancellation — it is the Gram form yᵀy − 2aᵀb + aᵀGa that would need f64).
            let mat = self.mat;
            let mut a32 = [0f32; 16];
            for (d, s) in a32.iter_mut().zip(&a[..mat]) {
                *d = *s as f32;
            }
            let mut lanes = [0f32; 8];
            let full = nb / 8 * 8;
            for k0 in (0..full).step_by(8) {
                let mut acc = [0f32; 8];
                for (j, aj) in a32[..mat].iter().enumerate() {
                    let col: &[f32; 8] = self.ecol32[j * nb + k0..j * nb + k0 + 8]
                        .try_into()
                        .expect("eight bands");
                    for t in 0..8 {
                        acc[t] += col[t] * aj;
                    }
                }
                let yy: &[f32; 8] = y[k0..k0 + 8].try_into().expect("eight bands");
                for t in 0..8 {
                    let d = yy[t] - acc[t];
                    fit32[k0 + t] = d;
                    lanes[t] += d * d;
                }
            }
            for k in full..nb {
                let f: f32 = (0..mat).map(|j| self.ecol32[j * nb + k] * a32[j]).sum();
                let d = y[k] - f;
                fit32[k] = d;
                lanes[0] += d * d;
            }
            rss = lanes.iter().map(|v| *v as f64).sum();
            if let Some(res) = res {
                res.extend_from_slice(fit32);
            }
        }
        rss
    }
}

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

    let kernel = Kernel::new(model, std::mem::size_of::<T>() == 8);
    let g = model.e.t().dot(&model.e);
    let table = &model.table64;
    let full = model.full_mask();
    let nonneg = model.solver.non_negative();
    let fixed = if nonneg {
        super::solve::fixed_solver(m, super::solve::avx2_available())
    } else {
        None
    };
    let solve = |b: &[f64], allowed: u32, start: u32, a: &mut [f64], work: &mut [f64]| match fixed {
        Some(f) => f(table, b, allowed, start, a, work),
        None => solve_pixel(table, b, allowed, start, nonneg, a, work),
    };
    let sum_to_one = model.solver.sum_to_one() as u8 as f64;
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
            let mut b = vec![0.0f64; m];
            let mut a = vec![0.0f64; m];
            let mut work = vec![0.0f64; 2 * m];
            let mut best = vec![0.0f64; m];
            let mut fit32 = vec![0.0f32; nb];
            let mut fit64 = vec![0.0f64; nb];
            let mut scores: Vec<f64> = Vec::new();
            let mut sols: Vec<f64> = Vec::new();
            let r0 = k * ROWS_PER_TASK;
            let mut picks: Vec<(usize, usize, u16)> = Vec::new();
            let mut resid: Vec<(usize, usize, Vec<f32>)> = Vec::new();
            let ab = ab
                .as_slice_mut()
                .expect("chunks of standard arrays are contiguous");
            let se = se.as_slice_mut().expect("contiguous");
            let rm = rm.as_slice_mut().expect("contiguous");
            let ac = ac.as_slice_mut().expect("contiguous");
            let um = um.as_slice_mut().expect("contiguous");
            let task_rows = rm.len() / cols;
            for dr in 0..task_rows {
                let r = r0 + dr;
                let yrow = cube.data.index_axis(Axis(0), r);
                let yrow = yrow.as_slice().expect("cube rows are contiguous");
                let vrow = cube.valid.row(r);
                let mut start = full;
                for c in 0..cols {
                    if !vrow[c] {
                        counts.nodata += 1;
                        continue;
                    }
                    let y = &yrow[c * nb..(c + 1) * nb];
                    if y.iter().all(|v| *v == 0.0) {
                        counts.zero_signal += 1;
                        continue;
                    }
                    kernel.ety(y, &mut b);
                    let (passive, enumerated, pick) = match model.subset_size {
                        None => {
                            let o = solve(&b, full, start, &mut a, &mut work);
                            start = o.passive;
                            counts.steps += o.steps as usize;
                            (o.passive, o.enumerated, 0u16)
                        }
                        Some(_) => {
                            // Every allowed subset, scored by BIC; the estimate averages
                            // the subsets' solutions with weights exp(−ΔBIC/2) (Bayesian
                            // model averaging), so members the bands cannot tell apart
                            // share the abundance instead of one being picked by the noise.
                            let yy: f64 = y.iter().map(|v| (*v as f64).powi(2)).sum();
                            let n = nb as f64;
                            scores.clear();
                            sols.clear();
                            let mut best_score = f64::INFINITY;
                            let mut best_out = (0u32, false, 0u16);
                            for (s, &allowed) in model.subsets.iter().enumerate() {
                                let o = solve(&b, allowed, allowed, &mut a, &mut work);
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
                    let mut res = opts.residuals.then(|| Vec::with_capacity(nb));
                    let rss = kernel.rss(y, &a, &mut fit32, &mut fit64, res.as_mut());
                    let sum: f64 = a[..mat].iter().sum();
                    if sum.is_nan() || sum < DARK_LIMIT {
                        counts.dark += 1;
                        continue;
                    }
                    let kk = a.iter().filter(|v| **v > 0.0).count();
                    let dof = (nb as f64 - kk as f64 + sum_to_one).max(1.0);
                    let sigma2 = match opts.noise {
                        Some(n) => n * n,
                        None => rss / dof,
                    };
                    let sd = &table[passive as usize]
                        .as_ref()
                        .expect("a solved passive set has an entry")
                        .sd;
                    let sigma = sigma2.sqrt();
                    let px = dr * cols + c;
                    let out_ab = &mut ab[px * planes..(px + 1) * planes];
                    let out_se = &mut se[px * planes..(px + 1) * planes];
                    let inv = 1.0 / sum;
                    for j in 0..mat {
                        out_ab[j] = (a[j] * inv) as f32;
                        out_se[j] = (sigma * sd[j] * inv) as f32;
                    }
                    if opts.report_shade {
                        let (shade, shade_se) = if model.shade {
                            (a[mat], sigma * sd[mat])
                        } else {
                            (1.0 - sum, f64::NAN)
                        };
                        out_ab[mat] = shade as f32;
                        out_se[mat] = shade_se as f32;
                    }
                    rm[px] = (rss / nb as f64).sqrt() as f32;
                    ac[px] = kk as u8;
                    um[px] = true;
                    counts.unmixed += 1;
                    if pick > 0 {
                        picks.push((r, c, pick));
                    }
                    if let Some(res) = res {
                        resid.push((r, c, res));
                    }
                }
            }
            progress(done.fetch_add(task_rows, Ordering::Relaxed) + task_rows);
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
        steps: t.steps + c.steps,
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
