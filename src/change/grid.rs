//! The common grid of two epochs.
//!
//! - **Same grid**: the same shape and spatial WCS, and — when both carry latitude and
//!   longitude backplanes — the same latitude and longitude at every pixel within
//!   [`SAME_GRID_DEG`]: then the epochs are compared pixel for pixel.
//! - **Latitude/longitude grid** otherwise: cells of a stated size over the overlap of
//!   the two epochs' latitude and longitude ranges (longitudes taken relative to the later
//!   epoch's central longitude, so a view across the ±180° meridian stays whole; a view
//!   spanning more than 180° of longitude is not supported). Row 0 is the southernmost
//!   row. Each epoch is sampled at every cell centre:
//!   1. the nearest pixel centre (a bucket index on latitude and longitude);
//!   2. the fractional pixel position by Newton steps on the local Jacobian of (east,
//!      north) with respect to (column, row), from neighbouring centres (at most 4 steps;
//!      a position more than one pixel outside the image, or a step that does not
//!      converge, leaves the cell uncovered);
//!   3. bilinear weights wₖ over the four surrounding pixels, all of which must have data:
//!      abundances Σ wₖ fₖ, variances Σ wₖ² σₖ², covariances Σ wₖ² Cₖ (neighbouring pixels'
//!      errors taken as independent), geometry and true colour bilinear too; units, the
//!      unexplained flag and hot pixels from the nearest pixel.
//!
//! No I/O and no printing here.

use std::collections::HashMap;

use ndarray::{Array2, Array3};

use super::{ChangeError, Epoch};
use crate::backplane::Backplane;

/// Two backplanes agree when every pixel's latitude and longitude differ by less than this.
pub const SAME_GRID_DEG: f32 = 1e-3;

/// The grid the comparison is made on.
#[derive(Debug, Clone, PartialEq)]
pub enum Grid {
    /// Both epochs' own pixels.
    Pixels { rows: usize, cols: usize },
    /// A latitude/longitude grid: cell (r, c) is centred on (lat0 + r·cell, lon0 + c·cell).
    LatLon {
        cell_deg: f64,
        lat0: f64,
        lon0: f64,
        rows: usize,
        cols: usize,
    },
}

impl Grid {
    pub fn dim(&self) -> (usize, usize) {
        match *self {
            Grid::Pixels { rows, cols } | Grid::LatLon { rows, cols, .. } => (rows, cols),
        }
    }
}

/// Whether the two epochs share a grid (module doc).
pub fn same_grid(a: &Epoch, b: &Epoch) -> bool {
    if a.units.dim() != b.units.dim() || a.wcs != b.wcs {
        return false;
    }
    for plane in [Backplane::Latitude, Backplane::Longitude] {
        if let (Some(x), Some(y)) = (a.geometry.get(&plane), b.geometry.get(&plane)) {
            let differ = x.iter().zip(y.iter()).any(|(p, q)| {
                p.is_finite() != q.is_finite()
                    || (p.is_finite() && wrap(p - q).abs() > SAME_GRID_DEG)
            });
            if differ {
                return false;
            }
        }
    }
    true
}

fn wrap(d: f32) -> f32 {
    (d + 180.0).rem_euclid(360.0) - 180.0
}

fn wrap64(d: f64) -> f64 {
    (d + 180.0).rem_euclid(360.0) - 180.0
}

fn lat_lon(e: &Epoch) -> Option<(&Array2<f32>, &Array2<f32>)> {
    Some((
        e.geometry.get(&Backplane::Latitude)?,
        e.geometry.get(&Backplane::Longitude)?,
    ))
}

/// The circular mean longitude of the pixels with data.
fn central_longitude(e: &Epoch) -> Option<f64> {
    let (_, lon) = lat_lon(e)?;
    let (mut s, mut c) = (0.0, 0.0);
    for v in lon.iter().filter(|v| v.is_finite()) {
        let r = (*v as f64).to_radians();
        s += r.sin();
        c += r.cos();
    }
    (s != 0.0 || c != 0.0).then(|| s.atan2(c).to_degrees())
}

