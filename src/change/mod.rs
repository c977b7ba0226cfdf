//! What changed between two epochs of the same area: the numeric core of
//! `thiomap compare`.
//!
//! 1. **A common grid** ([`grid`]): pixel for pixel when the epochs share one, else a
//!    latitude/longitude grid over their overlap. Cells seen at emission above the stated
//!    limit in either epoch are left out and counted; so are, on a resampled grid, cells
//!    that straddle a unit boundary in either epoch (two views sample a sharp boundary
//!    differently, and the difference reads as change).
//! 2. **A test per cell** ([`test`]): χ² = Δfᵀ (C₁ + C₂)⁺ Δf on the rank of C (M − 1 for
//!    abundances that sum to one), its p-value, and Benjamini–Hochberg over every tested
//!    cell at the stated false-discovery rate; each member's z = Δf / √(σ₁² + σ₂²).
//! 3. **Regions** ([`regions`]): 8-connected regions of significant change, with their
//!    area, centroid, what changed and a sentence saying it; and regions where hot spots
//!    appeared or went out.
//!
//! What cancels and what does not: a library member that misfits the surface in the same
//! way in both epochs biases both abundances alike, and the difference cancels. What does
//! not cancel: a different view (phase, incidence and emission change how a misfit
//! spectrum is unmixed, and photometric normalisation is only as good as its law), a
//! different band set or recipe (refused: both epochs must unmix the same members), a
//! calibration drift between the epochs, and material outside the library that appears or
//! goes (it shows as change and as unexplained pixels).
//!
//! No I/O and no printing here.

pub mod grid;
pub mod regions;
pub mod test;

use std::collections::BTreeMap;

use nalgebra::DMatrix;
use ndarray::{Array2, Array3};
use rayon::prelude::*;

use crate::backplane::Backplane;
use crate::library::Class;
use crate::units::stats::{AreaBasis, AreaWeights, Geometry};
pub use grid::Grid;

/// One epoch, as read from a results folder: its materials' abundances (shade dropped)
/// and what the comparison needs besides.
#[derive(Debug, Clone)]
pub struct Epoch {
    /// What messages call it (the folder's name).
    pub name: String,
    /// Material plane ids (member or group ids), without shade.
    pub ids: Vec<String>,
    /// (row, col, material), NaN without data.
    pub abundance: Array3<f32>,
    /// σ² of each abundance.
    pub variance: Array3<f32>,
    /// The materials' covariance per pixel, upper triangle row by row (i ≤ j), when the
    /// result has `covariance.fits`.
    pub covariance: Option<Array3<f32>>,
    /// What the test will use for this epoch's covariance.
    pub covariance_kind: CovarianceKind,
    /// The model's Gram matrix and each pixel's σ / Σa (from `stderr.fits`), which give
    /// the covariance on any passive set.
    pub noise: Option<(Gram, Array2<f32>)>,
    /// The reported shade plane, when the model has shade.
    pub shade: Option<Array2<f32>>,
    /// Pixels refitted with a thermal term (their errors are the joint fit's).
    pub thermal: Array2<bool>,
    /// On a resampled grid: cells whose surrounding pixels belong to different units (a
    /// boundary the two views sample differently); false on an epoch's own pixels.
    pub unit_edge: Array2<bool>,
    /// Unit ids (0 = no data).
    pub units: Array2<i16>,
    /// The unexplained flag of `fit-flags.fits`.
    pub unexplained: Array2<bool>,
    /// Pixels fitted with a thermal term whose hot area is significant (f > 2σ).
    pub hot: Array2<bool>,
    /// Geometry backplanes, degrees.
    pub geometry: BTreeMap<Backplane, Array2<f32>>,
    /// The spatial WCS cards, formatted, in order.
    pub wcs: Vec<String>,
    /// The true-colour picture as (row, col, channel) 0–255 in internal row order.
    pub rgb: Option<Array3<f32>>,
}

/// A member as sentences name it.
#[derive(Debug, Clone)]
pub struct Member {
    pub id: String,
    pub name: String,
    pub class: Class,
}

/// Everything that decides a comparison.
#[derive(Debug, Clone, PartialEq)]
pub struct Params {
    /// Benjamini–Hochberg false-discovery rate.
    pub fdr: f64,
    /// Cells seen at a larger emission angle (degrees) in either epoch are left out.
    pub max_emission_deg: f64,
    /// The latitude/longitude cell size (degrees) when the epochs do not share a grid
    /// (default: the coarser epoch's median pixel spacing); `force_grid` uses such a grid
    /// even when they do.
    pub grid_deg: Option<f64>,
    pub force_grid: bool,
}

