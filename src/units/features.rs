//! What the clustering sees: the pixels the unexplained test ([`crate::unmix::misfit`])
//! set apart, and the feature vector of every other pixel.
//!
//! - **Unexplained**: a pixel whose residual is improbable under the noise (a χ² test at
//!   the recipe's false-alarm probability) joins the class `unexplained` instead of a unit.
//! - **Features**: the abundance vector, shade removed and renormalised (the planes
//!   `unmix` reports), unscaled: abundances share one unit (fraction of the pixel), so
//!   Euclidean distance weighs every member alike; optionally the albedo (1 − shade
//!   fraction) and the fit's misfit ratio √(χ²/threshold), both 0–1.

use super::UnitParams;
use crate::unmix::UnmixOutput;

/// The unmixed pixels, split by the unexplained test.
pub struct Screened {
    /// Pixels to cluster, in row-major order.
    pub explained: Vec<(usize, usize)>,
    pub unexplained: Vec<(usize, usize)>,
}

/// Splits the unmixed pixels by the unexplained test the unmixing ran.
pub fn screen(out: &UnmixOutput) -> Screened {
    let mut explained = Vec::new();
    let mut unexplained = Vec::new();
    let flags = &out.misfit.flagged;
    for ((r, c), ok) in out.unmixed.indexed_iter() {
        if !*ok {
            continue;
        }
        if flags.get((r, c)).copied().unwrap_or(false) {
            unexplained.push((r, c));
        } else {
            explained.push((r, c));
        }
    }
    Screened {
        explained,
        unexplained,
    }
}

/// How a pixel's feature vector is made.
pub struct Features<'a> {
    out: &'a UnmixOutput,
    /// The planes of the materials (shade excluded).
    pub materials: Vec<usize>,
    shade: Option<usize>,
    albedo: bool,
    rmse: bool,
}

impl<'a> Features<'a> {
    pub fn new(out: &'a UnmixOutput, p: &UnitParams) -> Features<'a> {
        Features {
            out,
            materials: (0..out.ids.len())
                .filter(|&j| out.ids[j] != "shade")
                .collect(),
            shade: out.ids.iter().position(|i| i == "shade"),
            albedo: p.albedo,
            rmse: p.rmse,
        }
    }

    /// Values per pixel: the materials, then the optional albedo and RMSE.
    pub fn count(&self) -> usize {
        self.materials.len() + self.albedo as usize + self.rmse as usize
    }

    /// Writes pixel (r, c)'s features into `x` ([`Features::count`] values).
    pub fn write(&self, r: usize, c: usize, x: &mut [f64]) {
        let out = self.out;
        for (f, &j) in self.materials.iter().enumerate() {
            x[f] = out.abundance[(r, c, j)] as f64;
        }
        let mut k = self.materials.len();
        if self.albedo {
            x[k] = self
                .shade
                .map_or(1.0, |s| 1.0 - out.abundance[(r, c, s)] as f64);
            k += 1;
        }
        if self.rmse {
            let q = out.misfit.ratio.get((r, c)).copied().unwrap_or(f32::NAN) as f64;
            x[k] = if q.is_finite() { q.min(1.0) } else { 0.0 };
        }
    }
}
