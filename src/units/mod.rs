//! Surface units: abundance vectors grouped into units with k-means, pixels the library
//! cannot explain set apart, specks below a minimum mapping unit merged away, each unit
//! named by rules and coloured like its material.
//!
//! - **Clustering**: see [`cluster`] (k-means by default; Gaussian mixture; DBSCAN).
//! - **Features**: each unmixed pixel's abundance vector, shade removed and renormalised
//!   (the planes `unmix` reports), unscaled: abundances share one unit (fraction of the
//!   pixel), so Euclidean distance weighs every member alike. Optionally the albedo,
//!   1 − shade fraction (0–1), and the fit RMSE divided by the unexplained threshold (0–1
//!   for the pixels clustered) join them, unweighted, on the same 0–1 footing.
//! - **Unexplained**: a pixel whose fit RMSE exceeds [`UNEXPLAINED_FACTOR`] times the
//!   noise level of the cube (the median fit RMSE of unmixed pixels, a robust estimate of
//!   the noise when most pixels fit) joins the class `unexplained` instead of a unit.
//! - **Colour**: each unit is drawn in the sRGB colour of its mean modelled spectrum
//!   (Σ mean abundance × library spectrum, rendered through the CIE 1931 observer under
//!   D65); where two units' colours lie within ΔE*ab < [`MIN_DELTA_E`], the later unit is
//!   made lighter or darker in steps until they differ. thiomap's own scheme.
//! - **Area**: with an emission-angle backplane, a pixel counts 1/cos(emission) (capped at
//!   80°) of surface; otherwise pixels count alike.
//!
//! No I/O and no printing here.

pub mod cluster;
pub mod kmeans;
pub mod regions;
pub mod rules;

use std::collections::BTreeMap;

use ndarray::Array2;

use crate::colour::{delta_e, srgb8_to_lab, ColourMatrix};
use crate::library::Library;
use crate::unmix::UnmixOutput;
pub use cluster::ClusterError;
pub use rules::Rules;

/// Fit RMSE above this many times the median marks a pixel unexplained.
pub const UNEXPLAINED_FACTOR: f64 = 5.0;
/// Unit colours closer than this (CIE 1976 ΔE*ab) are nudged apart.
pub const MIN_DELTA_E: f64 = 10.0;
/// Emission angles beyond this count as this in area weights, degrees.
pub const MAX_EMISSION_DEG: f64 = 80.0;
/// The default sample k-means is fitted on.
pub const DEFAULT_SAMPLE: usize = 20_000;
/// The largest K tried when choosing the number of units.
pub const DEFAULT_MAX_UNITS: usize = 10;

/// Checked parameters of the units stage.
#[derive(Debug, Clone, PartialEq)]
pub struct UnitParams {
    /// The number of units; `None` chooses it by silhouette.
    pub units: Option<usize>,
    pub max_units: usize,
    /// Pixels k-means is fitted on; `None` for every pixel.
    pub sample: Option<usize>,
    /// Regions smaller than this many pixels are merged away (1 = keep all).
    pub min_area: usize,
    pub seed: u64,
    pub method: cluster::Method,
    /// Add the albedo (1 − shade fraction, 0–1) to the features.
    pub albedo: bool,
    /// Add the fit RMSE, divided by the unexplained threshold (0–1 for explained pixels).
    pub rmse: bool,
}

impl Default for UnitParams {
    fn default() -> Self {
        UnitParams {
            units: None,
            max_units: DEFAULT_MAX_UNITS,
            sample: Some(DEFAULT_SAMPLE),
            min_area: 4,
            seed: 1,
            method: cluster::Method::KMeans,
            albedo: false,
            rmse: false,
        }
    }
}

/// Why units could not be made.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum UnitsError {
    #[error(transparent)]
    Cluster(#[from] ClusterError),
    #[error("at least one unit is needed")]
    ZeroUnits,
    #[error("the minimum mapping unit is at least one pixel")]
    ZeroArea,
    #[error("the sample needs at least one pixel")]
    ZeroSample,
}

impl UnitParams {
    pub fn check(&self) -> Result<(), UnitsError> {
        if self.units == Some(0) {
            return Err(UnitsError::ZeroUnits);
        }
        if self.min_area == 0 {
            return Err(UnitsError::ZeroArea);
        }
        if self.sample == Some(0) {
            return Err(UnitsError::ZeroSample);
        }
        Ok(())
    }
}

/// One unit of the map.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Unit {
    /// 1…K in `units.fits`.
    pub unit: usize,
    pub label: String,
    pub class: String,
    pub pixels: usize,
    /// 0–1; surface-area weighted when the cube has an emission backplane.
    pub area_fraction: f64,
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
    /// The noise level the unexplained test used (median fit RMSE).
    pub noise_level: f64,
    pub regions_before: usize,
    pub regions_after: usize,
    /// Score per K tried, when K was chosen (silhouette for k-means, BIC for the mixture).
    pub scores: Vec<(usize, f64)>,
    pub area_weighted: bool,
    /// Area fraction per class id.
    pub classes: BTreeMap<String, f64>,
}