impl Default for Params {
    fn default() -> Self {
        Params {
            fdr: 0.01,
            max_emission_deg: 70.0,
            grid_deg: None,
            force_grid: false,
        }
    }
}

/// Why two epochs cannot be compared.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ChangeError {
    #[error("the two results unmix different members ({0} against {1}): map both epochs with one library and band selection")]
    Members(String, String),
    #[error("{0}: no latitude and longitude backplanes, which a latitude/longitude grid needs (the two results do not share a grid)")]
    NoGeometry(String),
    #[error("the two results do not overlap: their latitude and longitude ranges are disjoint, or no cell has data in both")]
    NoOverlap,
    #[error("--grid {0}: the cell size must lie in (0, 30] degrees")]
    Cell(f64),
    #[error("--grid {0}: {1} × {2} cells is too fine a grid (at most 25 million cells)")]
    GridTooFine(f64, usize, usize),
    #[error("--fdr {0}: the false-discovery rate must lie in (0, 1)")]
    Fdr(f64),
    #[error("--max-emission {0}: must lie in (0, 90] degrees")]
    Emission(f64),
}

/// A model's Gram matrix G = EᵀE over its columns (materials, then shade when used).
#[derive(Debug, Clone, PartialEq)]
pub struct Gram {
    pub g: ndarray::Array2<f64>,
    pub sum_to_one: bool,
    pub shade_column: bool,
}

/// What an epoch's per-pixel covariance is.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum CovarianceKind {
    /// The Cramér–Rao covariance on the union of the two epochs' passive sets (members
    /// non-zero in either), each epoch at its own noise level, from the model's Gram
    /// matrix and noise scale in `stderr.fits`. Under no change both estimates lie on that
    /// set, so a member that is zero in one epoch and not in the other (a near-twin
    /// trading abundance, or shade against a dark member) is judged by the spread the data
    /// allow between them, which the reported covariance — conditional on each pixel's own
    /// set, 0 for a member held at zero — does not describe. Thermally refitted pixels keep
    /// their reported errors.
    UnionSet,
    /// `covariance.fits`: the reported covariance, conditional on the active set.
    Reported,
    /// None: rebuilt from the standard errors ([`test::rebuilt_covariance`]).
    StandardErrors,
}

impl CovarianceKind {
    pub fn describe(self) -> &'static str {
        match self {
            CovarianceKind::UnionSet => {
                "the Cramér–Rao covariance on the union of the two epochs' active sets, each \
                 epoch at its own noise level (from stderr.fits: the model's Gram matrix and \
                 each pixel's noise scale); thermally refitted pixels keep their reported errors"
            }
            CovarianceKind::Reported => {
                "the reported per-pixel covariance (covariance.fits), conditional on each \
                 pixel's active set"
            }
            CovarianceKind::StandardErrors => {
                "rebuilt from the standard errors: C = P diag(σ²) P, P = I − 11ᵀ/M (the fit's \
                 correlations unknown)"
            }
        }
    }
}

/// The covariances of the two epochs, as used.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct CovarianceSource {
    pub earlier: CovarianceKind,
    pub later: CovarianceKind,
}

impl CovarianceSource {
    pub fn describe(self) -> String {
        if self.earlier == self.later {
            format!("both epochs: {}", self.earlier.describe())
        } else {
            format!(
                "earlier: {}; later: {}",
                self.earlier.describe(),
                self.later.describe()
            )
        }
    }
}

/// Cell counts of a comparison.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Counts {
    pub cells: usize,
    /// Cells with data in both epochs.
    pub both: usize,
    /// Of those, left out for emission above the limit in either epoch.
    pub emission_left_out: usize,
    /// Of those, left out on a resampled grid because they straddle a unit boundary in
    /// either epoch (each view samples a sharp boundary differently, which reads as change).
    pub edge_left_out: usize,
    pub tested: usize,
    pub significant: usize,
}

