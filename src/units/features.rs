//! What the clustering sees: the unexplained test that sets pixels apart first, and the
//! feature vector of every other pixel.
//!
//! - **Unexplained**: a pixel whose fit RMSE exceeds [`UNEXPLAINED_FACTOR`] times the
//!   noise level of the cube (the median fit RMSE of unmixed pixels, a robust estimate of
//!   the noise when most pixels fit) joins the class `unexplained` instead of a unit.
//! - **Features**: the abundance vector, shade removed and renormalised (the planes
//!   `unmix` reports), unscaled: abundances share one unit (fraction of the pixel), so
//!   Euclidean distance weighs every member alike; optionally the albedo (1 − shade
//!   fraction) and the fit RMSE divided by the unexplained threshold, both 0–1.

use super::{UnitParams, UNEXPLAINED_FACTOR};
use crate::unmix::UnmixOutput;

/// The unmixed pixels, split by the unexplained test.
pub struct Screened {
    /// The median fit RMSE of unmixed pixels.
    pub noise_level: f64,
    /// RMSE above this marks a pixel unexplained.
    pub threshold: f64,
    /// Pixels to cluster, in row-major order.
    pub explained: Vec<(usize, usize)>,
    pub unexplained: Vec<(usize, usize)>,
}

fn median(mut v: Vec<f64>) -> f64 {
    if v.is_empty() {
        return f64::NAN;
    }
    v.sort_by(f64::total_cmp);
    v[v.len() / 2]
}

/// Applies the unexplained test to every unmixed pixel.
pub fn screen(out: &UnmixOutput) -> Screened {
    let noise_level = median(
        out.unmixed
            .indexed_iter()
            .filter(|(_, ok)| **ok)
            .map(|((r, c), _)| out.rmse[(r, c)] as f64)
            .collect(),
    );
    let threshold = UNEXPLAINED_FACTOR * noise_level;
    let mut explained = Vec::new();
    let mut unexplained = Vec::new();
    for ((r, c), ok) in out.unmixed.indexed_iter() {
        if !*ok {
            continue;
        }
        if out.rmse[(r, c)] as f64 > threshold {
            unexplained.push((r, c));
        } else {
            explained.push((r, c));
        }
    }
    Screened {
        noise_level,
        threshold,
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
    threshold: f64,
}

impl<'a> Features<'a> {
    pub fn new(out: &'a UnmixOutput, p: &UnitParams, threshold: f64) -> Features<'a> {
        Features {
            out,
            materials: (0..out.ids.len())
                .filter(|&j| out.ids[j] != "shade")
                .collect(),
            shade: out.ids.iter().position(|i| i == "shade"),
            albedo: p.albedo,
            rmse: p.rmse,
            threshold,
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
            x[k] = out.rmse[(r, c)] as f64 / self.threshold;
        }
    }
}