/// The reflectance spectrum of each material id (a member, or a group's mean) on a common
/// wavelength grid, for unit colours and plots.
pub struct MaterialSpectra {
    pub wavelength_um: Vec<f64>,
    pub spectra: Vec<Vec<f64>>,
}

impl MaterialSpectra {
    /// The spectra of `ids` (members or `+`-joined groups) from `library`, on the first
    /// member's wavelengths within the range every member covers.
    pub fn new(library: &Library, ids: &[String]) -> MaterialSpectra {
        let lo = library
            .members
            .iter()
            .map(|m| m.coverage_um().0)
            .fold(0.0, f64::max);
        let hi = library
            .members
            .iter()
            .map(|m| m.coverage_um().1)
            .fold(f64::INFINITY, f64::min);
        let grid: Vec<f64> = library.members[0]
            .wavelength_um
            .iter()
            .cloned()
            .filter(|w| *w >= lo && *w <= hi)
            .collect();
        let spectra = ids
            .iter()
            .map(|id| {
                let parts: Vec<_> = id
                    .split('+')
                    .filter_map(|p| library.members.iter().find(|m| m.id == p))
                    .collect();
                grid.iter()
                    .map(|&w| {
                        parts.iter().filter_map(|m| m.at(w)).sum::<f64>()
                            / parts.len().max(1) as f64
                    })
                    .collect()
            })
            .collect();
        MaterialSpectra {
            wavelength_um: grid,
            spectra,
        }
    }

    /// The linear mixture of the spectra with weights `a`.
    pub fn mix(&self, a: &[f64]) -> Vec<f64> {
        (0..self.wavelength_um.len())
            .map(|i| self.spectra.iter().zip(a).map(|(s, w)| s[i] * w).sum())
            .collect()
    }
}

fn median(mut v: Vec<f64>) -> f64 {
    if v.is_empty() {
        return f64::NAN;
    }
    v.sort_by(f64::total_cmp);
    v[v.len() / 2]
}

