//! Band weights: each band counted by 1/σ_b, its noise, so that a noisy band (where the
//! Sun is faint, or the detector poor) does not pull the fit as hard as a clean one.
//! Weighted least squares is ordinary least squares on whitened data, W y = W E a with
//! W = diag(w): the pipeline scales the cube's bands and the endmember matrix's rows by w
//! before the solver, so the solver, its standard errors and the χ² test all see one
//! whitened problem. The weights are normalised to a median of 1, so residuals and RMSE
//! stay in the samples' units at a band of median noise, and `--noise` means the noise
//! of such a band.
//!
//! Where σ_b comes from (`--band-weights auto`): the band table's `noise_sigma` when the
//! cube states it; otherwise estimated from the cube itself — an unweighted fit of a
//! sample of pixels, then per band the residuals' robust spread (1.4826 × median absolute
//! deviation, the normal-consistent MAD; common practice), when the bands outnumber the
//! unknowns at least four to one ([`MAX_MEAN_LEVERAGE`]); with fewer bands every band weighs
//! 1 and `summary.json` says why. `none` weights every band 1.
//! Pure arithmetic: no I/O.

use ndarray::{Array2, Array3, ArrayView2, ArrayView3};

use super::model::Model;
use super::output::RunOptions;
use serde::{Deserialize, Serialize};

/// `band_weights` in the recipe, `--band-weights` on the command line.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum BandWeighting {
    /// 1/σ_b from the band table, or estimated from the residuals.
    #[default]
    Auto,
    /// Every band weighs 1.
    None,
}

impl BandWeighting {
    pub fn parse(s: &str) -> Result<BandWeighting, String> {
        match s {
            "auto" => Ok(BandWeighting::Auto),
            "none" => Ok(BandWeighting::None),
            other => Err(format!("\"{other}\": expected auto or none")),
        }
    }

    pub fn name(self) -> &'static str {
        match self {
            BandWeighting::Auto => "auto",
            BandWeighting::None => "none",
        }
    }
}

/// Where a run's weights came from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum WeightSource {
    /// The band table's `noise_sigma`.
    BandTable,
    /// The residuals of an unweighted fit of a sample of pixels.
    Residuals,
    /// Every band 1 (`none`, or nothing to estimate from).
    Uniform,
}

/// The weights of one run.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct BandWeights {
    pub source: WeightSource,
    /// w_b, median 1.
    pub weights: Vec<f64>,
    /// The median of the band table's σ_b, when the weights come from it: the noise of
    /// the whitened problem, which subset mode scores subsets with
    /// ([`RunOptions::stated_noise`]).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub stated_sigma: Option<f64>,
    /// Why the weights are uniform under `auto`, when they are.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub note: Option<String>,
}

impl BandWeights {
    pub fn uniform(bands: usize) -> BandWeights {
        BandWeights {
            source: WeightSource::Uniform,
            weights: vec![1.0; bands],
            stated_sigma: None,
            note: None,
        }
    }

    /// w_b = median(σ)/σ_b.
    pub fn from_sigma(sigma: &[f64], source: WeightSource) -> BandWeights {
        let m = median(sigma.to_vec());
        BandWeights {
            source,
            weights: sigma.iter().map(|s| m / s).collect(),
            stated_sigma: (source == WeightSource::BandTable).then_some(m),
            note: None,
        }
    }

    /// The run options with the stated noise of these weights filled in.
    pub fn apply(&self, opts: RunOptions) -> RunOptions {
        RunOptions {
            stated_noise: self.stated_sigma,
            ..opts
        }
    }

    /// True when every weight is 1 (nothing to apply).
    pub fn is_uniform(&self) -> bool {
        self.weights.iter().all(|&w| w == 1.0)
    }
}

/// The median of finite values (NaN when there are none).
fn median(mut v: Vec<f64>) -> f64 {
    v.retain(|x| x.is_finite());
    if v.is_empty() {
        return f64::NAN;
    }
    v.sort_by(f64::total_cmp);
    let n = v.len();
    if n % 2 == 1 {
        v[n / 2]
    } else {
        0.5 * (v[n / 2 - 1] + v[n / 2])
    }
}

/// Per band, 1.4826 × the median absolute deviation of residuals (pixels × bands, NaN
/// where a pixel was not fitted); `None` when fewer than 20 pixels were fitted or a band's
/// spread is zero.
pub fn robust_sigma(residuals: ArrayView2<f32>) -> Option<Vec<f64>> {
    let (_, nb) = residuals.dim();
    let mut out = Vec::with_capacity(nb);
    for b in 0..nb {
        let col: Vec<f64> = residuals
            .column(b)
            .iter()
            .map(|&v| v as f64)
            .filter(|v| v.is_finite())
            .collect();
        if col.len() < 20 {
            return None;
        }
        let m = median(col.clone());
        let mad = median(col.iter().map(|v| (v - m).abs()).collect());
        let s = 1.482_6 * mad;
        if !(s.is_finite() && s > 0.0) {
            return None;
        }
        out.push(s);
    }
    Some(out)
}

/// The largest mean leverage M/B (unknowns over bands) at which σ_b is estimated from
/// residuals. A fit's residual in band b has variance σ_b²(1 − h_b), with leverages h_b
/// that average M/B and vary across bands; above a quarter their spread distorts the
/// relative weights as much as the noise differences they are meant to measure (common
/// practice: leverage and residual variance of least squares).
pub const MAX_MEAN_LEVERAGE: f64 = 0.25;

/// Whether σ_b can be estimated from the residuals of a fit of `columns` unknowns to
/// `bands` bands.
pub fn can_estimate(columns: usize, bands: usize) -> bool {
    (columns as f64) <= MAX_MEAN_LEVERAGE * bands as f64
}

