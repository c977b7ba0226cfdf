//! Per-unit statistics and the area each pixel stands for.
//!
//! - **Area**: with latitude and longitude backplanes, a pixel counts the spherical cell
//!   its corners span ([`super::area`]: right for globes and map projections alike); with
//!   only an emission-angle backplane, 1/cos(emission) (capped at [`MAX_EMISSION_DEG`]),
//!   which holds for an orthographic image of a globe only; otherwise pixels count alike.
//! - **Statistics**: per unit, the mean and standard deviation of each material's
//!   abundance, the mean fit RMSE, the pixel count and the area.

use ndarray::Array2;

use super::MAX_EMISSION_DEG;
use crate::unmix::UnmixOutput;

/// The geometry backplanes the area weights may use (degrees).
#[derive(Debug, Clone, Copy, Default)]
pub struct Geometry<'a> {
    pub latitude: Option<&'a Array2<f32>>,
    pub longitude: Option<&'a Array2<f32>>,
    pub emission: Option<&'a Array2<f32>>,
}

/// What a pixel's area comes from.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum AreaBasis {
    /// The spherical cell its corners span ([`super::area`]), from latitude and longitude.
    Cells,
    /// 1/cos(emission): the pixel area of an orthographic image of a globe, only.
    Emission,
    /// Every pixel alike.
    Pixels,
}

impl AreaBasis {
    /// How `summary.json` states it.
    pub fn describe(self) -> &'static str {
        match self {
            AreaBasis::Cells => {
                "surface area: the spherical cell of each pixel, from the latitude and \
                 longitude backplanes"
            }
            AreaBasis::Emission => "surface area: 1/cos(emission), emission capped at 80°",
            AreaBasis::Pixels => "pixels",
        }
    }
}

/// The surface area a pixel stands for: steradians of the body (cells), or relative to a
/// pixel seen face-on (emission), or 1 (pixels). The basis follows from which planes it
/// holds: cells when latitude and longitude span them, else the emission plane, else none.
pub struct AreaWeights<'a> {
    cells: Option<Array2<f64>>,
    emission_deg: Option<&'a Array2<f32>>,
}

impl<'a> AreaWeights<'a> {
    pub fn new(geometry: Geometry<'a>) -> AreaWeights<'a> {
        let cells = match (geometry.latitude, geometry.longitude) {
            (Some(lat), Some(lon)) => super::area::cell_areas_sr(lat.view(), lon.view()),
            _ => None,
        };
        AreaWeights {
            cells,
            emission_deg: geometry.emission,
        }
    }

    pub fn basis(&self) -> AreaBasis {
        match (&self.cells, self.emission_deg) {
            (Some(_), _) => AreaBasis::Cells,
            (None, Some(_)) => AreaBasis::Emission,
            (None, None) => AreaBasis::Pixels,
        }
    }

    /// Pixel (r, c)'s area; 0 for a pixel that has data but no latitude or longitude.
    pub fn of(&self, r: usize, c: usize) -> f64 {
        match (&self.cells, self.emission_deg) {
            (Some(a), _) => {
                let v = a[(r, c)];
                if v.is_finite() {
                    v
                } else {
                    0.0
                }
            }
            (None, Some(e)) => {
                let deg = (e[(r, c)] as f64).clamp(0.0, MAX_EMISSION_DEG);
                1.0 / deg.to_radians().cos()
            }
            (None, None) => 1.0,
        }
    }

    /// Unmixed pixels that count no area (on a cell basis: no latitude or longitude).
    pub fn missing(&self, out: &UnmixOutput) -> usize {
        match &self.cells {
            Some(a) => out
                .unmixed
                .indexed_iter()
                .filter(|((r, c), ok)| **ok && !a[(*r, *c)].is_finite())
                .count(),
            _ => 0,
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