/// The result of comparing two epochs.
#[derive(Debug, Clone)]
pub struct Comparison {
    pub grid: Grid,
    pub ids: Vec<String>,
    pub members: Vec<Member>,
    /// Δf per material (later − earlier), NaN where not tested.
    pub delta: Array3<f32>,
    /// z per material: Δf over the square root of the used covariance's diagonal.
    pub z: Array3<f32>,
    pub chi2: Array2<f32>,
    /// Each tested cell's degrees of freedom (the rank of its C; 0 untested).
    pub dof_plane: Array2<u8>,
    pub p: Array2<f32>,
    pub significant: Array2<bool>,
    /// The degrees of freedom of most tested cells.
    pub dof: usize,
    pub covariance: CovarianceSource,
    pub counts: Counts,
    /// The largest p-value Benjamini–Hochberg rejected (0 when none).
    pub p_threshold: f64,
    pub from_units: Array2<i16>,
    pub to_units: Array2<i16>,
    /// +1 where a hot spot appeared, −1 where one went out, 0 elsewhere.
    pub hot_change: Array2<i8>,
    pub regions: Vec<regions::Region>,
    /// Each cell's region id (0 = none), composition regions only.
    pub region_map: Array2<u32>,
    /// The later epoch on the common grid (its geometry, units and true colour).
    pub later: Epoch,
    pub area_basis: AreaBasis,
    /// The significant area as a fraction of the tested area.
    pub significant_area_fraction: f64,
}

