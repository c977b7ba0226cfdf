//! Surface units: abundance vectors grouped into units with k-means, pixels the library
//! cannot explain set apart, specks below a minimum mapping unit merged away, each unit
//! named by rules and coloured like its material.
//!
//! - [`params`]: the checked parameters and their errors.
//! - [`features`]: the pixels the unexplained test (a χ² test of the residual against the
//!   noise, [`crate::unmix::misfit`]) sets apart, and each pixel's feature vector
//!   (abundances; optionally the albedo and the misfit ratio).
//! - [`cluster`], [`kmeans`]: k-means by default; Gaussian mixture; DBSCAN.
//! - [`regions`]: the minimum mapping unit (8-connected regions merged away).
//! - [`stats`], [`area`]: per-unit statistics and the area each pixel stands for (the
//!   spherical cell its corners span, from the latitude and longitude backplanes).
//! - [`rules`], [`naming`]: names from composition; colours from the mean modelled
//!   spectrum (CIE 1931, D65), nudged apart below ΔE*ab [`MIN_DELTA_E`]; thiomap's own
//!   scheme.
//!
//! [`classify`] runs them in that order.
//!
//! No I/O and no printing here.

pub mod area;
pub mod cluster;
pub mod features;
pub mod kmeans;
pub mod naming;
pub mod params;
pub mod regions;
pub mod rules;
pub mod stats;

use std::collections::BTreeMap;

use ndarray::Array2;

use crate::colour::ColourMatrix;
use crate::library::Library;
use crate::unmix::UnmixOutput;
pub use cluster::ClusterError;
use features::Features;
pub use naming::MaterialSpectra;
pub use params::{UnitParams, UnitsError, DEFAULT_MAX_UNITS, DEFAULT_SAMPLE};
pub use rules::Rules;
use stats::AreaWeights;
pub use stats::{AreaBasis, Geometry};

/// Unit colours closer than this (CIE 1976 ΔE*ab) are nudged apart.
pub const MIN_DELTA_E: f64 = 10.0;
/// Emission angles beyond this count as this in area weights, degrees.
pub const MAX_EMISSION_DEG: f64 = 80.0;

/// One unit of the map.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Unit {
    /// 1…K in `units.fits`.
    pub unit: usize,
    pub label: String,
    pub class: String,
    pub pixels: usize,
    /// 0–1; surface-area weighted when the cube has the backplanes (see [`AreaBasis`]).
    pub area_fraction: f64,
    /// The unit's area in steradians of the body (× R² for km²), on the cell basis only.
    pub area_sr: Option<f64>,
    /// Mean and standard deviation of each material's abundance (ids as `unmix` reports).
    pub mean: Vec<f64>,
    pub std: Vec<f64>,
    pub mean_rmse: f64,
    /// sRGB, 8 bits per channel.
    pub colour: [u8; 3],
}

/// The unit map of a cube.
#[derive(Debug, Clone)]
pub struct UnitMap {
    /// Material ids the means refer to.
    pub ids: Vec<String>,
    /// 0 = no data, 1…K units, K + 1 unexplained (when any).
    pub labels: Array2<i16>,
    /// Units in label order; an unexplained entry last when any pixel is unexplained.
    pub units: Vec<Unit>,
    pub unexplained_pixels: usize,
    pub regions_before: usize,
    pub regions_after: usize,
    /// Score per K tried, when K was chosen (silhouette for k-means, BIC for the mixture).
    pub scores: Vec<(usize, f64)>,
    pub area_basis: AreaBasis,
    /// Unmixed pixels that count no area (no latitude or longitude on the cell basis).
    pub area_missing_pixels: usize,
    /// Area fraction per class id.
    pub classes: BTreeMap<String, f64>,
    /// Wall time of each step of [`classify`], seconds, in the order they ran.
    pub steps: Vec<(&'static str, f64)>,
}

/// Wall time per step (durations only: no I/O).
struct Clock {
    at: std::time::Instant,
    steps: Vec<(&'static str, f64)>,
}

impl Clock {
    fn start() -> Clock {
        Clock {
            at: std::time::Instant::now(),
            steps: Vec::new(),
        }
    }

