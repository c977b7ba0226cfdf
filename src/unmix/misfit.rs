//! The unexplained test: a pixel is unexplained by the library when its residual is
//! improbable under the noise.
//!
//! For pixel p with residual sum of squares RSS_p on ν_p = B − k_p + c degrees of freedom
//! (B bands, k_p non-zero abundances, c = 1 with the sum-to-one constraint), the statistic
//! χ²_p = RSS_p / σ_p² is compared with the χ² distribution on ν_p degrees of freedom at a
//! false-alarm probability p (default 10⁻³): the pixel is flagged when
//! P(χ²_ν ≥ χ²_p) < p. The pixel variance is σ_p² = σ̂² + κ̂² s̄_p²:
//!
//! - σ̂², the noise: the `--noise` value squared, or the median over pixels of
//!   RSS_p / m_ν (m_ν the median of χ²_ν, which is below ν: the median of χ²_ν/ν is below 1,
//!   so dividing by ν would bias σ̂ low) once the model-error term is taken out;
//! - κ̂, the relative model error a library mismatch shared by the cube leaves (a residual
//!   that grows with the signal; s̄_p the pixel's mean signal over the bands): the smallest
//!   κ that brings the brightest third of the pixels to the noise's upper quartile (see
//!   `model_error`), 0 when they are there already. So bright pixels are not all flagged
//!   because the library is a few per cent off everywhere, while a mismatch confined to
//!   fewer than a quarter of the bright pixels cannot raise κ̂ and stays flagged.
//!
//! The χ² distribution's quantiles come from `statrs` (its inverse CDF; checked against
//! SciPy in the tests). With noise that differs between bands the statistic is only
//! approximately χ² unless the bands are weighted by their noise.
//!
//! Pure arithmetic on arrays: no I/O.

use ndarray::{Array2, ArrayView3};
use rayon::prelude::*;
use serde::Serialize;
use statrs::distribution::{ChiSquared, ContinuousCDF};

use super::UnmixOutput;

/// The quantile of the bright third's noise-scaled residuals that the model-error term
/// brings to the same quantile of χ² (see `model_error`).
const MATCHED_QUANTILE: f64 = 0.75;

/// The default false-alarm probability of the unexplained test.
pub const DEFAULT_FALSE_ALARM: f64 = 1e-3;

/// What the unexplained test found, and with which noise model.
#[derive(Debug, Clone, Serialize, PartialEq, Default)]
pub struct MisfitSummary {
    /// The false-alarm probability.
    pub false_alarm: f64,
    /// σ̂, the noise level (the cube's units).
    pub noise_sigma: f64,
    /// "given" (`--noise`) or "estimated" (from the residuals).
    pub noise_source: &'static str,
    /// κ̂, the relative model error.
    pub model_error: f64,
    /// Pixels flagged unexplained.
    pub flagged: usize,
    /// Unmixed pixels tested (those with at least one degree of freedom).
    pub tested: usize,
}

/// The test's outcome per pixel (empty until [`test`] has run).
#[derive(Debug, Clone, Default)]
pub struct Misfit {
    pub summary: MisfitSummary,
    /// Unexplained pixels.
    pub flagged: Array2<bool>,
    /// √(χ²_p / threshold): at most 1 for explained pixels (NaN where not tested), the
    /// fit-quality feature the clustering may use.
    pub ratio: Array2<f32>,
}

/// The median of `v` (NaN when empty); `v` is reordered.
fn median(v: &mut [f64]) -> f64 {
    if v.is_empty() {
        return f64::NAN;
    }
    let mid = v.len() / 2;
    let (_, m, _) = v.select_nth_unstable_by(mid, f64::total_cmp);
    *m
}

/// A tested pixel: row, column, RSS, ν and its mean sample s̄.
type Tested = (usize, usize, f64, usize, f64);

