//! The thermal stage: after the reflected-only unmixing, screen the pixels whose residual
//! says something glows, fit those jointly with emission ([`super::fit`]), keep a fit
//! only where it explains significantly more than the reflected light alone, and put its
//! abundances, errors and fit quality in place of the reflected-only ones.
//!
//! - **Screen** (cheap, on every unmixed pixel): the reflected-only fit failed the
//!   unexplained test, or its residual summed over the bands beyond 3 µm is positive and
//!   significant, z = Σ r_b / (σ_p √n) > [`SCREEN_Z`] (one-sided, p ≈ 0.001; σ_p the unexplained
//!   test's pixel noise, which already includes the cube's model error).
//! - **Acceptance**: the one-temperature fit's Δχ² = (RSS₀ − RSS₁)/σ_p² above the χ²
//!   critical value on 2 degrees of freedom (f and T) at the false-alarm probability p
//!   divided by the number of tested pixels (Bonferroni over the cube, so a scene without
//!   hot spots reports none at probability about p), and f > 0. Under `two` a second
//!   component is kept where both fractions are positive and it lowers χ² by more than
//!   the critical value on 2 degrees of freedom at p.
//! - **Columns**: the thermal column is written for I/F. After photometric normalisation
//!   the reflected light was divided by the law's factor P but emission was not, so the
//!   column of a pixel is t/P; a reflectance-factor cube is I/F ÷ cos i, so its column is
//!   t/cos i; the radiance factor is I/F. Band weights scale it like every column.
//!
//! Pure arithmetic on arrays: no I/O.

use ndarray::{s, Array2, Array3, ArrayView2, ArrayView3};
use rayon::prelude::*;
use statrs::distribution::{ChiSquared, ContinuousCDF};

use super::fit::{covariance, fit_two, grid_one, refine_one, Columns, Pixel};
use super::Mode;
use crate::unmix::{Model, UnmixOutput};

/// The screen's one-sided threshold on the summed residual beyond 3 µm (p ≈ 0.001, as the
/// unexplained test's default: a screen only chooses which pixels are fitted; acceptance
/// decides).
pub const SCREEN_Z: f64 = 3.090;
/// A one-temperature fit whose grid optimum explains less than this share of the
/// acceptance level is rejected before refinement.
pub const EARLY_REJECT: f64 = 0.5;
/// Bands whose centre lies beyond this wavelength enter the screen, µm.
pub const SCREEN_FROM_UM: f64 = 3.0;

/// What the stage needs besides the unmixing output.
pub struct Inputs<'a> {
    /// The cube's samples (rows, cols, bands), unweighted, as unmixed (after any
    /// photometric normalisation).
    pub data: ArrayView3<'a, f32>,
    /// The band weights.
    pub weights: &'a [f64],
    /// Band centres, µm.
    pub centres_um: &'a [f64],
    pub model: &'a Model,
    /// Per pixel, the factor the thermal column is divided by (photometric law, cos i for
    /// reflectance factor); `None`: 1.
    pub divisor: Option<ArrayView2<'a, f32>>,
    pub mode: Mode,
    pub range_k: (f64, f64),
    /// The σ given for standard errors, if any (weighted units).
    pub noise: Option<f64>,
}

/// Per pixel results of the stage.
#[derive(Debug, Clone)]
pub struct ThermalOutput {
    /// Plane names, then (rows, cols, planes): T, f, σ_T, σ_f (and the second pair for
    /// `two`); NaN where not fitted.
    pub names: Vec<String>,
    pub planes: Array3<f32>,
    /// Pixels whose joint fit was kept.
    pub fitted: Array2<bool>,
    /// Pixels the screen selected.
    pub screened: usize,
    /// Temperature components per pixel (1, or 2 for `two`).
    pub components: usize,
}

/// The plane names of a mode.
pub fn plane_names(components: usize) -> Vec<String> {
    let mut v = Vec::new();
    for k in 1..=components {
        let s = if components == 1 {
            String::new()
        } else {
            k.to_string()
        };
        v.push(format!("temperature{s}_k"));
        v.push(format!("fraction{s}"));
        v.push(format!("temperature{s}_k_stderr"));
        v.push(format!("fraction{s}_stderr"));
    }
    v
}

/// One pixel's kept fit.
struct Kept {
    r: usize,
    c: usize,
    /// T, f, σ_T, σ_f per component.
    values: Vec<f32>,
    /// What replaces the reflected-only fit. Its boundary flag: a member in use held at
    /// zero (conservatively a boundary case: its multiplier is not tested here).
    fit: crate::unmix::Refit,
    unexplained: bool,
}