/// Pixels the estimate fits at most.
pub const ESTIMATE_PIXELS: usize = 20_000;

/// Rounds of re-estimation: a fit weighted by the last estimate, then the residuals'
/// spread again (feasible generalised least squares; common practice). The first,
/// unweighted round spreads the noisy bands' errors into every band's residual; three
/// rounds settle the relative weights.
pub const ESTIMATE_ROUNDS: usize = 3;

/// σ_b estimated from the cube: fits of up to [`ESTIMATE_PIXELS`] valid pixels (every
/// k-th, in order) — first with `plain`, the model of `resampled` unweighted, then
/// weighted by the previous round's estimate — then [`robust_sigma`] of
/// their residuals in the cube's units, over [`ESTIMATE_ROUNDS`] rounds. The residual of a
/// fit is a little smaller than the noise (the fit takes up M of the B degrees of
/// freedom), which [`can_estimate`] keeps small. `None` when too few pixels fit.
pub fn estimate_sigma(
    data: ArrayView3<f32>,
    valid: ArrayView2<bool>,
    resampled: &crate::library::resample::Resampled,
    plain: &Model,
    params: &super::UnmixParams,
) -> Result<Option<Vec<f64>>, super::model::ModelError> {
    let chosen: Vec<(usize, usize)> = valid
        .indexed_iter()
        .filter(|(_, v)| **v)
        .map(|(i, _)| i)
        .collect();
    let step = chosen.len().div_ceil(ESTIMATE_PIXELS).max(1);
    let chosen: Vec<(usize, usize)> = chosen.into_iter().step_by(step).collect();
    let (n, nb) = (chosen.len(), data.dim().2);
    let ok = Array2::from_elem((n, 1), true);
    let opts = RunOptions {
        residuals: true,
        ..Default::default()
    };
    let mut w = vec![1.0; nb];
    let mut sigma = None;
    for round in 0..ESTIMATE_ROUNDS {
        // The first round is the unweighted fit the caller already built.
        let built;
        let model = if round == 0 {
            plain
        } else {
            built = Model::build(&resampled.weighted(&w), params)?;
            &built
        };
        let mut sub = Array3::<f32>::zeros((n, 1, nb));
        for (i, &(r, c)) in chosen.iter().enumerate() {
            for b in 0..nb {
                sub[(i, 0, b)] = data[(r, c, b)] * w[b] as f32;
            }
        }
        let out = super::unmix::<f64>(sub.view(), ok.view(), model, &opts, &|_| {});
        let Some(residual) = out.residual else {
            return Ok(None);
        };
        let mut flat = Array2::<f32>::from_elem((n, nb), f32::NAN);
        for i in 0..n {
            if out.unmixed[(i, 0)] {
                for b in 0..nb {
                    flat[(i, b)] = residual[(i, 0, b)] / w[b] as f32;
                }
            }
        }
        let Some(mut s) = robust_sigma(flat.view()) else {
            return Ok(sigma);
        };
        // A residual's variance in band b is σ_b²(1 − h_b), h_b the leverage: the diagonal
        // of the hat matrix of the weighted endmember matrix, Σ_d Q[b, d]² of its thin QR
        // (the standardised residual; common practice). The full model's leverage bounds a
        // passive set's from above.
        for (b, sb) in s.iter_mut().enumerate() {
            let h: f64 = model.q.row(b).iter().map(|q| q * q).sum();
            *sb /= (1.0 - h.min(0.9)).sqrt();
        }
        w = BandWeights::from_sigma(&s, WeightSource::Residuals).weights;
        sigma = Some(s);
    }
    Ok(sigma)
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::Array2;
    use rand::{Rng, SeedableRng};

    #[test]
    fn weights_are_inverse_sigma_with_median_one() {
        let w = BandWeights::from_sigma(&[1.0, 2.0, 4.0], WeightSource::BandTable);
        assert_eq!(w.weights, vec![2.0, 1.0, 0.5]);
        assert!(!w.is_uniform());
        assert!(BandWeights::uniform(3).is_uniform());
    }

    #[test]
    fn the_robust_spread_recovers_each_bands_sigma_despite_outliers() {
        // Normal residuals of σ = 0.01 and 0.05, 2 % of pixels replaced by gross outliers:
        // 1.4826 × MAD estimates σ (common practice) within a few per cent at n = 5000.
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(5);
        let n = 5000;
        let mut r = Array2::<f32>::zeros((n, 2));
        for (b, s) in [0.01, 0.05].iter().enumerate() {
            for i in 0..n {
                // Box–Muller.
                let (u1, u2): (f64, f64) = (1.0 - rng.gen::<f64>(), rng.gen());
                let z = (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos();
                r[(i, b)] = if i % 50 == 0 { 10.0 } else { (s * z) as f32 };
            }
        }
        let s = robust_sigma(r.view()).unwrap();
        assert!((s[0] / 0.01 - 1.0).abs() < 0.06, "{s:?}");
        assert!((s[1] / 0.05 - 1.0).abs() < 0.06, "{s:?}");
        assert!(robust_sigma(r.slice(ndarray::s![..10, ..])).is_none());
    }

    #[test]
    fn residual_estimates_need_four_bands_per_unknown() {
        assert!(can_estimate(10, 96));
        assert!(!can_estimate(10, 24));
        assert!(!can_estimate(6, 7));
    }

    #[test]
    fn words_parse() {
        assert_eq!(BandWeighting::parse("auto"), Ok(BandWeighting::Auto));
        assert_eq!(BandWeighting::parse("none"), Ok(BandWeighting::None));
        assert!(BandWeighting::parse("1/sigma")
            .unwrap_err()
            .contains("expected"));
    }
}
