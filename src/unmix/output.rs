//! What unmixing produces: the abundance planes, the standard errors in factored form,
//! the fit RMSE, the pixel counts, and the options of a run that are not model parameters.

use std::sync::Arc;

use ndarray::{Array2, Array3, Axis};
use rayon::prelude::*;

use super::errors::{reported_covariance, upper_index};
use super::misfit::Misfit;
use super::model::Spreads;

/// Pixels whose materials sum below this are too dark to unmix.
pub const DARK_LIMIT: f64 = 0.02;

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

/// A pixel refitted after unmixing ([`UnmixOutput::replace_pixel`]).
#[derive(Debug, Clone)]
pub struct Refit {
    /// The reported planes: materials, then shade when reported.
    pub reported: Vec<f64>,
    /// Their covariance, P × P row-major.
    pub cov: Vec<f64>,
    pub rmse: f64,
    /// Non-zero abundances.
    pub active: u8,
    /// A member in use held at zero.
    pub boundary: bool,
}

/// Everything unmixing produces.
#[derive(Debug, Clone)]
pub struct UnmixOutput {
    /// Plane ids: materials (members or groups), then `shade` when reported.
    pub ids: Vec<String>,
    /// (row, col, plane); NaN where `unmixed` is false.
    pub abundance: Array3<f32>,
    /// The standard errors, factored (expanded by [`UnmixOutput::stderr`]).
    pub errors: StdErrors,
    pub rmse: Array2<f32>,
    /// Non-zero abundances per pixel (0 where not unmixed).
    pub active: Array2<u8>,
    /// Subset mode: index + 1 into the model's subsets of the winning subset (0 = none).
    pub subset: Option<Array2<u16>>,
    pub residual: Option<Array3<f32>>,
    pub unmixed: Array2<bool>,
    /// Pixels on a constraint boundary the noise could move ([`super::errors::boundary`]).
    pub boundary: Array2<bool>,
    /// Per pixel, the bit mask of the model's columns (bit j: column j) that are boundary
    /// cases.
    pub boundary_columns: Array2<u32>,
    /// The unexplained test ([`super::misfit`]).
    pub misfit: Misfit,
    pub counts: Counts,
}

/// The standard errors in factored form. Pixel (r, c)'s covariance on the reported planes
/// follows from `scale[(r, c)]` (σ / Σa: the noise level over the material sum that
/// renormalises the abundances), its passive set's covariance factor K (the constrained
/// Cramér–Rao factor, which the model holds for every set) and its reported abundances,
/// by the delta method ([`super::errors`]). Six bytes per pixel instead of four per plane;
/// the planes are formed when asked for. Subset mode keeps each pixel's mixture covariance
/// instead (`mixture`), because its between-subset part is the pixel's own.
#[derive(Debug, Clone)]
pub struct StdErrors {
    /// σ / Σa per pixel; NaN where not unmixed.
    pub scale: Array2<f32>,
    /// The passive set per pixel (bit j: column j); 0 where not unmixed.
    pub passive: Array2<u16>,
    pub(super) spreads: Arc<Spreads>,
    pub(super) shade_column: bool,
    /// Subset mode: the reported planes' covariance per pixel, upper triangle row by row
    /// ([`upper_index`]); NaN where not unmixed.
    pub(super) mixture: Option<Array3<f32>>,
    /// Pixels refitted after unmixing (the thermal stage): their reported planes'
    /// covariance, P × P row-major.
    pub(crate) overrides: std::collections::HashMap<(usize, usize), Vec<f64>>,
}

impl UnmixOutput {
    /// The materials (members and groups) among the planes.
    fn material_planes(&self) -> usize {
        self.ids.len() - self.reports_shade() as usize
    }

    fn reports_shade(&self) -> bool {
        self.ids.last().is_some_and(|id| id == "shade")
    }

    /// The covariance of pixel (r, c)'s reported planes (P × P, row-major, P the plane
    /// count), or `None` where the pixel was not unmixed or its passive set is singular.
    pub fn covariance_at(&self, r: usize, c: usize) -> Option<Vec<f64>> {
        let p = self.ids.len();
        let mut out = vec![0.0; p * p];
        let mut f = Vec::with_capacity(p);
        self.covariance_into(r, c, &mut f, &mut out).then_some(out)
    }

    /// [`Self::covariance_at`] into `out` (P × P) with `f` as scratch, allocating nothing:
    /// false where there is no covariance (`out` then holds nothing of use).
    fn covariance_into(&self, r: usize, c: usize, f: &mut Vec<f64>, out: &mut [f64]) -> bool {
        let p = self.ids.len();
        if !self.unmixed[(r, c)] {
            return false;
        }
        if let Some(cov) = self.errors.overrides.get(&(r, c)) {
            out.copy_from_slice(cov);
            return true;
        }
        if let Some(mix) = &self.errors.mixture {
            for i in 0..p {
                for j in i..p {
                    let v = mix[(r, c, upper_index(p, i, j))] as f64;
                    out[i * p + j] = v;
                    out[j * p + i] = v;
                }
            }
            return true;
        }
        let e = &self.errors;
        let Some(k) = e.spreads.covariance(e.passive[(r, c)] as u32) else {
            return false;
        };
        let mat = self.material_planes();
        f.clear();
        f.extend((0..mat).map(|j| self.abundance[(r, c, j)] as f64));
        let shade = self
            .reports_shade()
            .then(|| self.abundance[(r, c, mat)] as f64);
        reported_covariance(
            k,
            e.spreads.columns,
            e.shade_column,
            f,
            e.scale[(r, c)] as f64,
            shade,
            out,
        );
        true
    }