/// Groups the unmixed pixels of `out` into units.
pub fn classify(
    out: &UnmixOutput,
    emission_deg: Option<&Array2<f32>>,
    spectra: &MaterialSpectra,
    rules: &Rules,
    library: &Library,
    p: &UnitParams,
) -> Result<UnitMap, UnitsError> {
    p.check()?;
    let (rows, cols, _) = out.abundance.dim();
    let materials: Vec<usize> = (0..out.ids.len())
        .filter(|&j| out.ids[j] != "shade")
        .collect();
    let ids: Vec<String> = materials.iter().map(|&j| out.ids[j].clone()).collect();
    let nf = materials.len();

    let noise_level = median(
        out.unmixed
            .indexed_iter()
            .filter(|(_, ok)| **ok)
            .map(|((r, c), _)| out.rmse[(r, c)] as f64)
            .collect(),
    );
    let threshold = UNEXPLAINED_FACTOR * noise_level;
    let mut pixels: Vec<(usize, usize)> = Vec::new();
    let mut unexplained = Vec::new();
    for ((r, c), ok) in out.unmixed.indexed_iter() {
        if !*ok {
            continue;
        }
        if out.rmse[(r, c)] as f64 > threshold {
            unexplained.push((r, c));
        } else {
            pixels.push((r, c));
        }
    }
    // Only the sample is gathered into a matrix; every pixel is then assigned from the
    // abundance planes directly (no cube-sized feature copy).
    let n = pixels.len();
    let idx = cluster::sample_indices(n, p.sample.unwrap_or(n), p.seed);
    let shade = out.ids.iter().position(|i| i == "shade");
    let extra = p.albedo as usize + p.rmse as usize;
    let nx = nf + extra;
    // The feature vector of a pixel: abundances, then the optional albedo and RMSE.
    let feature = |r: usize, c: usize, x: &mut [f64]| {
        for (f, &j) in materials.iter().enumerate() {
            x[f] = out.abundance[(r, c, j)] as f64;
        }
        let mut k = nf;
        if p.albedo {
            x[k] = shade.map_or(1.0, |s| 1.0 - out.abundance[(r, c, s)] as f64);
            k += 1;
        }
        if p.rmse {
            x[k] = out.rmse[(r, c)] as f64 / threshold;
        }
    };
    let mut sample = Array2::<f64>::zeros((idx.len(), nx));
    for (i, mut row) in sample.outer_iter_mut().enumerate() {
        let (r, c) = pixels[idx[i]];
        feature(r, c, row.as_slice_mut().expect("rows are contiguous"));
    }
    let fitted = cluster::fit(&sample, p.method, p.units, p.max_units, p.seed)?;
    let assigned: Vec<usize> = {
        use rayon::prelude::*;
        pixels
            .par_iter()
            .map_init(
                || vec![0.0; nx],
                |x, &(r, c)| {
                    feature(r, c, x);
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
    for &(r, c) in &unexplained {
        labels[(r, c)] = unexplained_id;
    }
    let centroid_of = |l: i16| fitted.centroids.row(order[(l - 1) as usize]);
    let (regions_before, regions_after) =
        regions::merge_small(&mut labels, p.min_area, unexplained_id, |a, b| {
            centroid_of(a)
                .iter()
                .zip(centroid_of(b).iter())
                .map(|(x, y)| (x - y) * (x - y))
                .sum::<f64>()
        });

    // Statistics per unit (and for the unexplained pixels).
    let weight = |r: usize, c: usize| match emission_deg {
        Some(e) => {
            let deg = (e[(r, c)] as f64).clamp(0.0, MAX_EMISSION_DEG);
            1.0 / deg.to_radians().cos()
        }
        None => 1.0,
    };
    let total_area: f64 = out
        .unmixed
        .indexed_iter()
        .filter(|(_, ok)| **ok)
        .map(|((r, c), _)| weight(r, c))
        .sum();
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
        let members: Vec<(usize, usize)> = labels
            .indexed_iter()
            .filter(|(_, v)| **v == l)
            .map(|(rc, _)| rc)
            .collect();
        if members.is_empty() {
            continue;
        }
        let np = members.len() as f64;
        let mut mean = vec![0.0; nf];
        let mut sq = vec![0.0; nf];
        let (mut rmse, mut area) = (0.0, 0.0);
        for &(r, c) in &members {
            for (f, &j) in materials.iter().enumerate() {
                let v = out.abundance[(r, c, j)] as f64;
                mean[f] += v;
                sq[f] += v * v;
            }
            rmse += out.rmse[(r, c)] as f64;
            area += weight(r, c);
        }
        for f in 0..nf {
            mean[f] /= np;
            sq[f] = (sq[f] / np - mean[f] * mean[f]).max(0.0).sqrt();
        }
        let (class, label, colour) = if l == unexplained_id {
            (
                rules::UNEXPLAINED.to_string(),
                "unexplained by the library (fit far worse than the noise)".to_string(),
                [255, 0, 255],
            )
        } else {
            let (class, label) = rules.name(&ids, &mean, library);
            (class, label, matrix.srgb8(&spectra.mix(&mean)))
        };
        units.push(Unit {
            unit: l as usize,
            label,
            class,
            pixels: members.len(),
            area_fraction: if total_area > 0.0 {
                area / total_area
            } else {
                0.0
            },
            mean,
            std: sq,
            mean_rmse: rmse / np,
            colour,
        });
    }
    disambiguate_labels(&mut units, &ids);
    nudge_colours(&mut units);
    let mut classes = BTreeMap::new();
    for u in &units {
        *classes.entry(u.class.clone()).or_insert(0.0) += u.area_fraction;
    }
    Ok(UnitMap {
        ids,
        labels,
        units,
        unexplained_pixels: unexplained.len(),
        noise_level,
        regions_before,
        regions_after,
        scores: fitted.scores,
        area_weighted: emission_deg.is_some(),
        classes,
    })
}

/// Units that share a label get their two largest members added to it
/// ("…: basalt-dark 58 % / pyroxene-mafic 28 %"), so a legend never shows two identical names.
fn disambiguate_labels(units: &mut [Unit], ids: &[String]) {
    let labels: Vec<String> = units.iter().map(|u| u.label.clone()).collect();
    for u in units.iter_mut() {
        if u.class == rules::UNEXPLAINED || labels.iter().filter(|l| **l == u.label).count() < 2 {
            continue;
        }
        let mut order: Vec<usize> = (0..u.mean.len()).collect();
        order.sort_by(|&a, &b| u.mean[b].total_cmp(&u.mean[a]));
        let top: Vec<String> = order
            .iter()
            .take(2)
            .map(|&i| format!("{} {:.0} %", ids[i], 100.0 * u.mean[i]))
            .collect();
        u.label = format!("{}: {}", u.label, top.join(" / "));
    }
}

/// Makes each unit's colour differ by at least [`MIN_DELTA_E`] from the ones before it,
/// by scaling it darker or lighter in 12 % steps (alternating), at most eight times.
fn nudge_colours(units: &mut [Unit]) {
    for i in 1..units.len() {
        let original = units[i].colour;
        for step in 0..=8 {
            let factor = if step == 0 {
                1.0
            } else {
                let s = (step + 1) / 2;
                if step % 2 == 1 {
                    1.0 - 0.12 * s as f64
                } else {
                    1.0 + 0.12 * s as f64
                }
            };
            let candidate = original.map(|v| (v as f64 * factor).round().clamp(0.0, 255.0) as u8);
            let lab = srgb8_to_lab(candidate);
            if units[..i]
                .iter()
                .all(|u| delta_e(srgb8_to_lab(u.colour), lab) >= MIN_DELTA_E)
            {
                units[i].colour = candidate;
                break;
            }
        }
    }
}
