//! How sure the reported abundances are: their covariance from the raw abundances' through
//! the renormalisation, the BIC-weighted mixture of subset mode, and the boundary flag.
//!
//! The solver estimates raw abundances a (materials, then shade), with covariance σ²K
//! (K the constrained Cramér–Rao factor of the pixel's passive set, [`super::model::Spreads`]).
//! The reported materials are f = a_D / S with S = Σ a_D, so by the delta method (REFERENCES
//! #27, common practice) Var f = J C Jᵀ with J = (I − f 1ᵀ) / S:
//!
//! ```text
//! Cov(f_i, f_j) = (σ/S)² [K_ij − f_i k_j − f_j k_i + f_i f_j t],  k_i = Σ_l K_il, t = Σ_i k_i
//! ```
//!
//! (sums over the material columns). Dividing √K_jj by S alone, as the first tranche did,
//! leaves out the −2 f_j k_j + f_j² t terms: the renormalisation removes the common
//! brightness that shade trades against every material, which can shrink or grow an error.
//! The shade plane, when reported, is a_shade with the shade column (its variance σ²K_ss)
//! and 1 − S without (σ² t). Groups are single columns of the model, so their errors come
//! out of the same form.
//!
//! Subset mode reports the BIC-weighted mean ā = Σ w_s a_s of the subsets' solutions; its
//! covariance is the mixture's, within- plus between-subset: C = Σ w_s (σ² K_s +
//! (a_s − ā)(a_s − ā)ᵀ), renormalised the same way. That term is what carries the
//! uncertainty of a member that one subset uses and another does not.
//!
//! The form describes a pixel whose passive set the noise would not change. Where a member
//! held at zero has a KKT multiplier within two standard deviations of zero (μ_j < 2σ‖W_μ,j‖)
//! the noise could as well have made it non-zero; the estimate there is truncated and the
//! pixel is flagged ([`boundary`]).
//!
//! Pure arithmetic on arrays: no I/O.

use ndarray::{Array2, ArrayView2, ArrayView3, Axis};
use rayon::prelude::*;

use super::model::Model;

/// The covariance of the reported planes (materials, then shade when `shade` is given: the
/// reported shade value) from a raw-abundance covariance `k` (M × M, row-major) scaled by
/// `scale²`: `scale` = σ/S with K the Cramér–Rao factor, or 1/S with K an absolute
/// covariance. `f` holds the reported (renormalised) materials. `out` receives P × P,
/// row-major, P = materials + (shade given).
pub(crate) fn reported_covariance(
    k: &[f64],
    columns: usize,
    shade_column: bool,
    f: &[f64],
    scale: f64,
    shade: Option<f64>,
    out: &mut [f64],
) {
    let mat = f.len();
    let m = columns;
    let p = mat + shade.is_some() as usize;
    let mut ks = [0.0f64; 16];
    for (i, v) in ks.iter_mut().enumerate().take(m) {
        *v = (0..mat).map(|l| k[i * m + l]).sum();
    }
    let t: f64 = ks[..mat].iter().sum();
    let s2 = scale * scale;
    for i in 0..mat {
        for j in i..mat {
            let v = s2 * (k[i * m + j] - f[i] * ks[j] - f[j] * ks[i] + f[i] * f[j] * t);
            out[i * p + j] = v;
            out[j * p + i] = v;
        }
    }
    if let Some(sh) = shade {
        let sum = 1.0 - sh;
        let (kss, ks_s) = if shade_column {
            (k[mat * m + mat], ks[mat])
        } else {
            (t, -t)
        };
        out[mat * p + mat] = s2 * sum * sum * kss;
        for i in 0..mat {
            let kis = if shade_column { k[i * m + mat] } else { -ks[i] };
            let v = s2 * sum * (kis - f[i] * ks_s);
            out[i * p + mat] = v;
            out[mat * p + i] = v;
        }
    }
}

/// The position of (i, j) in the row-major upper triangle of a P × P matrix (rows 0..i
/// hold P, P − 1, …, P − i + 1 values).
#[inline]
pub fn upper_index(p: usize, i: usize, j: usize) -> usize {
    let (i, j) = if i <= j { (i, j) } else { (j, i) };
    i * p - i * i.saturating_sub(1) / 2 + (j - i)
}

/// Flags the pixels whose solution sits on a constraint boundary the noise could move: a
/// member allowed but held at zero whose multiplier is within two standard deviations of
/// zero. `allowed` gives each pixel's allowed set (the full set, or the winning subset).
/// Returns, per pixel, the bit mask of the columns that are such boundary cases (0: none).
/// Only for the non-negative solvers; 0 everywhere else. `qt` is Qᵀ band-major (bands × D,
/// as [`super::plan::Plan`] holds it), so z accumulates band by band.
pub(crate) fn boundary(
    data: ArrayView3<f32>,
    model: &Model,
    qt: &[f64],
    passive: ArrayView2<u16>,
    scale: ArrayView2<f32>,
    allowed: &(dyn Fn(usize, usize) -> u32 + Sync),
) -> Array2<u32> {
    let (rows, cols, _) = data.dim();
    let mut flags = Array2::from_elem((rows, cols), 0u32);
    if !model.solver.non_negative() {
        return flags;
    }
    let (m, dims) = (model.columns(), model.q.ncols());
    let mat = model.material_columns();
    let table = &model.table64;
    flags
        .axis_iter_mut(Axis(0))
        .into_par_iter()
        .enumerate()
        .for_each(|(r, mut row)| {
            let mut z = vec![0.0f64; dims];
            let mut x = vec![0.0f64; 2 * m];
            for c in 0..cols {
                let sc = scale[(r, c)] as f64;
                let set = passive[(r, c)] as u32;
                let free = allowed(r, c) & !set;
                if !sc.is_finite() || free == 0 {
                    continue;
                }
                let (Some(spread), true) = (model.spreads.multipliers(set), table.has(set)) else {
                    continue;
                };
                z.iter_mut().for_each(|zk| *zk = -0.0);
                let spectrum = data.slice(ndarray::s![r, c, ..]);
                for (qb, &y) in qt.chunks_exact(dims).zip(spectrum.iter()) {
                    for (zk, qbk) in z.iter_mut().zip(qb) {
                        *zk += qbk * y as f64;
                    }
                }
                let raw = table.raw(set);
                let (map, rest) = raw.split_at(2 * m * dims);
                x.copy_from_slice(&rest[..2 * m]);
                for (col, zk) in map.chunks_exact(2 * m).zip(&z) {
                    for (xi, w) in x.iter_mut().zip(col) {
                        *xi += w * zk;
                    }
                }
                let sum: f64 = x[..mat].iter().sum();
                let sigma = sc * sum;
                row[c] = (0..m)
                    .filter(|&j| free & (1 << j) != 0 && x[m + j] < 2.0 * sigma * spread[j])
                    .fold(0u32, |mask, j| mask | (1 << j));
            }
        });
    flags
}