    /// Puts a refitted pixel in place: its reported planes (materials, then shade when
    /// reported), their covariance (P × P, row-major), fit RMSE and non-zero count, and
    /// whether the new fit holds a member at zero (its boundary flag; the per-column mask,
    /// which describes the fit it replaces, is cleared).
    pub fn replace_pixel(&mut self, r: usize, c: usize, fit: Refit) {
        for (j, v) in fit.reported.iter().enumerate() {
            self.abundance[(r, c, j)] = *v as f32;
        }
        self.errors.overrides.insert((r, c), fit.cov);
        self.rmse[(r, c)] = fit.rmse as f32;
        self.active[(r, c)] = fit.active;
        self.boundary[(r, c)] = fit.boundary;
        self.boundary_columns[(r, c)] = 0;
    }

    /// Whether the covariances come from one factor per passive set (not subset mode's
    /// per-pixel mixtures), so that [`crate::unmix::Model::covariance_matrix`] of the full
    /// set and `errors.scale` give each pixel's free-form covariance.
    pub fn factored(&self) -> bool {
        self.errors.mixture.is_none()
    }

    /// The standard error of pixel (r, c) on plane j (NaN where not unmixed).
    pub fn stderr_at(&self, r: usize, c: usize, j: usize) -> f32 {
        match self.covariance_at(r, c) {
            Some(cov) => cov[j * self.ids.len() + j].max(0.0).sqrt() as f32,
            None => f32::NAN,
        }
    }

    /// `n` planes made from each unmixed pixel's covariance by `fill` (NaN elsewhere), rows
    /// in parallel.
    fn per_pixel(&self, n: usize, fill: impl Fn(&[f64], &mut [f32]) + Sync) -> Array3<f32> {
        let (rows, cols, _) = self.abundance.dim();
        let mut out = Array3::from_elem((rows, cols, n), f32::NAN);
        out.axis_iter_mut(Axis(0))
            .into_par_iter()
            .enumerate()
            .for_each(|(r, mut row)| {
                let p = self.ids.len();
                let (mut cov, mut f) = (vec![0.0f64; p * p], Vec::with_capacity(p));
                for (c, mut vals) in row.outer_iter_mut().enumerate().take(cols) {
                    if self.covariance_into(r, c, &mut f, &mut cov) {
                        fill(&cov, vals.as_slice_mut().expect("planes are contiguous"));
                    }
                }
            });
        out
    }

    /// The standard errors as planes, (row, col, plane) like the abundances.
    pub fn stderr(&self) -> Array3<f32> {
        let p = self.ids.len();
        self.per_pixel(p, |cov, out| {
            for (j, o) in out.iter_mut().enumerate() {
                *o = cov[j * p + j].max(0.0).sqrt() as f32;
            }
        })
    }

    /// The covariance planes: the upper triangle of each pixel's covariance, row by row
    /// ([`upper_index`]), with their ids "a,b".
    pub fn covariance_planes(&self) -> (Vec<String>, Array3<f32>) {
        let p = self.ids.len();
        let n = p * (p + 1) / 2;
        let mut ids = Vec::with_capacity(n);
        for i in 0..p {
            for j in i..p {
                ids.push(format!("{},{}", self.ids[i], self.ids[j]));
            }
        }
        let planes = self.per_pixel(n, |cov, out| {
            for i in 0..p {
                for j in i..p {
                    out[upper_index(p, i, j)] = cov[i * p + j] as f32;
                }
            }
        });
        (ids, planes)
    }
}

/// Options of a run that are not model parameters.
#[derive(Debug, Clone, Copy)]
pub struct RunOptions {
    /// Report the shade fraction as a plane.
    pub report_shade: bool,
    /// Noise σ for standard errors; `None` estimates per pixel.
    pub noise: Option<f64>,
    /// The noise σ the cube's band table states (in the whitened units of the band
    /// weights: a band of median noise), when `noise` is not given. Subset mode scores
    /// subsets with it; standard errors keep each pixel's own estimate, since the stated σ
    /// is the noise at a band's mean signal and a pixel's varies with its brightness.
    pub stated_noise: Option<f64>,
    pub residuals: bool,
    /// The unexplained test's false-alarm probability ([`super::misfit`]).
    pub false_alarm: f64,
    /// Subset mode: subsets whose BIC weight relative to the best is below this are left
    /// out of the average and its covariance (0: none left out).
    pub subset_truncation: f64,
    /// Subset mode: solve every subset, none skipped by the residual bound (the reference
    /// the bound is checked against; same results, slower).
    pub exhaustive_subsets: bool,
}

impl Default for RunOptions {
    fn default() -> Self {
        RunOptions {
            report_shade: true,
            noise: None,
            stated_noise: None,
            residuals: false,
            false_alarm: super::misfit::DEFAULT_FALSE_ALARM,
            subset_truncation: super::DEFAULT_SUBSET_TRUNCATION,
            exhaustive_subsets: false,
        }
    }
}