/// Runs the stage, updating `out` in place for the kept pixels. `columns` makes the unit
/// thermal columns t_b(T) (I/F, unweighted, over the search range); it is called only when
/// the screen selects a pixel, so a cube without hot pixels does not pay for the table.
pub fn run(
    inp: &Inputs,
    out: &mut UnmixOutput,
    columns: impl FnOnce() -> Columns,
) -> ThermalOutput {
    let (rows, cols, nb) = inp.data.dim();
    let components = match inp.mode {
        Mode::Two => 2,
        _ => 1,
    };
    let names = plane_names(components);
    let mut planes = Array3::from_elem((rows, cols, names.len()), f32::NAN);
    let mut fitted = Array2::from_elem((rows, cols), false);
    let model = inp.model;
    let m = model.columns();
    let mat = model.material_columns();
    let p = out.ids.len();
    let report_shade = p > mat;
    let summary = &out.misfit.summary;
    let (s2, k2) = (
        summary.noise_sigma * summary.noise_sigma,
        summary.model_error * summary.model_error,
    );
    let tested = summary.tested.max(1);
    let alpha = summary.false_alarm / tested as f64;
    let chi2_2 = ChiSquared::new(2.0).expect("positive degrees of freedom");
    let accept = chi2_2.inverse_cdf(1.0 - alpha);
    let second = chi2_2.inverse_cdf(1.0 - summary.false_alarm);
    let ir: Vec<usize> = (0..nb)
        .filter(|&b| inp.centres_um[b] > SCREEN_FROM_UM)
        .collect();
    // Per pixel: the weighted spectrum, the reflected-only raw abundances, its residual.
    let candidates: Vec<(usize, usize)> = out
        .unmixed
        .indexed_iter()
        .filter(|(_, ok)| **ok)
        .map(|(rc, _)| rc)
        .collect();
    let pixel = |r: usize, c: usize| -> (Vec<f64>, Vec<f64>, f64) {
        let y: Vec<f64> = (0..nb)
            .map(|b| inp.data[(r, c, b)] as f64 * inp.weights[b])
            .collect();
        let shade = if report_shade {
            out.abundance[(r, c, mat)] as f64
        } else {
            0.0
        };
        let sum = 1.0 - shade;
        let mut a: Vec<f64> = (0..mat)
            .map(|j| out.abundance[(r, c, j)] as f64 * sum)
            .collect();
        if model.shade {
            a.push(shade);
        }
        let sbar = y.iter().sum::<f64>() / nb as f64;
        (y, a, sbar)
    };
    let e_ir: Vec<f64> = (0..m)
        .map(|j| ir.iter().map(|&b| model.e[(b, j)]).sum())
        .collect();
    // The screen reads only what its test needs (the mean weighted signal, and the bands
    // beyond 3 µm), with one abundance buffer per worker: it visits every pixel.
    let screened: Vec<(usize, usize)> = candidates
        .par_iter()
        .copied()
        .map_init(
            || vec![0.0f64; m],
            |a, (r, c)| {
                if out.misfit.flagged[(r, c)] {
                    return Some((r, c));
                }
                if ir.is_empty() {
                    return None;
                }
                let shade = if report_shade {
                    out.abundance[(r, c, mat)] as f64
                } else {
                    0.0
                };
                for (j, v) in a.iter_mut().enumerate().take(mat) {
                    *v = out.abundance[(r, c, j)] as f64 * (1.0 - shade);
                }
                if model.shade {
                    a[mat] = shade;
                }
                let spectrum = inp.data.slice(s![r, c, ..]);
                let sbar = spectrum
                    .iter()
                    .zip(inp.weights)
                    .map(|(v, w)| *v as f64 * w)
                    .sum::<f64>()
                    / nb as f64;
                let var = s2 + k2 * sbar * sbar;
                // Σ_b (y_b − Σ_j E_bj a_j) over the bands beyond 3 µm, with the model's
                // column sums over those bands made once.
                let sum: f64 = ir
                    .iter()
                    .map(|&b| spectrum[b] as f64 * inp.weights[b])
                    .sum::<f64>()
                    - a.iter().zip(&e_ir).map(|(a, e)| a * e).sum::<f64>();
                (sum / (var * ir.len() as f64).sqrt() > SCREEN_Z).then_some((r, c))
            },
        )
        .flatten()
        .collect();
    let table = if screened.is_empty() {
        None
    } else {
        Some(columns())
    };
    let kept: Vec<Kept> = screened
        .par_iter()
        .filter_map(|&(r, c)| {
            let cols_t = table.as_ref()?;
            let (y, a, sbar) = pixel(r, c);
            let var = s2 + k2 * sbar * sbar;
            // Allowed columns: the winning subset in subset mode, else all.
            let mask: u32 = match &out.subset {
                Some(s) if s[(r, c)] > 0 => model.subsets[s[(r, c)] as usize - 1],
                _ => model.full_mask(),
            };
            let allowed: Vec<usize> = (0..m).filter(|j| mask & (1 << j) != 0).collect();
            let mut e = Vec::with_capacity(allowed.len() * nb);
            for &j in &allowed {
                e.extend((0..nb).map(|b| model.e[(b, j)]));
            }
            let start: Vec<f64> = allowed.iter().map(|&j| a[j]).collect();
            let rss0: f64 = (0..nb)
                .map(|b| {
                    let fit: f64 = (0..m).map(|j| model.e[(b, j)] * a[j]).sum();
                    (y[b] - fit).powi(2)
                })
                .sum();
            let divisor = inp.divisor.as_ref().map_or(1.0, |d| d[(r, c)] as f64);
            if divisor.is_nan() || divisor <= 0.0 {
                return None;
            }
            let scale: Vec<f64> = inp.weights.iter().map(|w| w / divisor).collect();
            let px = Pixel::new(&y, &e, allowed.len(), &start, &scale);
            // A grid optimum far below the acceptance level is not refined: the
            // refinement moves T by less than a grid step.
            let (t, rss) = grid_one(&px, cols_t, inp.range_k)?;
            if (rss0 - rss) / var < EARLY_REJECT * accept {
                return None;
            }
            let one = refine_one(&px, cols_t, inp.range_k, t)?;
            if (rss0 - one.solution.rss) / var <= accept || one.solution.x[allowed.len()] <= 0.0 {
                return None;
            }
            // `two`: the second component is kept where both fractions are positive and it
            // lowers χ² significantly (χ² on 2 degrees of freedom at p); otherwise the
            // pixel keeps one temperature and the second pair of planes stays NaN.
            let joint = match components {
                2 => match fit_two(&px, cols_t, inp.range_k) {
                    Some(two)
                        if two.solution.x[allowed.len()..].iter().all(|f| *f > 0.0)
                            && (one.solution.rss - two.solution.rss) / var > second =>
                    {
                        two
                    }
                    _ => one,
                },
                _ => one,
            };
            let sol = &joint.solution;
            let k = sol.x.iter().filter(|v| **v > 0.0).count();
            // ν: bands + the sum-to-one row − unknowns (the non-zero abundances, f and T).
            let nu = (nb + 1).saturating_sub(k + joint.t_k.len());
            let sigma = inp
                .noise
                .unwrap_or_else(|| (sol.rss / nu.max(1) as f64).sqrt());
            let cov = covariance(&px, cols_t, &joint, sigma)?;
            let side = allowed.len() + 2 * joint.t_k.len();
            let mut values = Vec::with_capacity(4 * components);
            for (kk, t) in joint.t_k.iter().enumerate() {
                let fi = allowed.len() + kk;
                let (ti, fcov) = (allowed.len() + 2 * kk + 1, allowed.len() + 2 * kk);
                values.push(*t as f32);
                values.push(sol.x[fi] as f32);
                values.push(cov[ti * side + ti].max(0.0).sqrt() as f32);
                values.push(cov[fcov * side + fcov].max(0.0).sqrt() as f32);
            }
            values.resize(4 * components, f32::NAN);
            // The raw abundances over all columns, and their covariance (M × M).
            let mut raw = vec![0.0; m];
            for (ii, &j) in allowed.iter().enumerate() {
                raw[j] = sol.x[ii];
            }
            let mut kmat = vec![0.0; m * m];
            for (ii, &i) in allowed.iter().enumerate() {
                for (jj, &j) in allowed.iter().enumerate() {
                    kmat[i * m + j] = cov[ii * side + jj];
                }
            }
            let sum: f64 = raw[..mat].iter().sum();
            if sum.is_nan() || sum <= 0.0 {
                return None;
            }
            let f: Vec<f64> = raw[..mat].iter().map(|v| v / sum).collect();
            let shade = report_shade.then(|| if model.shade { raw[mat] } else { 1.0 - sum });
            let mut reported = f.clone();
            if let Some(s) = shade {
                reported.push(s);
            }
            let mut pc = vec![0.0; p * p];
            crate::unmix::errors::reported_covariance(
                &kmat,
                m,
                model.shade,
                &f,
                1.0 / sum,
                shade,
                &mut pc,
            );
            let critical = ChiSquared::new(nu.max(1) as f64)
                .expect("ν ≥ 1")
                .inverse_cdf(1.0 - summary.false_alarm);
            Some(Kept {
                r,
                c,
                values,
                fit: crate::unmix::Refit {
                    reported,
                    cov: pc,
                    rmse: (sol.rss / nb as f64).sqrt(),
                    active: raw.iter().filter(|v| **v > 0.0).count() as u8,
                    boundary: allowed
                        .iter()
                        .enumerate()
                        .any(|(ii, &j)| j < mat && sol.x[ii] <= 0.0),
                },
                unexplained: sol.rss / var > critical,
            })
        })
        .collect();
    for k in kept {
        fitted[(k.r, k.c)] = true;
        for (i, v) in k.values.iter().enumerate() {
            planes[(k.r, k.c, i)] = *v;
        }
        out.replace_pixel(k.r, k.c, k.fit);
        if out.misfit.flagged[(k.r, k.c)] && !k.unexplained {
            out.misfit.summary.flagged -= 1;
        } else if !out.misfit.flagged[(k.r, k.c)] && k.unexplained {
            out.misfit.summary.flagged += 1;
        }
        out.misfit.flagged[(k.r, k.c)] = k.unexplained;
    }
    ThermalOutput {
        names,
        planes,
        fitted,
        screened: screened.len(),
        components,
    }
}
