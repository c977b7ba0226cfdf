//! What unmixing produces: the abundance planes, the standard errors in factored form,
//! the fit RMSE, the pixel counts, and the options of a run that are not model parameters.

use ndarray::{Array2, Array3};

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
    pub counts: Counts,
}

/// The standard errors in factored form. Pixel (r, c)'s standard error on plane j is
/// `scale[(r, c)] · factor_j(passive[(r, c)])`: the scale is σ / Σa (the noise level over
/// the material sum that renormalises the abundances) and the factor √c_j the constrained
/// Cramér–Rao factor of the pixel's passive set, which the model's table holds for every
/// set. Six bytes per pixel instead of four per plane; the planes are formed when asked
/// for. The shade plane's error is σ·√c (not renormalised), with σ = scale · (1 − shade)
/// (the sum-to-one constraint that a shade column comes with); NaN without a shade column.
#[derive(Debug, Clone)]
pub struct StdErrors {
    /// σ / Σa per pixel; NaN where not unmixed.
    pub scale: Array2<f32>,
    /// The passive set per pixel (bit j: column j); 0 where not unmixed.
    pub passive: Array2<u16>,
    /// √c_j of every passive set, `columns` values per set (NaN for singular sets).
    pub(super) factors: Vec<f32>,
    pub(super) columns: usize,
    pub(super) materials: usize,
    /// Whether the model has a shade column (the last).
    pub(super) shade_column: bool,
}

impl StdErrors {
    /// The factors √c_j of passive set `set` (one per column: materials, then shade).
    pub fn factors(&self, set: u16) -> &[f32] {
        &self.factors[set as usize * self.columns..][..self.columns]
    }
}

impl UnmixOutput {
    /// The standard error of pixel (r, c) on plane j (NaN where not unmixed).
    pub fn stderr_at(&self, r: usize, c: usize, j: usize) -> f32 {
        let e = &self.errors;
        let scale = e.scale[(r, c)];
        let f = e.factors(e.passive[(r, c)]);
        if j < e.materials {
            scale * f[j]
        } else if e.shade_column {
            scale * (1.0 - self.abundance[(r, c, j)]) * f[e.materials]
        } else {
            f32::NAN
        }
    }

    /// The standard errors as planes, (row, col, plane) like the abundances.
    pub fn stderr(&self) -> Array3<f32> {
        Array3::from_shape_fn(self.abundance.dim(), |(r, c, j)| self.stderr_at(r, c, j))
    }
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
