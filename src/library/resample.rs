//! Resampling library spectra to a cube's bands: each member's spectrum weighted by each
//! band's response — a Gaussian from the FWHM, the tabulated response when given, point
//! sampling at the centre when no width is known — times the solar spectrum
//! ([`super::solar`]), because a band measures reflected sunlight:
//! ∫S F☉ R dλ / ∫S F☉ dλ. The result is the endmember matrix E
//! (bands × members) that unmixing solves against; it is computed once per band set and
//! the library itself is never modified.
//!
//! Integration: the library spectrum is interpolated linearly and the weighted mean
//! ∫R(λ)w(λ)dλ / ∫w(λ)dλ (w = S F☉) is taken by the trapezoid rule on a fine uniform grid
//! (steps of at most 0.25 nm, so the solar table's lines do not alias): ±3σ in at least
//! 121 steps for a Gaussian (the truncated tails hold 0.27 % of the weight and cancel in
//! the ratio for symmetric spectra), 400 steps over a tabulated response.
//! A band is covered when that whole support lies inside the member's wavelengths and the
//! solar table's.

use ndarray::Array2;

use super::{interpolate, solar::Sun, starter::FWHM_PER_SIGMA, Class, Endmember, Library};
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
    "band {band} ({centre_um:.4} µm, response {lo_um:.4}–{hi_um:.4} µm) lies outside \
     {member}'s coverage {cov_lo_um:.4}–{cov_hi_um:.4} µm; drop it with --range MIN-MAX or \
     --exclude-bands {band}"
)]
pub struct OutOfCoverage {
    pub band: usize,
    pub centre_um: f64,
    pub lo_um: f64,
    pub hi_um: f64,
    /// What the band leaves: `member ID` or `the solar spectrum ID`.
    pub member: String,
    pub cov_lo_um: f64,
    pub cov_hi_um: f64,
}

/// Least steps across a Gaussian's ±3σ support.
const GAUSS_STEPS: usize = 120;
/// Least steps across a tabulated response.
const TABLE_STEPS: usize = 400;
/// Largest step, µm: half the solar table's finest spacing (0.5 nm in the ultraviolet and
/// violet), so its line structure does not alias into the band value.
const MAX_STEP_UM: f64 = 0.00025;

fn steps_over(lo: f64, hi: f64, least: usize) -> usize {
    least.max(((hi - lo) / MAX_STEP_UM).ceil() as usize)
}

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

/// What a band's response is multiplied by before it weights a spectrum.
#[derive(Debug, Clone, Copy)]
pub enum Weighting<'a> {
    /// The response times the solar spectrum: what an instrument's band measures.
    Solar(&'a Sun),
    /// The response alone (band-averaged spectra, and the comparison in the tests).
    Flat,
}

impl Weighting<'_> {
    /// The weighting every resampling of reflected light uses: the shipped Sun.
    pub fn solar() -> Weighting<'static> {
        Weighting::Solar(Sun::embedded())
    }
}

/// A spectrum's band value under the response alone; `None` when the band's support
/// leaves `x`.
pub fn band_value(x: &[f64], y: &[f64], band: &Band) -> Option<f64> {
    band_value_under(x, y, band, Weighting::Flat)
}

/// A spectrum's band value under `weighting`; `None` when the band's support leaves `x`
/// or the solar table.
pub fn band_value_under(x: &[f64], y: &[f64], band: &Band, weighting: Weighting) -> Option<f64> {
    let (lo, hi) = support_um(band);
    if lo < x[0] || hi > x[x.len() - 1] {
        return None;
    }
    let sun = |wl: f64| match weighting {
        Weighting::Solar(sun) => sun.at(wl),
        Weighting::Flat => Some(1.0),
    };
    match &band.response {
        Response::Point => {
            sun(band.centre_um)?;
            interpolate(x, y, band.centre_um)
        }
        Response::Gaussian { fwhm_um } => {
            let sigma = fwhm_um / FWHM_PER_SIGMA;
            weighted_mean(x, y, lo, hi, steps_over(lo, hi, GAUSS_STEPS), |wl| {
                Some((-0.5 * ((wl - band.centre_um) / sigma).powi(2)).exp() * sun(wl)?)
            })
        }
        Response::Tabulated {
            wavelength_um,
            weight,
        } => weighted_mean(x, y, lo, hi, steps_over(lo, hi, TABLE_STEPS), |wl| {
            Some(interpolate(wavelength_um, weight, wl).unwrap_or(0.0) * sun(wl)?)
        }),
    }
}

/// The band's mean solar irradiance at 1 AU, ∫S F☉ dλ / ∫S dλ, W m⁻² µm⁻¹: what the
/// calibration of a band divides by. `None` when the band's support leaves the table.
pub fn band_irradiance(sun: &Sun, band: &Band) -> Option<f64> {
    band_value(&sun.wavelength_um, &sun.irradiance, band)
}

fn weighted_mean(
    x: &[f64],
    y: &[f64],
    lo: f64,
    hi: f64,
    steps: usize,
    weight: impl Fn(f64) -> Option<f64>,
) -> Option<f64> {
    let (mut num, mut den) = (0.0, 0.0);
    for i in 0..=steps {
        let wl = lo + (hi - lo) * i as f64 / steps as f64;
        let end = if i == 0 || i == steps { 0.5 } else { 1.0 };
        let w = weight(wl)? * end;
        num += w * interpolate(x, y, wl)?;
        den += w;
    }
    (den > 0.0).then(|| num / den)
}

