//! Subset mode, the slow path for band sets that cannot separate the whole library:
//! every allowed subset of members is solved per pixel and scored by BIC, and the
//! estimate averages the subsets' solutions (Roberts et al. 1998 for per-pixel subsets).

use super::errors::{reported_covariance, upper_index};
use super::output::Counts;
use super::pixel::{finish, fit_of, residual, skipped, whiten, whitened_rss};
use super::plan::{Plan, Slots};
use super::solve::{pivot, positives, Real};

/// Subsets whose BIC weight exp(−ΔBIC/2) relative to the best is below this are left out
/// of the average and of its covariance, unless the recipe says otherwise.
pub const DEFAULT_SUBSET_TRUNCATION: f64 = 1e-6;

/// Subset mode (the slow path, in f64 whatever the run's precision): every allowed subset
/// is solved and scored by BIC (Schwarz 1978): with the noise σ known (`--noise`, or the
/// band table's stated σ) BIC = RSS/σ² + k ln n, the Gaussian log-likelihood's χ²;
/// without it the profile form n ln(RSS/n) + k ln n, σ² estimated by RSS/n, which on a
/// few bands is itself noisy and so picks subsets less well. The estimate averages the subsets' solutions with weights
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
    let known = plan.opts.noise.or(plan.opts.stated_noise).map(|s| s * s);
    let count = model.subsets.len();
    let (mut scores, mut sols, mut sets) = (
        vec![0.0f64; count],
        vec![[0.0f64; M]; count],
        vec![0u32; count],
    );
    let mut bounds: Vec<f64> = Vec::with_capacity(count);
    let mut inside: Vec<f64> = Vec::with_capacity(count);
    let exhaustive = plan.opts.exhaustive_subsets || plan.bases.is_empty();
    // ΔBIC beyond which a weight is below the truncation: −2 ln t (∞ for t = 0).
    let max_delta = if plan.opts.subset_truncation > 0.0 {
        -2.0 * plan.opts.subset_truncation.ln()
    } else {
        f64::INFINITY
    };
    let mut cov = vec![0.0f64; M * M];
    let mut out = vec![0.0f64; plan.planes * plan.planes];
    let mut scratch = vec![T::zero(); nb];
    for (px, (y, &ok)) in y.chunks_exact(nb).zip(valid).enumerate() {
        if skipped(y, ok, slots, px, plan.planes, counts) {
            continue;
        }
        let z = whiten::<f64, D, FUSED>(y, &plan.qt);
        let yy: f64 = y.iter().map(|v| *v as f64 * *v as f64).sum();
        let mut best_score = f64::INFINITY;
        let mut best_index = usize::MAX;
        let mut best_out = (0u32, false, 0u16);
        let mut best_fit = (0.0f64, 0u32);
        // A subset's RSS is at least that of the unconstrained fit in its span,
        // yᵀy − ‖Q_sᵀz‖² (less a rounding margin), and its k at least `k_min`: a bound on
        // its score that needs no solve. The subset of the lowest bound is solved first;
        // any other whose bound lies more than −2 ln t (the truncation t) above the best so far
        // is skipped: its weight is below the truncation against the final best as well,
        // so the results equal those of solving every subset (`exhaustive_subsets`).
        let k_min = if model.solver.sum_to_one() { 1.0 } else { 0.0 };
        let score_of = |rss: f64, k: f64| match known {
            Some(s2) => rss / s2 + k * n.ln(),
            None => n * (rss.max(1e-30) / n).ln() + k * n.ln(),
        };
        // ‖Q_sᵀz‖² along prefixes: a subset adds one basis vector to its prefix's (which
        // comes earlier in subset order). Not needed when every subset is solved.
        inside.clear();
        bounds.clear();
        if !exhaustive {
            for (q, prefix) in plan.bases.chunks_exact(D).zip(&plan.prefixes) {
                let d: f64 = q.iter().zip(&z).map(|(q, z)| q * z).sum();
                let here = prefix.map_or(0.0, |p| inside[p]) + d * d;
                inside.push(here);
                bounds.push(score_of((yy - here) - 1e-9 * yy, k_min));
            }
        }
        let first = if exhaustive {
            0
        } else {
            (0..bounds.len())
                .min_by(|&a, &b| bounds[a].total_cmp(&bounds[b]))
                .expect("subsets")
        };
        for s in std::iter::once(first).chain((0..model.subsets.len()).filter(|&s| s != first)) {
            let allowed = model.subsets[s];
            if !exhaustive && bounds[s] - best_score > max_delta {
                scores[s] = f64::INFINITY;
                sols[s] = [0.0; M];
                sets[s] = 0;
                continue;
            }
            let mut a = [0.0f64; M];
            let o = pivot::<f64, M, D, FUSED>(&model.table64, &z, allowed, allowed, true, &mut a);
            let am: &[f64; D] = a[..D].try_into().expect("D materials");
            let rss = whitened_rss::<f64, D, FUSED>(&z, yy, am, &plan.rcol).max(1e-30);
            let k = a.iter().filter(|v| **v > 0.0).count() as f64;
            let score = score_of(rss, k);
            scores[s] = score;
            sols[s] = a;
            sets[s] = o.passive;
            // Ties go to the earlier subset, as in subset order.
            if score < best_score || (score == best_score && s < best_index) {
                best_score = score;
                best_index = s;
                best_out = (o.passive, o.enumerated, s as u16 + 1);
                best_fit = (rss, k as u32);
            }
        }
        // Weights exp(−ΔBIC/2), those below the truncation left out (set to 0): at most
        // that fraction of the mean and of the mixture's covariance, per subset.
        let mut wsum = 0.0;
        let mut mean = [0.0f64; M];
        for (score, sol) in scores.iter_mut().zip(&sols) {
            let delta = *score - best_score;
            let w = if delta > max_delta {
                0.0
            } else {
                (-delta / 2.0).exp()
            };
            *score = w;
            if w == 0.0 {
                continue;
            }
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
        let mut fit = fit_of(plan, rss, positives::<T, M, FUSED>(&a).count_ones());
        // The noise level of the errors is the chosen subset's: the averaged solution
        // counts every member any subset used as non-zero, which would leave too few
        // degrees of freedom on a few bands.
        fit.sigma = fit_of(plan, best_fit.0, best_fit.1).sigma;
        finish::<T, M, D>(plan, &a, fit, passive, slots, px, counts);
        if let Some(s) = slots.subset.as_deref_mut() {
            s[px] = if slots.um[px] { pick } else { 0 };
        }
        if slots.um[px] {
            let mean: [f64; M] = std::array::from_fn(|j| mean[j] / wsum);
            mixture::<M>(plan, &scores, &sols, &sets, &mean, fit.sigma, &mut cov);
            let sum: f64 = mean[..D].iter().sum();
            let f: [f64; D] = std::array::from_fn(|j| mean[j] / sum);
            let shade = plan
                .opts
                .report_shade
                .then(|| if model.shade { mean[D] } else { 1.0 - sum });
            reported_covariance(&cov, M, model.shade, &f, 1.0 / sum, shade, &mut out);
            if let Some(m) = slots.mixture.as_deref_mut() {
                let p = plan.planes;
                let tri = &mut m[px * p * (p + 1) / 2..][..p * (p + 1) / 2];
                for i in 0..p {
                    for j in i..p {
                        tri[upper_index(p, i, j)] = out[i * p + j] as f32;
                    }
                }
            }
        }
    }
}