/// The latitude/longitude grid of `cell_deg` over the overlap of the two epochs.
pub fn lat_lon_grid(a: &Epoch, b: &Epoch, cell_deg: Option<f64>) -> Result<Grid, ChangeError> {
    for e in [a, b] {
        if lat_lon(e).is_none() {
            return Err(ChangeError::NoGeometry(e.name.clone()));
        }
    }
    let cell_deg = match cell_deg {
        Some(c) => c,
        None => {
            let s = |e: &Epoch| {
                let (lat, lon) = lat_lon(e).expect("checked");
                spacing_deg(lat, lon)
            };
            (s(a).max(s(b)) * 100.0).round().max(1.0) / 100.0
        }
    };
    if !(cell_deg.is_finite() && cell_deg > 0.0 && cell_deg <= 30.0) {
        return Err(ChangeError::Cell(cell_deg));
    }
    let centre = central_longitude(b).ok_or_else(|| ChangeError::NoGeometry(b.name.clone()))?;
    let range = |e: &Epoch| {
        let (lat, lon) = lat_lon(e).expect("checked");
        let (mut la, mut lo) = ((f64::MAX, f64::MIN), (f64::MAX, f64::MIN));
        for (p, q) in lat.iter().zip(lon.iter()) {
            if p.is_finite() && q.is_finite() {
                let rel = wrap64(*q as f64 - centre);
                la = (la.0.min(*p as f64), la.1.max(*p as f64));
                lo = (lo.0.min(rel), lo.1.max(rel));
            }
        }
        (la, lo)
    };
    let ((la1, lo1), (la2, lo2)) = (range(a), range(b));
    let lat = (la1.0.max(la2.0), la1.1.min(la2.1));
    let lon = (lo1.0.max(lo2.0), lo1.1.min(lo2.1));
    if lat.0 >= lat.1 || lon.0 >= lon.1 {
        return Err(ChangeError::NoOverlap);
    }
    let rows = ((lat.1 - lat.0) / cell_deg).floor() as usize;
    let cols = ((lon.1 - lon.0) / cell_deg).floor() as usize;
    if rows == 0 || cols == 0 {
        return Err(ChangeError::NoOverlap);
    }
    if rows.saturating_mul(cols) > 25_000_000 {
        return Err(ChangeError::GridTooFine(cell_deg, rows, cols));
    }
    Ok(Grid::LatLon {
        cell_deg,
        lat0: lat.0 + cell_deg / 2.0,
        lon0: wrap64(centre + lon.0 + cell_deg / 2.0),
        rows,
        cols,
    })
}

/// The median distance (degrees of arc) between horizontally neighbouring pixel centres,
/// from a sample of rows.
pub fn spacing_deg(lat: &Array2<f32>, lon: &Array2<f32>) -> f64 {
    let (rows, cols) = lat.dim();
    let mut gaps = Vec::new();
    for r in (0..rows).step_by((rows / 16).max(1)) {
        for c in 1..cols {
            let (p0, p1) = (lat[(r, c - 1)] as f64, lat[(r, c)] as f64);
            let (q0, q1) = (lon[(r, c - 1)] as f64, lon[(r, c)] as f64);
            if p0.is_finite() && p1.is_finite() && q0.is_finite() && q1.is_finite() {
                let x = wrap64(q1 - q0) * p0.to_radians().cos();
                gaps.push((x * x + (p1 - p0).powi(2)).sqrt());
            }
        }
    }
    gaps.sort_by(f64::total_cmp);
    gaps.get(gaps.len() / 2).copied().unwrap_or(1.0)
}

/// A nearest-centre index over one epoch's pixels.
struct Locator<'a> {
    lat: &'a Array2<f32>,
    lon: &'a Array2<f32>,
    bucket_deg: f64,
    buckets: HashMap<(i64, i64), Vec<(usize, usize)>>,
}

