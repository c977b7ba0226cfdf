//! Subset mode, the slow path for band sets that cannot separate the whole library:
//! every allowed subset of members is solved per pixel and scored by BIC, and the
//! estimate averages the subsets' solutions (Roberts et al. 1998 for per-pixel subsets).

use super::output::Counts;
use super::pixel::{finish, fit_of, residual, skipped, whiten, whitened_rss};
use super::plan::{Plan, Slots};
use super::solve::{pivot, positives, Real};

/// Subset mode (the slow path, in f64 whatever the run's precision): every allowed subset
/// is solved and scored by BIC; the estimate averages the subsets' solutions with weights
/// exp(−ΔBIC/2) (Bayesian model averaging), so members the bands cannot tell apart share
/// the abundance instead of one being picked by the noise. Subset RSS = (yᵀy − zᵀz) +
/// ‖z − R a‖² in f64.
#[inline(always)]
pub(super) fn rows_subsets<T: Real, const M: usize, const D: usize, const FUSED: bool>(
    plan: &Plan<T>,
    y: &[f32],
    valid: &[bool],
    slots: &mut Slots,
    counts: &mut Counts,
) {
    let model = plan.model;
    let nb = plan.bands;
    let n = nb as f64;
    let mut scores: Vec<f64> = Vec::new();
    let mut sols: Vec<[f64; M]> = Vec::new();
    let mut scratch = vec![T::zero(); nb];
    for (px, (y, &ok)) in y.chunks_exact(nb).zip(valid).enumerate() {
        if skipped(y, ok, slots, px, plan.planes, counts) {
            continue;
        }
        let z = whiten::<f64, D, FUSED>(y, &plan.qt);
        let yy: f64 = y.iter().map(|v| *v as f64 * *v as f64).sum();
        scores.clear();
        sols.clear();
        let mut best_score = f64::INFINITY;
        let mut best_out = (0u32, false, 0u16);
        for (s, &allowed) in model.subsets.iter().enumerate() {
            let mut a = [0.0f64; M];
            let o = pivot::<f64, M, D, FUSED>(&model.table64, &z, allowed, allowed, true, &mut a);
            let am: &[f64; D] = a[..D].try_into().expect("D materials");
            let rss = whitened_rss::<f64, D, FUSED>(&z, yy, am, &plan.rcol).max(1e-30);
            let k = a.iter().filter(|v| **v > 0.0).count() as f64;
            let score = n * (rss / n).ln() + k * n.ln();
            scores.push(score);
            sols.push(a);
            if score < best_score {
                best_score = score;
                best_out = (o.passive, o.enumerated, s as u16 + 1);
            }
        }
        let mut wsum = 0.0;
        let mut mean = [0.0f64; M];
        for (score, sol) in scores.iter().zip(&sols) {
            let w = (-(score - best_score) / 2.0).exp();
            wsum += w;
            for j in 0..M {
                mean[j] += w * sol[j];
            }
        }
        let a: [T; M] = std::array::from_fn(|j| T::from(mean[j] / wsum).unwrap_or(T::nan()));
        let (passive, enumerated, pick) = best_out;
        counts.enumerated += enumerated as usize;
        let am: &[T; D] = a[..D].try_into().expect("D materials");
        let rss = match slots.residual_of(px, nb) {
            None => whitened_rss::<T, D, FUSED>(&z, yy, am, &plan.rcol),
            res => residual::<T, D, FUSED>(y, am, &plan.ecol, &mut scratch, res),
        };
        let fit = fit_of(plan, rss, positives::<T, M, FUSED>(&a).count_ones());
        finish::<T, M, D>(plan, &a, fit, passive, slots, px, counts);
        if let Some(s) = slots.subset.as_deref_mut() {
            s[px] = if slots.um[px] { pick } else { 0 };
        }
    }
}
