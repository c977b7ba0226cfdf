//! Resampling library spectra to a cube's bands: each member's spectrum weighted by each
//! band's response — a Gaussian from the FWHM, the tabulated response when given, point
//! sampling at the centre when no width is known. The result is the endmember matrix E
//! (bands × members) that unmixing solves against; it is computed once per band set and
//! the library itself is never modified.
//!
//! Integration: the library spectrum is interpolated linearly and the weighted mean
//! ∫R(λ)w(λ)dλ / ∫w(λ)dλ is taken by the trapezoid rule on a fine uniform grid: ±3σ in
//! 121 steps for a Gaussian (the truncated tails hold 0.27 % of the weight and cancel in
//! the ratio for symmetric spectra), 400 steps over a tabulated response.
//! A band is covered when that whole support lies inside the member's wavelengths.

use ndarray::Array2;

use super::{interpolate, starter::FWHM_PER_SIGMA, Class, Endmember, Library};
use crate::bands::{Band, BandTable, Response};

/// The library resampled to a band set.
#[derive(Debug, Clone, PartialEq)]
pub struct Resampled {
    pub ids: Vec<String>,
    pub classes: Vec<Class>,
    pub centres_um: Vec<f64>,
    /// E: one row per band, one column per member.
    pub matrix: Array2<f64>,
}

/// A band the library does not cover.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error(
    "band {band} ({centre_um:.4} µm, response {lo_um:.4}–{hi_um:.4} µm) lies outside member \
     {member}'s coverage {cov_lo_um:.4}–{cov_hi_um:.4} µm; drop it with --range MIN-MAX or \
     --exclude-bands {band}"
)]
pub struct OutOfCoverage {
    pub band: usize,
    pub centre_um: f64,
    pub lo_um: f64,
    pub hi_um: f64,
    pub member: String,
    pub cov_lo_um: f64,
    pub cov_hi_um: f64,
}

/// Steps across a Gaussian's ±3σ support.
const GAUSS_STEPS: usize = 120;
/// Steps across a tabulated response.
const TABLE_STEPS: usize = 400;

/// The wavelength range a band's response needs, µm.
pub fn support_um(band: &Band) -> (f64, f64) {
    match &band.response {
        Response::Point => (band.centre_um, band.centre_um),
        Response::Gaussian { fwhm_um } => {
            let half = 3.0 * fwhm_um / FWHM_PER_SIGMA;
            (band.centre_um - half, band.centre_um + half)
        }
        Response::Tabulated {
            wavelength_um,
            weight,
        } => {
            let first = weight.iter().position(|&w| w > 0.0).unwrap_or(0);
            let last = weight
                .iter()
                .rposition(|&w| w > 0.0)
                .unwrap_or(weight.len() - 1);
            // Include the zero-weight neighbours: the response ramps from them.
            (
                wavelength_um[first.saturating_sub(1)],
                wavelength_um[(last + 1).min(wavelength_um.len() - 1)],
            )
        }
    }
}

/// A spectrum's band-averaged value; `None` when the band's support leaves `x`.
pub fn band_value(x: &[f64], y: &[f64], band: &Band) -> Option<f64> {
    let (lo, hi) = support_um(band);
    if lo < x[0] || hi > x[x.len() - 1] {
        return None;
    }
    match &band.response {
        Response::Point => interpolate(x, y, band.centre_um),
        Response::Gaussian { fwhm_um } => {
            let sigma = fwhm_um / FWHM_PER_SIGMA;
            weighted_mean(x, y, lo, hi, GAUSS_STEPS, |wl| {
                (-0.5 * ((wl - band.centre_um) / sigma).powi(2)).exp()
            })
        }
        Response::Tabulated {
            wavelength_um,
            weight,
        } => weighted_mean(x, y, lo, hi, TABLE_STEPS, |wl| {
            interpolate(wavelength_um, weight, wl).unwrap_or(0.0)
        }),
    }
}