fn member_value(
    m: &Endmember,
    band: &Band,
    index: usize,
    weighting: Weighting,
) -> Result<f64, OutOfCoverage> {
    band_value_under(&m.wavelength_um, &m.reflectance, band, weighting).ok_or_else(|| {
        let (lo_um, hi_um) = support_um(band);
        let (cov_lo_um, cov_hi_um) = m.coverage_um();
        let member_covers = lo_um >= cov_lo_um && hi_um <= cov_hi_um;
        match weighting {
            Weighting::Solar(sun) if member_covers => OutOfCoverage::solar(band, index, sun),
            _ => OutOfCoverage {
                band: index + 1,
                centre_um: band.centre_um,
                lo_um,
                hi_um,
                member: format!("member {}", m.id),
                cov_lo_um,
                cov_hi_um,
            },
        }
    })
}

impl OutOfCoverage {
    /// Band `index` (0-based) whose response leaves the solar table.
    pub fn solar(band: &Band, index: usize, sun: &Sun) -> OutOfCoverage {
        let (lo_um, hi_um) = support_um(band);
        let (cov_lo_um, cov_hi_um) = sun.coverage_um();
        OutOfCoverage {
            band: index + 1,
            centre_um: band.centre_um,
            lo_um,
            hi_um,
            member: format!("the solar spectrum {}", sun.id),
            cov_lo_um,
            cov_hi_um,
        }
    }
}

impl Resampled {
    /// The same matrix with each band's row multiplied by its weight (a weighted problem).
    pub fn weighted(&self, weights: &[f64]) -> Resampled {
        let mut out = self.clone();
        for (mut row, w) in out.matrix.rows_mut().into_iter().zip(weights) {
            row *= *w;
        }
        out
    }
}

/// Resamples every member to every band under the solar weighting: E (bands × members).
pub fn resample(library: &Library, bands: &BandTable) -> Result<Resampled, OutOfCoverage> {
    resample_under(library, bands, Weighting::solar())
}

/// Resamples every member to every band under `weighting`.
pub fn resample_under(
    library: &Library,
    bands: &BandTable,
    weighting: Weighting,
) -> Result<Resampled, OutOfCoverage> {
    let (nb, nm) = (bands.len(), library.members.len());
    let mut matrix = Array2::<f64>::zeros((nb, nm));
    for (j, m) in library.members.iter().enumerate() {
        for (i, band) in bands.bands().iter().enumerate() {
            matrix[(i, j)] = member_value(m, band, i, weighting)?;
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

    #[test]
    fn the_solar_weighting_cancels_on_a_flat_spectrum_and_tilts_a_sloped_one() {
        let x: Vec<f64> = (0..=400).map(|i| 0.3 + 0.001 * i as f64).collect();
        let flat = vec![0.4; x.len()];
        let band = gaussian(0.42, 0.09);
        let v = band_value_under(&x, &flat, &band, Weighting::solar()).unwrap();
        assert!((v - 0.4).abs() < 1e-12, "{v}");
        // The Sun rises steeply through the violet, so a spectrum rising with wavelength
        // reads higher under the solar weighting than under the response alone.
        let slope: Vec<f64> = x.iter().map(|w| w - 0.3).collect();
        let solar = band_value_under(&x, &slope, &band, Weighting::solar()).unwrap();
        let plain = band_value(&x, &slope, &band).unwrap();
        assert!(solar > plain + 1e-3, "{solar} vs {plain}");
    }

    #[test]
    fn the_solar_weighted_value_matches_a_fine_brute_force_integral() {
        // 0.25 nm steps against 60,000 steps on the same support: the solar table's
        // 0.5 nm structure in the violet must not alias.
        let sun = Sun::embedded();
        let m = Library::embedded();
        let s8 = m.members.iter().find(|m| m.id == "s8-alpha-room").unwrap();
        for (c, f) in [(0.405, 0.09), (0.45, 0.04), (0.56, 0.06), (3.5, 0.1)] {
            let band = gaussian(c, f);
            let v = band_value_under(
                &s8.wavelength_um,
                &s8.reflectance,
                &band,
                Weighting::Solar(sun),
            )
            .unwrap();
            let (lo, hi) = support_um(&band);
            let sigma = f / FWHM_PER_SIGMA;
            let (mut num, mut den) = (0.0, 0.0);
            for i in 0..=60_000 {
                let wl = lo + (hi - lo) * i as f64 / 60_000.0;
                let w = (-0.5 * ((wl - c) / sigma).powi(2)).exp() * sun.at(wl).unwrap();
                num += w * interpolate(&s8.wavelength_um, &s8.reflectance, wl).unwrap();
                den += w;
            }
            let fine = num / den;
            assert!((v - fine).abs() < 5e-4 * fine, "{c} µm: {v} vs {fine}");
        }
    }

    #[test]
    fn a_band_outside_the_solar_table_names_it() {
        let lib = Library::embedded();
        let bands = BandTable::new(vec![gaussian(0.27, 0.01)]).unwrap();
        let e = resample(&lib, &bands).unwrap_err();
        assert!(e.to_string().contains("solar spectrum"), "{e}");
    }
}
