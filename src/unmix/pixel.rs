//! Per-pixel routines shared by the direct path and subset mode: the whitening z = Qᵀy,
//! the residual sums of squares, the noise level and RMSE of a fit, the skip tests, and
//! the writing of one solved pixel.

use std::mem::MaybeUninit;

use super::output::{Counts, DARK_LIMIT};
use super::plan::{Plan, Slots};
use super::solve::{madd, tree_sum, Real};

/// z = Qᵀy (D values) in precision `T`, with four interleaved accumulator sets to hide
/// the multiply-add latency.
#[inline(always)]
pub(super) fn whiten<T: Real, const D: usize, const FUSED: bool>(y: &[f32], qt: &[T]) -> [T; D] {
    let mut acc = [[T::zero(); D]; 4];
    let mut bands = y.chunks_exact(4);
    let mut rows = qt.chunks_exact(4 * D);
    for (yy, rr) in (&mut bands).zip(&mut rows) {
        for k in 0..4 {
            let yk = T::from_f32(yy[k]);
            let row: &[T; D] = rr[k * D..(k + 1) * D].try_into().expect("D values");
            for j in 0..D {
                acc[k][j] = madd::<T, FUSED>(row[j], yk, acc[k][j]);
            }
        }
    }
    for (yv, row) in bands
        .remainder()
        .iter()
        .zip(rows.remainder().chunks_exact(D))
    {
        let yk = T::from_f32(*yv);
        for j in 0..D {
            acc[0][j] = madd::<T, FUSED>(row[j], yk, acc[0][j]);
        }
    }
    std::array::from_fn(|j| (acc[0][j] + acc[1][j]) + (acc[2][j] + acc[3][j]))
}

/// ‖y − E a‖² from the residual itself, eight bands at a time: no cancellation, so the
/// run's precision holds it to a few units of rounding of the residual. `chunks` holds E
/// eight bands by eight bands, `ecol` its material columns (for the last bands).
#[inline(always)]
pub(super) fn direct_rss<T: Real, const D: usize, const FUSED: bool>(
    y: &[f32],
    a: &[T; D],
    chunks: &[T],
    ecol: &[T],
) -> f64 {
    let nb = y.len();
    let neg = a.map(|v| -v);
    let mut lanes = [T::zero(); 8];
    let mut ys = y.chunks_exact(8);
    for (yc, ec) in (&mut ys).zip(chunks.chunks_exact(8 * D)) {
        let mut r: [T; 8] = std::array::from_fn(|t| T::from_f32(yc[t]));
        for (col, aj) in ec.chunks_exact(8).zip(&neg) {
            for t in 0..8 {
                r[t] = madd::<T, FUSED>(col[t], *aj, r[t]);
            }
        }
        for t in 0..8 {
            lanes[t] = madd::<T, FUSED>(r[t], r[t], lanes[t]);
        }
    }
    let mut rss = tree_sum(lanes).widen();
    let first = nb - ys.remainder().len();
    for (b, yv) in ys.remainder().iter().enumerate() {
        let mut r = T::from_f32(*yv);
        for (j, aj) in neg.iter().enumerate() {
            r = madd::<T, FUSED>(ecol[j * nb + first + b], *aj, r);
        }
        rss += r.widen() * r.widen();
    }
    rss
}

/// RSS = ‖y − Qz‖² + ‖z − R a‖² (the two parts are orthogonal), in f64: the out-of-span
/// energy yᵀy − zᵀz from f64 sums of the f32 samples (no float32 cancellation), then the
/// in-span residual in D dimensions. Equals ‖y − E a‖² without touching the bands again.
#[inline(always)]
pub(super) fn whitened_rss<T: Real, const D: usize, const FUSED: bool>(
    z: &[f64; D],
    yy: f64,
    a: &[T; D],
    rcol: &[f64],
) -> f64 {
    let zz = tree_sum(z.map(|v| v * v));
    let mut fit = [0.0f64; D];
    for (j, col) in rcol.chunks_exact(D).enumerate() {
        let aj = a[j].widen();
        // A member at zero adds exactly nothing (subsets hold most members at zero).
        if aj == 0.0 {
            continue;
        }
        for k in 0..D {
            fit[k] = madd::<f64, FUSED>(col[k], aj, fit[k]);
        }
    }
    let mut d2 = [0.0f64; D];
    for k in 0..D {
        let d = z[k] - fit[k];
        d2[k] = d * d;
    }
    (yy - zz).max(0.0) + tree_sum(d2)
}