fn weighted_mean(
    x: &[f64],
    y: &[f64],
    lo: f64,
    hi: f64,
    steps: usize,
    weight: impl Fn(f64) -> f64,
) -> Option<f64> {
    let (mut num, mut den) = (0.0, 0.0);
    for i in 0..=steps {
        let wl = lo + (hi - lo) * i as f64 / steps as f64;
        let end = if i == 0 || i == steps { 0.5 } else { 1.0 };
        let w = weight(wl) * end;
        num += w * interpolate(x, y, wl)?;
        den += w;
    }
    (den > 0.0).then(|| num / den)
}

fn member_value(m: &Endmember, band: &Band, index: usize) -> Result<f64, OutOfCoverage> {
    band_value(&m.wavelength_um, &m.reflectance, band).ok_or_else(|| {
        let (lo_um, hi_um) = support_um(band);
        let (cov_lo_um, cov_hi_um) = m.coverage_um();
        OutOfCoverage {
            band: index + 1,
            centre_um: band.centre_um,
            lo_um,
            hi_um,
            member: m.id.clone(),
            cov_lo_um,
            cov_hi_um,
        }
    })
}

/// Resamples every member to every band: E (bands × members).
pub fn resample(library: &Library, bands: &BandTable) -> Result<Resampled, OutOfCoverage> {
    let (nb, nm) = (bands.len(), library.members.len());
    let mut matrix = Array2::<f64>::zeros((nb, nm));
    for (j, m) in library.members.iter().enumerate() {
        for (i, band) in bands.bands().iter().enumerate() {
            matrix[(i, j)] = member_value(m, band, i)?;
        }
    }
    Ok(Resampled {
        ids: library.members.iter().map(|m| m.id.clone()).collect(),
        classes: library.members.iter().map(|m| m.class).collect(),
        centres_um: bands.centres_um(),
        matrix,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn gaussian(centre_um: f64, fwhm_um: f64) -> Band {
        Band::gaussian(centre_um, fwhm_um)
    }

    #[test]
    fn a_symmetric_response_on_a_linear_spectrum_returns_the_centre_value() {
        // Common practice: the mean of a linear function under a symmetric weight is its
        // value at the centre.
        let x: Vec<f64> = (0..=100).map(|i| 0.3 + 0.01 * i as f64).collect();
        let y: Vec<f64> = x.iter().map(|w| 0.1 + 0.4 * w).collect();
        for band in [
            gaussian(0.7, 0.05),
            gaussian(0.9, 0.13),
            Band {
                centre_um: 0.8,
                response: Response::Tabulated {
                    wavelength_um: vec![0.75, 0.8, 0.85],
                    weight: vec![0.0, 1.0, 0.0],
                },
            },
            Band {
                centre_um: 0.555,
                response: Response::Point,
            },
        ] {
            let v = band_value(&x, &y, &band).unwrap();
            let expected = 0.1 + 0.4 * band.centre_um;
            assert!((v - expected).abs() < 1e-12, "{band:?}: {v} vs {expected}");
        }
    }

    #[test]
    fn a_narrow_gaussian_band_sees_an_absorption_shallower_than_its_core() {
        // A band as wide as the absorption averages over its wings.
        let x: Vec<f64> = (0..=1000).map(|i| 0.5 + 0.001 * i as f64).collect();
        let y: Vec<f64> = x
            .iter()
            .map(|w| 1.0 - 0.5 * (-0.5 * ((w - 1.0) / 0.02f64).powi(2)).exp())
            .collect();
        let v = band_value(&x, &y, &gaussian(1.0, 0.047)).unwrap();
        assert!(v > 0.5 && v < 1.0);
        // Two Gaussians convolve to σ² = σ1² + σ2²: depth 0.5 σ1/√(σ1² + σ2²).
        let s2 = 0.047 / FWHM_PER_SIGMA;
        let expected = 1.0 - 0.5 * 0.02 / (0.02f64.powi(2) + s2.powi(2)).sqrt();
        assert!((v - expected).abs() < 2e-3, "{v} vs {expected}");
    }

    #[test]
    fn a_band_outside_the_coverage_is_refused() {
        let x = vec![0.3, 1.0];
        let y = vec![0.5, 0.5];
        assert!(band_value(&x, &y, &gaussian(0.31, 0.05)).is_none());
        assert!(band_value(&x, &y, &gaussian(0.5, 0.05)).is_some());
    }
}