/// Runs the test on every unmixed pixel of `out`, unmixed from `data` (row, column, band);
/// `sum_to_one` says whether the solver had the constraint; `noise` is the σ given, if any;
/// `false_alarm` the probability p.
pub fn test(
    out: &UnmixOutput,
    data: ArrayView3<f32>,
    sum_to_one: bool,
    noise: Option<f64>,
    false_alarm: f64,
) -> Misfit {
    let (rows, cols) = out.unmixed.dim();
    let bands = data.dim().2;
    let c = sum_to_one as usize;
    // Per tested pixel: (r, c, RSS, ν, s̄), in raster order (rows gathered in parallel).
    let rmse = out.rmse.as_slice().expect("standard layout");
    let spectra = data.as_slice().expect("spectra are in standard layout");
    let per_row: Vec<Vec<Tested>> = (0..rows)
        .into_par_iter()
        .map(|r| {
            (0..cols)
                .filter_map(|cc| {
                    if !out.unmixed[(r, cc)] {
                        return None;
                    }
                    let k = out.active[(r, cc)] as usize;
                    let nu = (bands + c).saturating_sub(k);
                    let rmse = rmse[r * cols + cc] as f64;
                    if nu == 0 || !rmse.is_finite() {
                        return None;
                    }
                    let px = (r * cols + cc) * bands;
                    let spectrum = &spectra[px..px + bands];
                    let s = spectrum.iter().map(|v| *v as f64).sum::<f64>() / bands as f64;
                    Some((r, cc, rmse * rmse * bands as f64, nu, s))
                })
                .collect()
        })
        .collect();
    let px = per_row.concat();
    // The median and the critical value of χ²_ν for every ν that occurs.
    let mut median_of = vec![f64::NAN; bands + c + 1];
    let mut critical = vec![f64::NAN; bands + c + 1];
    for &(_, _, _, nu, _) in &px {
        if median_of[nu].is_nan() {
            let d = ChiSquared::new(nu as f64).expect("ν ≥ 1");
            median_of[nu] = d.inverse_cdf(0.5);
            critical[nu] = d.inverse_cdf(1.0 - false_alarm);
        }
    }
    let u: Vec<f64> = px.iter().map(|p| p.2 / median_of[p.3]).collect();
    let (sigma2, kappa2, source) = match noise {
        Some(n) => {
            let mut excess: Vec<f64> = px
                .iter()
                .zip(&u)
                .filter(|(p, _)| p.4 > 0.0)
                .map(|(p, u)| (u - n * n) / (p.4 * p.4))
                .collect();
            (n * n, median(&mut excess).max(0.0), "given")
        }
        None => {
            let kappa2 = model_error(&px, &u);
            let mut rest: Vec<f64> = px
                .iter()
                .zip(&u)
                .map(|(p, u)| u - kappa2 * p.4 * p.4)
                .collect();
            let mut all = u.clone();
            let floor = 1e-6 * median(&mut all).max(0.0);
            (median(&mut rest).max(floor), kappa2, "estimated")
        }
    };
    let kappa2 = if kappa2.is_finite() { kappa2 } else { 0.0 };
    let mut flagged = Array2::from_elem((rows, cols), false);
    let mut ratio = Array2::from_elem((rows, cols), f32::NAN);
    let mut count = 0;
    for &(r, cc, rss, nu, s) in &px {
        let var = sigma2 + kappa2 * s * s;
        let chi2 = rss / var;
        let q = chi2 / critical[nu];
        ratio[(r, cc)] = q.sqrt() as f32;
        if q > 1.0 {
            flagged[(r, cc)] = true;
            count += 1;
        }
    }
    Misfit {
        summary: MisfitSummary {
            false_alarm,
            noise_sigma: sigma2.sqrt(),
            noise_source: source,
            model_error: kappa2.sqrt(),
            flagged: count,
            tested: px.len(),
        },
        flagged,
        ratio,
    }
}

/// κ̂²: the smallest relative model error that brings the brightest third of the pixels to
/// the noise's upper quartile — the q = 0.75 quantile of RSS_p / (q_q(χ²_ν) (σ₀² + κ² s̄_p²))
/// over that third equal to 1 — with σ₀² the median of u over the darkest third (where the
/// noise dominates). Matching a quantile above the median lets κ̂ cover the spread that a
/// shared mismatch gives different compositions, not only its typical size; staying at the
/// quartile keeps a minority of truly unexplained pixels from setting it; with pure noise
/// the bright third already matches and κ̂ is 0.
fn model_error(px: &[(usize, usize, f64, usize, f64)], u: &[f64]) -> f64 {
    if px.len() < 30 {
        return 0.0;
    }
    // By s̄, ties in pixel order (what a stable sort gives), sorted in parallel.
    let mut keyed: Vec<(f64, usize)> = px.iter().enumerate().map(|(i, p)| (p.4, i)).collect();
    keyed.par_sort_unstable_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
    let order: Vec<usize> = keyed.into_iter().map(|(_, i)| i).collect();
    let third = px.len() / 3;
    let mut dark: Vec<f64> = order[..third].iter().map(|&i| u[i]).collect();
    let sigma2 = median(&mut dark).max(0.0);
    let bright = &order[px.len() - third..];
    // The quantile of χ²_ν for every ν that occurs.
    let top = px.iter().map(|p| p.3).max().unwrap_or(0);
    let mut q90 = vec![f64::NAN; top + 1];
    for &i in bright {
        let nu = px[i].3;
        if q90[nu].is_nan() {
            q90[nu] = ChiSquared::new(nu as f64)
                .expect("ν ≥ 1")
                .inverse_cdf(MATCHED_QUANTILE);
        }
    }
    let scaled: Vec<(f64, f64)> = bright
        .iter()
        .map(|&i| (px[i].2 / q90[px[i].3], px[i].4 * px[i].4))
        .collect();
    let at = ((scaled.len() as f64 * MATCHED_QUANTILE) as usize).min(scaled.len() - 1);
    let level = |k2: f64| {
        let mut v: Vec<f64> = scaled
            .iter()
            .map(|(r, s2)| r / (sigma2 + k2 * s2))
            .collect();
        *v.select_nth_unstable_by(at, f64::total_cmp).1
    };
    // level(k2) > 1, the bisection's question, without selecting: the at-th smallest
    // ratio exceeds 1 exactly when at most `at` ratios are ≤ 1 — counted in parallel —
    // unless a ratio is NaN (it orders by sign there), when the selection answers.
    let above = |k2: f64| {
        let (le, nan) = scaled
            .par_iter()
            .map(|(r, s2)| {
                let v = r / (sigma2 + k2 * s2);
                ((v <= 1.0) as usize, v.is_nan() as usize)
            })
            .reduce(|| (0, 0), |a, b| (a.0 + b.0, a.1 + b.1));
        if nan > 0 {
            level(k2) > 1.0
        } else {
            le <= at
        }
    };
    if level(0.0) <= 1.0 {
        return 0.0;
    }
    let mut hi = 1e-6;
    while above(hi) && hi < 1.0 {
        hi *= 2.0;
    }
    let mut lo = 0.0;
    for _ in 0..50 {
        let mid = 0.5 * (lo + hi);
        if above(mid) {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    hi
}