impl<'a> Locator<'a> {
    fn new(lat: &'a Array2<f32>, lon: &'a Array2<f32>, cell_deg: f64) -> Locator<'a> {
        let spacing = spacing_deg(lat, lon);
        let bucket_deg = (4.0 * spacing).max(cell_deg).max(1e-6);
        let mut buckets: HashMap<(i64, i64), Vec<(usize, usize)>> = HashMap::new();
        for ((r, c), p) in lat.indexed_iter() {
            let q = lon[(r, c)];
            if p.is_finite() && q.is_finite() {
                buckets
                    .entry(Self::key(*p as f64, q as f64, bucket_deg))
                    .or_default()
                    .push((r, c));
            }
        }
        Locator {
            lat,
            lon,
            bucket_deg,
            buckets,
        }
    }

    fn key(lat: f64, lon: f64, b: f64) -> (i64, i64) {
        (
            (lat / b).floor() as i64,
            (lon.rem_euclid(360.0) / b).floor() as i64,
        )
    }

    fn nearest(&self, lat: f64, lon: f64) -> Option<(usize, usize)> {
        let (kr, kc) = Self::key(lat, lon, self.bucket_deg);
        let wrap_cols = (360.0 / self.bucket_deg).ceil() as i64;
        let mut best: Option<(f64, (usize, usize))> = None;
        for dr in -1..=1 {
            for dc in -1..=1 {
                let key = (kr + dr, (kc + dc).rem_euclid(wrap_cols.max(1)));
                for &(r, c) in self.buckets.get(&key).into_iter().flatten() {
                    let (p, q) = (self.lat[(r, c)] as f64, self.lon[(r, c)] as f64);
                    let x = wrap64(q - lon) * lat.to_radians().cos();
                    let d = x * x + (p - lat).powi(2);
                    if best.is_none_or(|b| d < b.0) {
                        best = Some((d, (r, c)));
                    }
                }
            }
        }
        best.map(|b| b.1)
    }

    /// (east, north) of pixel (r, c) relative to (lat, lon), degrees.
    fn offset(&self, r: usize, c: usize, lat: f64, lon: f64) -> Option<(f64, f64)> {
        let (p, q) = (self.lat[(r, c)] as f64, self.lon[(r, c)] as f64);
        (p.is_finite() && q.is_finite())
            .then(|| (wrap64(q - lon) * lat.to_radians().cos(), p - lat))
    }

    /// The fractional (row, col) of (lat, lon) in the image (module doc, step 2).
    fn locate(&self, lat: f64, lon: f64) -> Option<(f64, f64)> {
        let (rows, cols) = self.lat.dim();
        let (mut r, mut c) = self.nearest(lat, lon)?;
        let (mut fr, mut fc) = (r as f64, c as f64);
        for _ in 0..4 {
            let here = self.offset(r, c, lat, lon)?;
            let diff = |a: usize, b: usize, other: usize, along_rows: bool| {
                let at = |i: usize| {
                    if along_rows {
                        self.offset(i, other, lat, lon)
                    } else {
                        self.offset(other, i, lat, lon)
                    }
                };
                let (lo, hi) = (a.checked_sub(1), (a + 1 < b).then_some(a + 1));
                match (lo.and_then(at), hi.and_then(at)) {
                    (Some(l), Some(h)) => Some(((h.0 - l.0) / 2.0, (h.1 - l.1) / 2.0)),
                    (None, Some(h)) => Some((h.0 - here.0, h.1 - here.1)),
                    (Some(l), None) => Some((here.0 - l.0, here.1 - l.1)),
                    (None, None) => None,
                }
            };
            let d_col = diff(c, cols, r, false)?;
            let d_row = diff(r, rows, c, true)?;
            // Solve J (dc, dr) = −here, J = [d_col d_row] (columns).
            let det = d_col.0 * d_row.1 - d_row.0 * d_col.1;
            if det.abs() < 1e-18 {
                return None;
            }
            let (bx, by) = (-here.0, -here.1);
            let dc = (bx * d_row.1 - d_row.0 * by) / det;
            let dr = (d_col.0 * by - bx * d_col.1) / det;
            fr = r as f64 + dr;
            fc = c as f64 + dc;
            if fr < -1.0 || fc < -1.0 || fr > rows as f64 || fc > cols as f64 {
                return None;
            }
            let (nr, nc) = (
                fr.round().clamp(0.0, rows as f64 - 1.0) as usize,
                fc.round().clamp(0.0, cols as f64 - 1.0) as usize,
            );
            if dr.abs() < 0.5 && dc.abs() < 0.5 {
                return Some((fr, fc));
            }
            (r, c) = (nr, nc);
        }
        ((fr - r as f64).abs() <= 1.0 && (fc - c as f64).abs() <= 1.0).then_some((fr, fc))
    }
}