/// RSS of the direct residual r = y − E a (no cancellation): r is built in `scratch` one
/// material at a time (a multiply-add over the bands, which vectorises along them), then
/// squared into eight lanes. Copies r to `res` when given. `ecol` holds E's material
/// columns one after another.
#[inline(always)]
pub(super) fn residual<T: Real, const D: usize, const FUSED: bool>(
    y: &[f32],
    a: &[T; D],
    ecol: &[T],
    scratch: &mut [T],
    res: Option<&mut [f32]>,
) -> f64 {
    let nb = y.len();
    let r = &mut scratch[..nb];
    for (ri, yv) in r.iter_mut().zip(y) {
        *ri = T::from_f32(*yv);
    }
    for (col, aj) in ecol.chunks_exact(nb).zip(a) {
        let neg = -*aj;
        for (ri, e) in r.iter_mut().zip(col) {
            *ri = madd::<T, FUSED>(*e, neg, *ri);
        }
    }
    let mut lanes = [T::zero(); 8];
    let mut chunks = r.chunks_exact(8);
    for c in &mut chunks {
        for t in 0..8 {
            lanes[t] = madd::<T, FUSED>(c[t], c[t], lanes[t]);
        }
    }
    let mut rss = tree_sum(lanes).widen();
    for v in chunks.remainder() {
        rss += v.widen() * v.widen();
    }
    if let Some(out) = res {
        for (o, v) in out.iter_mut().zip(r.iter()) {
            *o = v.widen() as f32;
        }
    }
    rss
}

/// Writes one solved pixel: renormalised abundances, standard errors, RMSE, active count;
/// or marks it dark. The D materials are a compile-time length, so their rows are written
/// a vector at a time.
#[inline(always)]
pub(super) fn finish<T: Real, const M: usize, const D: usize>(
    plan: &Plan<T>,
    a: &[T; M],
    Fit {
        sigma,
        rmse,
        nonzero,
    }: Fit,
    passive: u32,
    slots: &mut Slots,
    px: usize,
    counts: &mut Counts,
) {
    let materials: &[T; D] = a[..D].try_into().expect("D materials");
    let sum = tree_sum(*materials).widen();
    if sum.is_nan() || sum < DARK_LIMIT {
        counts.dark += 1;
        slots.blank(px, plan.planes);
        return;
    }
    let inv = 1.0 / sum;
    let inv_t = T::from(inv).unwrap_or(T::nan());
    let planes = plan.planes;
    let out_ab: &mut [MaybeUninit<f32>; D] = (&mut slots.ab[px * planes..][..D])
        .try_into()
        .expect("D planes");
    for j in 0..D {
        out_ab[j].write((materials[j] * inv_t).widen() as f32);
    }
    if plan.opts.report_shade {
        let shade = if plan.model.shade {
            a[D].widen()
        } else {
            1.0 - sum
        };
        slots.ab[px * planes + D].write(shade as f32);
    }
    slots.sc[px].write((sigma * inv) as f32);
    slots.ps[px] = passive as u16;
    slots.rm[px].write(rmse as f32);
    slots.ac[px] = nonzero as u8;
    slots.um[px] = true;
    counts.unmixed += 1;
}

/// One solved pixel's fit: the noise level σ for its standard errors (the one given, or
/// √(RSS / (B − k + c))), its RMSE √(RSS / B), and k, its number of non-zero abundances.
#[derive(Debug, Clone, Copy, Default)]
pub(super) struct Fit {
    pub(super) sigma: f64,
    pub(super) rmse: f64,
    pub(super) nonzero: u32,
}

/// The square roots are taken in f32, eight to a vector instruction when a block's fits
/// are computed together (σ and the RMSE are written as f32 whatever the precision).
#[inline(always)]
pub(super) fn fit_of<T>(plan: &Plan<T>, rss: f64, nonzero: u32) -> Fit {
    let nb = plan.bands as f64;
    let sigma = match plan.opts.noise {
        Some(n) => n,
        None => ((rss / (nb - nonzero as f64 + plan.sum_to_one).max(1.0)) as f32).sqrt() as f64,
    };
    Fit {
        sigma,
        rmse: ((rss / nb) as f32).sqrt() as f64,
        nonzero,
    }
}

/// Whether pixel `y` is skipped before solving (no data, or zero in every band); counts
/// it and blanks its slots.
#[inline(always)]
pub(super) fn skipped(
    y: &[f32],
    valid: bool,
    slots: &mut Slots,
    px: usize,
    planes: usize,
    counts: &mut Counts,
) -> bool {
    skipped_as(
        valid,
        || y.iter().all(|v| *v == 0.0),
        slots,
        px,
        planes,
        counts,
    )
}

/// [`skipped`] with the zero-signal test given.
#[inline(always)]
pub(super) fn skipped_as(
    valid: bool,
    zero: impl FnOnce() -> bool,
    slots: &mut Slots,
    px: usize,
    planes: usize,
    counts: &mut Counts,
) -> bool {
    if !valid {
        counts.nodata += 1;
    } else if zero() {
        counts.zero_signal += 1;
    } else {
        return false;
    }
    slots.blank(px, planes);
    true
}

/// Asks for the first `len` values of `y` to be brought into the cache (a hint; no effect
/// off x86-64).
#[inline(always)]
pub(super) fn prefetch(y: &[f32], len: usize) {
    #[cfg(target_arch = "x86_64")]
    for line in y[..len.min(y.len())].chunks(16) {
        use std::arch::x86_64::{_mm_prefetch, _MM_HINT_T0};
        // SAFETY: SSE is part of the x86-64 baseline; a prefetch never faults.
        unsafe { _mm_prefetch::<_MM_HINT_T0>(line.as_ptr().cast()) };
    }
}