/// Compares `earlier` with `later`.
pub fn compare(
    earlier: &Epoch,
    later: &Epoch,
    members: &[Member],
    p: &Params,
) -> Result<Comparison, ChangeError> {
    if !(p.fdr > 0.0 && p.fdr < 1.0) {
        return Err(ChangeError::Fdr(p.fdr));
    }
    if !(p.max_emission_deg > 0.0 && p.max_emission_deg <= 90.0) {
        return Err(ChangeError::Emission(p.max_emission_deg));
    }
    if earlier.ids != later.ids {
        return Err(ChangeError::Members(
            earlier.ids.join(", "),
            later.ids.join(", "),
        ));
    }
    let (a, b, g) = if !p.force_grid && grid::same_grid(earlier, later) {
        let (rows, cols) = later.units.dim();
        (earlier.clone(), later.clone(), Grid::Pixels { rows, cols })
    } else {
        let g = grid::lat_lon_grid(earlier, later, p.grid_deg)?;
        (grid::resample(earlier, &g), grid::resample(later, &g), g)
    };
    let (rows, cols) = g.dim();
    let m = a.ids.len();
    let covariance = CovarianceSource {
        earlier: a.covariance_kind,
        later: b.covariance_kind,
    };

    // Which cells are tested.
    let mut counts = Counts {
        cells: rows * cols,
        ..Counts::default()
    };
    let emission = |e: &Epoch, r: usize, c: usize| {
        e.geometry
            .get(&Backplane::Emission)
            .map_or(0.0, |x| x[(r, c)])
    };
    let mut tested = Array2::from_elem((rows, cols), false);
    for r in 0..rows {
        for c in 0..cols {
            let has = |e: &Epoch| {
                (0..m).all(|j| {
                    e.abundance[(r, c, j)].is_finite() && e.variance[(r, c, j)].is_finite()
                })
            };
            if !(has(&a) && has(&b)) {
                continue;
            }
            counts.both += 1;
            let (ea, eb) = (emission(&a, r, c), emission(&b, r, c));
            if !(ea as f64 <= p.max_emission_deg && eb as f64 <= p.max_emission_deg) {
                counts.emission_left_out += 1;
                continue;
            }
            if a.unit_edge[(r, c)] || b.unit_edge[(r, c)] {
                counts.edge_left_out += 1;
                continue;
            }
            tested[(r, c)] = true;
        }
    }
    counts.tested = tested.iter().filter(|t| **t).count();
    if counts.tested == 0 {
        return Err(ChangeError::NoOverlap);
    }

    // The covariance factor of every union of passive sets that occurs, per epoch (each
    // epoch holds its own model's Gram matrix).
    type Factors = std::collections::HashMap<u32, Option<Vec<f64>>>;
    let factors = |e: &Epoch| -> Factors {
        let mut out = Factors::new();
        if let Some((gram, _)) = &e.noise {
            for ((r, c), t) in tested.indexed_iter() {
                if *t {
                    let mask = passive(&a, r, c) | passive(&b, r, c);
                    out.entry(mask)
                        .or_insert_with(|| test::set_covariance(gram, mask));
                }
            }
        }
        out
    };
    let (factors_a, factors_b) = (factors(&a), factors(&b));

    // The test per cell, in parallel by row (each cell's numbers depend on it alone).
    let per_row: Vec<Vec<CellTest>> = (0..rows)
        .into_par_iter()
        .map(|r| {
            (0..cols)
                .map(|c| {
                    if !tested[(r, c)] {
                        return (f64::NAN, 0, vec![f32::NAN; m], vec![f32::NAN; m]);
                    }
                    let delta: Vec<f64> = (0..m)
                        .map(|j| b.abundance[(r, c, j)] as f64 - a.abundance[(r, c, j)] as f64)
                        .collect();
                    let mask = passive(&a, r, c) | passive(&b, r, c);
                    let of = |e: &Epoch, factors: &Factors| {
                        if let (Some((gram, scale)), false) = (&e.noise, e.thermal[(r, c)]) {
                            if let Some(k) = factors.get(&mask).and_then(|k| k.as_ref()) {
                                return union_covariance(e, gram, k, scale[(r, c)] as f64, r, c);
                            }
                        }
                        match &e.covariance {
                            Some(cv) => upper_to_matrix(m, |k| cv[(r, c, k)] as f64),
                            None => test::rebuilt_covariance(
                                &(0..m)
                                    .map(|j| e.variance[(r, c, j)] as f64)
                                    .collect::<Vec<_>>(),
                            ),
                        }
                    };
                    let cov = of(&a, &factors_a) + of(&b, &factors_b);
                    let (chi2, dof) = test::chi_square(&delta, &cov);
                    let var: Vec<f32> = (0..m).map(|j| cov[(j, j)].max(0.0) as f32).collect();
                    (chi2, dof, delta.iter().map(|v| *v as f32).collect(), var)
                })
                .collect()
        })
        .collect();
    let mut delta = Array3::from_elem((rows, cols, m), f32::NAN);
    let mut z = Array3::from_elem((rows, cols, m), f32::NAN);
    let mut variance = Array3::from_elem((rows, cols, m), f32::NAN);
    let mut chi2 = Array2::from_elem((rows, cols), f32::NAN);
    let mut dof_plane = Array2::<u8>::zeros((rows, cols));
    let mut pv = vec![f64::NAN; rows * cols];
    let mut dof_count: BTreeMap<usize, usize> = BTreeMap::new();
    for (r, row) in per_row.into_iter().enumerate() {
        for (c, (x2, dof, d, vv)) in row.into_iter().enumerate() {
            if !tested[(r, c)] {
                continue;
            }
            chi2[(r, c)] = x2 as f32;
            dof_plane[(r, c)] = dof as u8;
            pv[r * cols + c] = test::p_value(x2, dof);
            *dof_count.entry(dof).or_default() += 1;
            for j in 0..m {
                delta[(r, c, j)] = d[j];
                variance[(r, c, j)] = vv[j];
                z[(r, c, j)] = d[j] / vv[j].sqrt();
            }
        }
    }
    let dof = dof_count
        .iter()
        .max_by_key(|(d, n)| (**n, **d))
        .map_or(0, |(d, _)| *d);
    let (rejected, p_threshold) = test::benjamini_hochberg(&pv, p.fdr);
    let significant = Array2::from_shape_fn((rows, cols), |(r, c)| rejected[r * cols + c]);
    counts.significant = significant.iter().filter(|s| **s).count();
    let p_plane = Array2::from_shape_fn((rows, cols), |(r, c)| pv[r * cols + c] as f32);

    let hot_change = Array2::from_shape_fn((rows, cols), |(r, c)| {
        let both = a.units[(r, c)] != 0 && b.units[(r, c)] != 0;
        match (a.hot[(r, c)], b.hot[(r, c)]) {
            (false, true) if both => 1,
            (true, false) if both => -1,
            _ => 0,
        }
    });
    let area = AreaWeights::new(Geometry {
        latitude: b.geometry.get(&Backplane::Latitude),
        longitude: b.geometry.get(&Backplane::Longitude),
        emission: b.geometry.get(&Backplane::Emission),
    });
    let total: f64 = tested
        .indexed_iter()
        .filter(|(_, t)| **t)
        .map(|((r, c), _)| area.of(r, c))
        .sum();
    let significant_area: f64 = significant
        .indexed_iter()
        .filter(|(_, s)| **s)
        .map(|((r, c), _)| area.of(r, c))
        .sum();
    let members: Vec<Member> = a
        .ids
        .iter()
        .map(|id| {
            members
                .iter()
                .find(|x| &x.id == id)
                .cloned()
                .unwrap_or_else(|| Member {
                    id: id.clone(),
                    name: id.clone(),
                    class: Class::Other,
                })
        })
        .collect();
    let found = regions::find(&regions::Inputs {
        earlier: &a,
        later: &b,
        members: &members,
        delta: &delta,
        variance: &variance,
        significant: &significant,
        hot_change: &hot_change,
        area: &area,
        total_area: total,
    });
    Ok(Comparison {
        grid: g,
        ids: a.ids.clone(),
        members,
        delta,
        z,
        chi2,
        dof_plane,
        p: p_plane,
        significant,
        dof,
        covariance,
        counts,
        p_threshold,
        from_units: a.units.clone(),
        to_units: b.units.clone(),
        hot_change,
        regions: found.regions,
        region_map: found.map,
        area_basis: area.basis(),
        // (An empty f64 sum is −0.0; a fraction of nothing is written as 0.)
        significant_area_fraction: if total > 0.0 && significant_area > 0.0 {
            significant_area / total
        } else {
            0.0
        },
        later: b,
    })
}