    fn lap(&mut self, step: &'static str) {
        let now = std::time::Instant::now();
        self.steps.push((step, (now - self.at).as_secs_f64()));
        self.at = now;
    }
}

/// Groups the unmixed pixels of `out` into units.
pub fn classify(
    out: &UnmixOutput,
    geometry: Geometry,
    spectra: &MaterialSpectra,
    rules: &Rules,
    library: &Library,
    p: &UnitParams,
) -> Result<UnitMap, UnitsError> {
    p.check()?;
    let mut clock = Clock::start();
    let (rows, cols, _) = out.abundance.dim();
    let screened = features::screen(out);
    let features = Features::new(out, p);
    let ids: Vec<String> = features
        .materials
        .iter()
        .map(|&j| out.ids[j].clone())
        .collect();
    let (pixels, unexplained) = (&screened.explained, &screened.unexplained);
    // Only the sample is gathered into a matrix; every pixel is then assigned from the
    // abundance planes directly (no cube-sized feature copy).
    let n = pixels.len();
    let idx = cluster::sample_indices(n, p.sample.unwrap_or(n), p.seed);
    let nx = features.count();
    let mut sample = Array2::<f64>::zeros((idx.len(), nx));
    for (i, mut row) in sample.outer_iter_mut().enumerate() {
        let (r, c) = pixels[idx[i]];
        features.write(r, c, row.as_slice_mut().expect("rows are contiguous"));
    }
    clock.lap("screen and sample");
    let fitted = cluster::fit(&sample, p.method, p.units, p.max_units, p.seed)?;
    clock.lap(if p.units.is_some() {
        "fit"
    } else {
        "fit and choose K"
    });
    let assigned: Vec<usize> = {
        use rayon::prelude::*;
        pixels
            .par_iter()
            .map_init(
                || vec![0.0; nx],
                |x, &(r, c)| {
                    features.write(r, c, x);
                    fitted.unit_of(x)
                },
            )
            .collect()
    };

    // Units numbered by size, largest first, for stable and readable legends.
    let k = fitted.centroids.nrows();
    let mut sizes = vec![0usize; k];
    for &a in assigned.iter() {
        sizes[a] += 1;
    }
    let mut order: Vec<usize> = (0..k).collect();
    order.sort_by(|&a, &b| sizes[b].cmp(&sizes[a]).then(a.cmp(&b)));
    let mut rank = vec![0i16; k];
    for (new, &old) in order.iter().enumerate() {
        rank[old] = new as i16 + 1;
    }
    let unexplained_id = k as i16 + 1;
    let mut labels = Array2::<i16>::zeros((rows, cols));
    for (i, &(r, c)) in pixels.iter().enumerate() {
        labels[(r, c)] = rank[assigned[i]];
    }
    for &(r, c) in unexplained {
        labels[(r, c)] = unexplained_id;
    }
    clock.lap("assign");
    let centroid_of = |l: i16| fitted.centroids.row(order[(l - 1) as usize]);
    let (regions_before, regions_after) =
        regions::merge_small(&mut labels, p.min_area, unexplained_id, |a, b| {
            centroid_of(a)
                .iter()
                .zip(centroid_of(b).iter())
                .map(|(x, y)| (x - y) * (x - y))
                .sum::<f64>()
        });

    clock.lap("regions");
    // Statistics, names and colours per unit (and for the unexplained pixels).
    let area = AreaWeights::new(geometry);
    let total_area = area.total(out);
    clock.lap("areas");
    let matrix = ColourMatrix::for_wavelengths(&spectra.wavelength_um);
    let mut units: Vec<Unit> = Vec::new();
    let all_labels: Vec<i16> = (1..=k as i16)
        .chain(if unexplained.is_empty() {
            None
        } else {
            Some(unexplained_id)
        })
        .collect();
    for l in all_labels {
        let Some(s) = stats::unit_stats(out, &labels, l, &features.materials, &area) else {
            continue;
        };
        let (class, label, colour) = if l == unexplained_id {
            (
                rules::UNEXPLAINED.to_string(),
                format!(
                    "unexplained by the library (residual improbable under the noise, p < {})",
                    out.misfit.summary.false_alarm
                ),
                [255, 0, 255],
            )
        } else {
            let (class, label) = rules.name(&ids, &s.mean, library);
            (class, label, matrix.srgb8(&spectra.mix(&s.mean)))
        };
        units.push(Unit {
            unit: l as usize,
            label,
            class,
            pixels: s.pixels,
            area_fraction: if total_area > 0.0 {
                s.area / total_area
            } else {
                0.0
            },
            area_sr: (area.basis() == AreaBasis::Cells).then_some(s.area),
            mean: s.mean,
            std: s.std,
            mean_rmse: s.mean_rmse,
            colour,
        });
    }
    naming::disambiguate_labels(&mut units, &ids);
    naming::nudge_colours(&mut units);
    let mut classes = BTreeMap::new();
    for u in &units {
        *classes.entry(u.class.clone()).or_insert(0.0) += u.area_fraction;
    }
    clock.lap("statistics and names");
    Ok(UnitMap {
        steps: clock.steps,
        ids,
        labels,
        units,
        unexplained_pixels: unexplained.len(),
        regions_before,
        regions_after,
        scores: fitted.scores,
        area_basis: area.basis(),
        area_missing_pixels: area.missing(out),
        classes,
    })
}