/// `e` sampled on a latitude/longitude grid (module doc). Cells the epoch does not
/// cover hold NaN (abundances) and 0 (units).
pub fn resample(e: &Epoch, grid: &Grid) -> Epoch {
    let Grid::LatLon {
        cell_deg,
        lat0,
        lon0,
        rows,
        cols,
    } = *grid
    else {
        return e.clone();
    };
    let (lat, lon) = lat_lon(e).expect("a latitude/longitude grid needs both planes");
    let locator = Locator::new(lat, lon, cell_deg);
    let (sr, sc) = e.units.dim();
    let m = e.ids.len();
    let ncov = e.covariance.as_ref().map_or(0, |c| c.dim().2);
    let mut out = Epoch {
        name: e.name.clone(),
        ids: e.ids.clone(),
        abundance: Array3::from_elem((rows, cols, m), f32::NAN),
        variance: Array3::from_elem((rows, cols, m), f32::NAN),
        covariance: e
            .covariance
            .as_ref()
            .map(|_| Array3::from_elem((rows, cols, ncov), f32::NAN)),
        covariance_kind: e.covariance_kind,
        noise: e
            .noise
            .as_ref()
            .map(|(g, _)| (g.clone(), Array2::from_elem((rows, cols), f32::NAN))),
        shade: e
            .shade
            .as_ref()
            .map(|_| Array2::from_elem((rows, cols), f32::NAN)),
        thermal: Array2::from_elem((rows, cols), false),
        unit_edge: Array2::from_elem((rows, cols), false),
        units: Array2::zeros((rows, cols)),
        unexplained: Array2::from_elem((rows, cols), false),
        hot: Array2::from_elem((rows, cols), false),
        geometry: Default::default(),
        wcs: Vec::new(),
        rgb: e.rgb.as_ref().map(|_| Array3::zeros((rows, cols, 3))),
    };
    let mut planes: Vec<(Backplane, Array2<f32>)> = Backplane::ALL
        .iter()
        .filter(|b| e.geometry.contains_key(b))
        .map(|b| (*b, Array2::from_elem((rows, cols), f32::NAN)))
        .collect();
    for gr in 0..rows {
        for gc in 0..cols {
            let (la, lo) = (
                lat0 + gr as f64 * cell_deg,
                wrap64(lon0 + gc as f64 * cell_deg),
            );
            let Some((fr, fc)) = locator.locate(la, lo) else {
                continue;
            };
            let (r0, c0) = (fr.floor().max(0.0) as usize, fc.floor().max(0.0) as usize);
            let (r0, c0) = (r0.min(sr.saturating_sub(2)), c0.min(sc.saturating_sub(2)));
            if sr < 2 || sc < 2 {
                continue;
            }
            let (tr, tc) = (
                (fr - r0 as f64).clamp(0.0, 1.0),
                (fc - c0 as f64).clamp(0.0, 1.0),
            );
            let corners = [
                (r0, c0, (1.0 - tr) * (1.0 - tc)),
                (r0, c0 + 1, (1.0 - tr) * tc),
                (r0 + 1, c0, tr * (1.0 - tc)),
                (r0 + 1, c0 + 1, tr * tc),
            ];
            let all_data = corners
                .iter()
                .all(|&(r, c, w)| w == 0.0 || e.abundance[(r, c, 0)].is_finite());
            if !all_data {
                continue;
            }
            let blend = |get: &dyn Fn(usize, usize) -> f32, square: bool| -> f32 {
                corners
                    .iter()
                    .filter(|k| k.2 > 0.0)
                    .map(|&(r, c, w)| if square { w * w } else { w } * get(r, c) as f64)
                    .sum::<f64>() as f32
            };
            for j in 0..m {
                out.abundance[(gr, gc, j)] = blend(&|r, c| e.abundance[(r, c, j)], false);
                out.variance[(gr, gc, j)] = blend(&|r, c| e.variance[(r, c, j)], true);
            }
            if let (Some(src), Some(dst)) = (&e.covariance, out.covariance.as_mut()) {
                for k in 0..ncov {
                    dst[(gr, gc, k)] = blend(&|r, c| src[(r, c, k)], true);
                }
            }
            if let (Some((_, src)), Some((_, dst))) = (&e.noise, out.noise.as_mut()) {
                dst[(gr, gc)] = blend(&|r, c| src[(r, c)].powi(2), true).sqrt();
            }
            if let (Some(src), Some(dst)) = (&e.shade, out.shade.as_mut()) {
                // Shade is a column like any other: a cell keeps it in its passive set
                // when any corner has it (the union over corners, like the materials).
                dst[(gr, gc)] = blend(&|r, c| src[(r, c)], false);
            }
            if let (Some(src), Some(dst)) = (&e.rgb, out.rgb.as_mut()) {
                for k in 0..3 {
                    dst[(gr, gc, k)] = blend(&|r, c| src[(r, c, k)], false);
                }
            }
            for (b, plane) in planes.iter_mut() {
                let src = &e.geometry[b];
                plane[(gr, gc)] = blend(&|r, c| src[(r, c)], false);
            }
            let (nr, nc) = (
                (fr.round().clamp(0.0, sr as f64 - 1.0)) as usize,
                (fc.round().clamp(0.0, sc as f64 - 1.0)) as usize,
            );
            out.units[(gr, gc)] = e.units[(nr, nc)];
            out.unexplained[(gr, gc)] = e.unexplained[(nr, nc)];
            out.hot[(gr, gc)] = e.hot[(nr, nc)];
            let first = e.units[(corners[0].0, corners[0].1)];
            out.unit_edge[(gr, gc)] = corners.iter().any(|&(r, c, _)| e.units[(r, c)] != first);
            out.thermal[(gr, gc)] = corners
                .iter()
                .any(|&(r, c, w)| w > 0.0 && e.thermal[(r, c)]);
        }
    }
    // The grid's own latitude and longitude replace the interpolated ones, in every cell
    // (so that cell areas come out whole).
    for (b, plane) in planes.iter_mut() {
        if matches!(b, Backplane::Latitude | Backplane::Longitude) {
            for ((gr, gc), v) in plane.indexed_iter_mut() {
                *v = if *b == Backplane::Latitude {
                    (lat0 + gr as f64 * cell_deg) as f32
                } else {
                    wrap64(lon0 + gc as f64 * cell_deg) as f32
                };
            }
        }
    }
    out.geometry = planes.into_iter().collect();
    out
}