/// The covariance of the BIC-weighted mean `mean` of the subsets' solutions: within-subset
/// (σ²K of each subset's passive set) plus between-subset ((a_s − ā)(a_s − ā)ᵀ), weighted by
/// `weights` (exp(−ΔBIC/2), 0 below the truncation) normalised; into `cov` (M × M). A
/// subset whose set has no factor (singular) contributes its spread only.
#[inline(always)]
fn mixture<const M: usize>(
    plan: &Plan<impl Real>,
    weights: &[f64],
    sols: &[[f64; M]],
    sets: &[u32],
    mean: &[f64; M],
    sigma: f64,
    cov: &mut [f64],
) {
    cov.fill(0.0);
    let spreads = &plan.model.spreads;
    let s2 = sigma * sigma;
    let mut wsum = 0.0;
    for ((&w, sol), &set) in weights.iter().zip(sols).zip(sets) {
        if w == 0.0 {
            continue;
        }
        wsum += w;
        let d: [f64; M] = std::array::from_fn(|j| sol[j] - mean[j]);
        let k = spreads.covariance(set);
        for i in 0..M {
            for j in 0..M {
                let within = k.map_or(0.0, |k| s2 * k[i * M + j]);
                cov[i * M + j] += w * (within + d[i] * d[j]);
            }
        }
    }
    for v in cov.iter_mut() {
        *v /= wsum;
    }
}
