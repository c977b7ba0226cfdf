//! Per-unit statistics and the area each pixel stands for.
//!
//! - **Area**: with an emission-angle backplane, a pixel counts 1/cos(emission) (capped at
//!   [`MAX_EMISSION_DEG`]) of surface; otherwise pixels count alike.
//! - **Statistics**: per unit, the mean and standard deviation of each material's
//!   abundance, the mean fit RMSE, the pixel count and the area.

use ndarray::Array2;

use super::MAX_EMISSION_DEG;
use crate::unmix::UnmixOutput;

/// The surface area a pixel stands for, relative to a pixel seen face-on.
pub struct AreaWeights<'a> {
    emission_deg: Option<&'a Array2<f32>>,
}

impl<'a> AreaWeights<'a> {
    pub fn new(emission_deg: Option<&'a Array2<f32>>) -> AreaWeights<'a> {
        AreaWeights { emission_deg }
    }

    /// Whether pixels are weighted by area (else they count alike).
    pub fn weighted(&self) -> bool {
        self.emission_deg.is_some()
    }

    pub fn of(&self, r: usize, c: usize) -> f64 {
        match self.emission_deg {
            Some(e) => {
                let deg = (e[(r, c)] as f64).clamp(0.0, MAX_EMISSION_DEG);
                1.0 / deg.to_radians().cos()
            }
            None => 1.0,
        }
    }

    /// The area of every unmixed pixel together.
    pub fn total(&self, out: &UnmixOutput) -> f64 {
        out.unmixed
            .indexed_iter()
            .filter(|(_, ok)| **ok)
            .map(|((r, c), _)| self.of(r, c))
            .sum()
    }
}

/// The statistics of one unit's pixels.
pub struct UnitStats {
    pub pixels: usize,
    /// Per material: mean and standard deviation of the abundance.
    pub mean: Vec<f64>,
    pub std: Vec<f64>,
    pub mean_rmse: f64,
    pub area: f64,
}

/// The statistics of the pixels labelled `label` (`None` when it has none).
pub fn unit_stats(
    out: &UnmixOutput,
    labels: &Array2<i16>,
    label: i16,
    materials: &[usize],
    area: &AreaWeights,
) -> Option<UnitStats> {
    let members: Vec<(usize, usize)> = labels
        .indexed_iter()
        .filter(|(_, v)| **v == label)
        .map(|(rc, _)| rc)
        .collect();
    if members.is_empty() {
        return None;
    }
    let nf = materials.len();
    let np = members.len() as f64;
    let mut mean = vec![0.0; nf];
    let mut sq = vec![0.0; nf];
    let (mut rmse, mut total) = (0.0, 0.0);
    for &(r, c) in &members {
        for (f, &j) in materials.iter().enumerate() {
            let v = out.abundance[(r, c, j)] as f64;
            mean[f] += v;
            sq[f] += v * v;
        }
        rmse += out.rmse[(r, c)] as f64;
        total += area.of(r, c);
    }
    for f in 0..nf {
        mean[f] /= np;
        sq[f] = (sq[f] / np - mean[f] * mean[f]).max(0.0).sqrt();
    }
    Some(UnitStats {
        pixels: members.len(),
        mean,
        std: sq,
        mean_rmse: rmse / np,
        area: total,
    })
}