/// Pixel (r, c)'s passive set over the model's columns: the planes that are not zero
/// (materials, then shade).
fn passive(e: &Epoch, r: usize, c: usize) -> u32 {
    let mut mask = 0u32;
    for j in 0..e.ids.len() {
        if e.abundance[(r, c, j)] > 0.0 {
            mask |= 1 << j;
        }
    }
    if let Some(s) = &e.shade {
        if s[(r, c)] > 0.0 {
            mask |= 1 << e.ids.len();
        }
    }
    mask
}

/// The materials' covariance of epoch `e` at (r, c) on the passive set whose factor is
/// `k`: scale² · J K Jᵀ, the renormalisation of the README's delta method.
fn union_covariance(
    e: &Epoch,
    gram: &Gram,
    k: &[f64],
    scale: f64,
    r: usize,
    c: usize,
) -> DMatrix<f64> {
    let m = e.ids.len();
    let columns = gram.g.nrows();
    let f: Vec<f64> = (0..m).map(|j| e.abundance[(r, c, j)] as f64).collect();
    let shade = e.shade.as_ref().map(|s| s[(r, c)] as f64);
    let p = m + shade.is_some() as usize;
    let mut out = vec![0.0; p * p];
    crate::unmix::errors::reported_covariance(
        k,
        columns,
        gram.shade_column,
        &f,
        scale,
        shade,
        &mut out,
    );
    DMatrix::from_fn(m, m, |i, j| out[i * p + j])
}

/// One cell's test: χ², its degrees of freedom, Δf and the variance of each Δf.
type CellTest = (f64, usize, Vec<f32>, Vec<f32>);

/// An M × M symmetric matrix from its upper triangle, row by row (i ≤ j).
fn upper_to_matrix(m: usize, at: impl Fn(usize) -> f64) -> DMatrix<f64> {
    let mut out = DMatrix::zeros(m, m);
    let mut k = 0;
    for i in 0..m {
        for j in i..m {
            let v = at(k);
            out[(i, j)] = v;
            out[(j, i)] = v;
            k += 1;
        }
    }
    out
}

/// The significant cells of `c` on the pixels of epoch `e` (the later one): the cells
/// themselves on a shared grid; on a latitude/longitude grid, the cell each pixel's
/// centre falls in.
pub fn significant_on(c: &Comparison, e: &Epoch) -> Array2<bool> {
    let (rows, cols) = e.units.dim();
    match c.grid {
        Grid::Pixels { .. } => c.significant.clone(),
        Grid::LatLon {
            cell_deg,
            lat0,
            lon0,
            rows: gr,
            cols: gc,
        } => {
            let (Some(lat), Some(lon)) = (
                e.geometry.get(&Backplane::Latitude),
                e.geometry.get(&Backplane::Longitude),
            ) else {
                return Array2::from_elem((rows, cols), false);
            };
            Array2::from_shape_fn((rows, cols), |(r, col)| {
                let (la, lo) = (lat[(r, col)] as f64, lon[(r, col)] as f64);
                if !(la.is_finite() && lo.is_finite()) {
                    return false;
                }
                let i = ((la - lat0) / cell_deg).round();
                let d = (lo - lon0 + 180.0).rem_euclid(360.0) - 180.0;
                let j = (d / cell_deg).round();
                i >= 0.0
                    && j >= 0.0
                    && (i as usize) < gr
                    && (j as usize) < gc
                    && c.significant[(i as usize, j as usize)]
            })
        }
    }
}
