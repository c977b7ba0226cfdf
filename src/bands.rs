//! Band tables: each band's centre (µm) and spectral response, and the one TOML schema
//! shared by instrument band-set files, `.npy` sidecars and band-stack sidecars.
//!
//! A band table file is TOML with a `kind` key naming which of the three it is:
//!
//! ```toml
//! kind = "band-set"            # or "npy-sidecar", "band-stack"
//! name = "Example imager"      # optional, free text
//! quantity = "reflectance-factor"  # sidecars: what the samples are (see Quantity)
//!
//! [[band]]
//! centre_um = 0.45
//! fwhm_um = 0.02               # Gaussian response; leave out for point sampling
//!
//! [[band]]
//! centre_um = 0.55
//! response = { wavelength_um = [0.53, 0.55, 0.57], weight = [0.5, 1.0, 0.5] }
//! ```
//!
//! Band stacks add `file`, `scale` and `offset` to every band and `nodata` at the top;
//! see [`crate::cube::stack`]. Parsing is strict: unknown keys are errors, so a typo
//! never silently drops a setting.

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};

/// How one band weighs wavelengths.
#[derive(Debug, Clone, PartialEq)]
pub enum Response {
    /// No width known: the band samples the spectrum at its centre.
    Point,
    /// A Gaussian of this full width at half maximum, µm.
    Gaussian { fwhm_um: f64 },
    /// A tabulated response: wavelengths (µm, increasing) and relative weights (≥ 0).
    Tabulated {
        wavelength_um: Vec<f64>,
        weight: Vec<f64>,
    },
}

/// One band of a cube or an instrument.
#[derive(Debug, Clone, PartialEq)]
pub struct Band {
    pub centre_um: f64,
    pub response: Response,
}

impl Band {
    /// A band with a Gaussian response of this FWHM (µm).
    pub fn gaussian(centre_um: f64, fwhm_um: f64) -> Band {
        Band {
            centre_um,
            response: Response::Gaussian { fwhm_um },
        }
    }

    /// The full width at half maximum, µm: given for a Gaussian, measured on the table
    /// for a tabulated response (linear interpolation at half the peak), none for a point.
    pub fn fwhm_um(&self) -> Option<f64> {
        match &self.response {
            Response::Point => None,
            Response::Gaussian { fwhm_um } => Some(*fwhm_um),
            Response::Tabulated {
                wavelength_um,
                weight,
            } => tabulated_fwhm(wavelength_um, weight),
        }
    }
}

fn tabulated_fwhm(x: &[f64], w: &[f64]) -> Option<f64> {
    let peak = w.iter().cloned().fold(0.0, f64::max);
    if peak <= 0.0 {
        return None;
    }
    let half = peak / 2.0;
    let cross = |i: usize, j: usize| x[i] + (half - w[i]) * (x[j] - x[i]) / (w[j] - w[i]);
    let first = w.iter().position(|&v| v >= half)?;
    let last = w.iter().rposition(|&v| v >= half)?;
    let lo = if first == 0 {
        x[0]
    } else {
        cross(first - 1, first)
    };
    let hi = if last + 1 == w.len() {
        x[last]
    } else {
        cross(last, last + 1)
    };
    Some(hi - lo)
}

/// Why a band table is not acceptable.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum BandError {
    #[error("the band table is empty")]
    Empty,
    #[error("band {band}: centre {centre_um} µm is not a positive finite wavelength")]
    BadCentre { band: usize, centre_um: f64 },
    #[error(
        "band {band}: centre {centre_um} µm does not exceed the previous band's {previous_um} µm \
         (band centres must increase strictly)"
    )]
    NotIncreasing {
        band: usize,
        centre_um: f64,
        previous_um: f64,
    },
    #[error("band {band}: FWHM {fwhm_um} µm is not a positive finite width")]
    BadWidth { band: usize, fwhm_um: f64 },
    #[error("band {band}: tabulated response is malformed ({why})")]
    BadResponse { band: usize, why: String },
}

/// An ordered, validated list of bands (centres strictly increasing and positive).
#[derive(Debug, Clone, PartialEq)]
pub struct BandTable {
    bands: Vec<Band>,
    /// Each band's noise σ (in the samples' units, at the band's typical signal), when the
    /// file states it: the `noise_sigma` key of a band table, the `NOISE` column of a FITS
    /// band table. Unmixing weights bands by 1/σ.
    noise_sigma: Option<Vec<f64>>,
}

impl BandTable {
    /// `n` point-response bands at `first_um`, `first_um + step_um`, … (synthetic problems
    /// and tests).
    pub fn evenly_spaced(n: usize, first_um: f64, step_um: f64) -> Result<BandTable, BandError> {
        BandTable::new(
            (0..n)
                .map(|i| Band {
                    centre_um: first_um + step_um * i as f64,
                    response: Response::Point,
                })
                .collect(),
        )
    }

    /// Validates and wraps a list of bands. Band numbers in messages count from 1.
    pub fn new(bands: Vec<Band>) -> Result<BandTable, BandError> {
        if bands.is_empty() {
            return Err(BandError::Empty);
        }
        for (i, b) in bands.iter().enumerate() {
            let band = i + 1;
            if !(b.centre_um.is_finite() && b.centre_um > 0.0) {
                return Err(BandError::BadCentre {
                    band,
                    centre_um: b.centre_um,
                });
            }
            if i > 0 && b.centre_um <= bands[i - 1].centre_um {
                return Err(BandError::NotIncreasing {
                    band,
                    centre_um: b.centre_um,
                    previous_um: bands[i - 1].centre_um,
                });
            }
            match &b.response {
                Response::Point => {}
                Response::Gaussian { fwhm_um } => {
                    if !(fwhm_um.is_finite() && *fwhm_um > 0.0) {
                        return Err(BandError::BadWidth {
                            band,
                            fwhm_um: *fwhm_um,
                        });
                    }
                }
                Response::Tabulated {
                    wavelength_um,
                    weight,
                } => check_tabulated(wavelength_um, weight)
                    .map_err(|why| BandError::BadResponse { band, why })?,
            }
        }
        Ok(BandTable {
            bands,
            noise_sigma: None,
        })
    }

    /// The same bands with each band's noise σ; every σ must be positive and finite.
    pub fn with_noise_sigma(mut self, sigma: Vec<f64>) -> Result<BandTable, String> {
        if sigma.len() != self.bands.len() {
            return Err(format!(
                "{} noise values for {} bands",
                sigma.len(),
                self.bands.len()
            ));
        }
        if let Some(i) = sigma.iter().position(|v| !(v.is_finite() && *v > 0.0)) {
            return Err(format!(
                "band {}: noise_sigma {} is not a positive finite value",
                i + 1,
                sigma[i]
            ));
        }
        self.noise_sigma = Some(sigma);
        Ok(self)
    }

    /// Each band's noise σ, when stated.
    pub fn noise_sigma(&self) -> Option<&[f64]> {
        self.noise_sigma.as_deref()
    }

    pub fn len(&self) -> usize {
        self.bands.len()
    }

    pub fn is_empty(&self) -> bool {
        self.bands.is_empty()
    }

    pub fn bands(&self) -> &[Band] {
        &self.bands
    }

    pub fn centres_um(&self) -> Vec<f64> {
        self.bands.iter().map(|b| b.centre_um).collect()
    }

    /// The centres' common step when they are evenly spaced (to 1e-6 of the step) and
    /// there are at least two bands; `None` otherwise.
    pub fn regular_step_um(&self) -> Option<f64> {
        let c = self.centres_um();
        if c.len() < 2 {
            return None;
        }
        let step = (c[c.len() - 1] - c[0]) / (c.len() - 1) as f64;
        let regular = c
            .iter()
            .enumerate()
            .all(|(i, &x)| (x - (c[0] + step * i as f64)).abs() <= 1e-6 * step);
        regular.then_some(step)
    }

    /// The FWHM shared by every band (Gaussian responses of equal width), if any.
    pub fn uniform_fwhm_um(&self) -> Option<f64> {
        let first = match &self.bands[0].response {
            Response::Gaussian { fwhm_um } => *fwhm_um,
            _ => return None,
        };
        self.bands
            .iter()
            .all(|b| matches!(b.response, Response::Gaussian { fwhm_um } if fwhm_um == first))
            .then_some(first)
    }
}

/// One line for a TOML error: "line N: message".
pub fn toml_error_line(text: &str, e: &toml::de::Error) -> String {
    let message = e.message().trim_end().replace('\n', "; ");
    match e.span() {
        Some(span) => {
            let line = text[..span.start.min(text.len())].matches('\n').count() + 1;
            format!("line {line}: {message}")
        }
        None => message,
    }
}

fn check_tabulated(x: &[f64], w: &[f64]) -> Result<(), String> {
    if x.len() != w.len() {
        return Err(format!("{} wavelengths but {} weights", x.len(), w.len()));
    }
    if x.len() < 2 {
        return Err("fewer than two points".into());
    }
    if x.iter().any(|v| !v.is_finite() || *v <= 0.0) || x.windows(2).any(|p| p[1] <= p[0]) {
        return Err("wavelengths must be positive and strictly increasing".into());
    }
    if w.iter().any(|v| !v.is_finite() || *v < 0.0) || w.iter().all(|&v| v == 0.0) {
        return Err("weights must be finite, non-negative and not all zero".into());
    }
    Ok(())
}

/// What the samples of a cube are. Unmixing assumes reflectance factor.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "kebab-case")]
pub enum Quantity {
    /// Bidirectional reflectance factor (REFF).
    ReflectanceFactor,
    /// Radiance over solar irradiance, I/F.
    IOverF,
    /// Radiance factor (RADF).
    RadianceFactor,
    /// The file does not say.
    #[default]
    Undeclared,
}

impl Quantity {
    pub fn as_str(self) -> &'static str {
        match self {
            Quantity::ReflectanceFactor => "reflectance-factor",
            Quantity::IOverF => "i-over-f",
            Quantity::RadianceFactor => "radiance-factor",
            Quantity::Undeclared => "undeclared",
        }
    }

    pub fn parse(s: &str) -> Option<Quantity> {
        [
            Quantity::ReflectanceFactor,
            Quantity::IOverF,
            Quantity::RadianceFactor,
            Quantity::Undeclared,
        ]
        .into_iter()
        .find(|q| q.as_str().eq_ignore_ascii_case(s.trim()))
    }
}

/// Which kind of band-table file this is.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum TableKind {
    /// An instrument's bands, with no data attached.
    BandSet,
    /// The bands of a `.npy` cube of the same stem.
    NpySidecar,
    /// A stack of single-band images, one file per band.
    BandStack,
}

impl TableKind {
    pub fn as_str(self) -> &'static str {
        match self {
            TableKind::BandSet => "band-set",
            TableKind::NpySidecar => "npy-sidecar",
            TableKind::BandStack => "band-stack",
        }
    }
}

/// A tabulated response as written in a file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ResponseEntry {
    pub wavelength_um: Vec<f64>,
    pub weight: Vec<f64>,
}

/// One `[[band]]` entry of a band-table file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct BandEntry {
    pub centre_um: f64,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub fwhm_um: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub response: Option<ResponseEntry>,
    /// The band's noise σ in the samples' units (all bands or none).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub noise_sigma: Option<f64>,
    /// Band stacks only: the image file, relative to the sidecar.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub file: Option<String>,
    /// Band stacks only: reflectance = offset + scale × stored value.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub scale: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub offset: Option<f64>,
}

/// Free-form description of an observation.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct About {
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub target: Option<String>,
    /// Observation time, preferably ISO 8601 UTC.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub time: Option<String>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub instrument: Option<String>,
    /// Distance from the Sun at the observation, AU (FITS `SUNDIST`): scales the thermal
    /// emission a hot surface adds to I/F.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub sun_distance_au: Option<f64>,
    /// Anything else, kept as given.
    #[serde(default, skip_serializing_if = "BTreeMap::is_empty")]
    pub extra: BTreeMap<String, String>,
}

impl About {
    pub fn is_empty(&self) -> bool {
        self.target.is_none()
            && self.time.is_none()
            && self.instrument.is_none()
            && self.sun_distance_au.is_none()
            && self.extra.is_empty()
    }
}

/// A band-table file as written on disk.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct BandTableFile {
    pub kind: TableKind,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub name: Option<String>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub quantity: Option<Quantity>,
    /// Band stacks only: the stored value that marks no data.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub nodata: Option<f64>,
    #[serde(default, skip_serializing_if = "About::is_empty")]
    pub about: About,
    #[serde(rename = "band")]
    pub bands: Vec<BandEntry>,
}

impl BandTableFile {
    /// Parses TOML text; the error is one line naming the line number.
    pub fn parse(text: &str) -> Result<BandTableFile, String> {
        toml::from_str(text).map_err(|e| toml_error_line(text, &e))
    }

    /// The validated band table. Keys that belong to another kind are refused here.
    pub fn band_table(&self) -> Result<BandTable, String> {
        let mut bands = Vec::with_capacity(self.bands.len());
        for (i, e) in self.bands.iter().enumerate() {
            let n = i + 1;
            let is_stack = self.kind == TableKind::BandStack;
            if !is_stack && (e.file.is_some() || e.scale.is_some() || e.offset.is_some()) {
                return Err(format!(
                    "band {n}: `file`, `scale` and `offset` belong only in a band-stack file, \
                     this file is a {}",
                    self.kind.as_str()
                ));
            }
            if is_stack && e.file.is_none() {
                return Err(format!("band {n}: a band-stack band needs `file`"));
            }
            let response = match (&e.fwhm_um, &e.response) {
                (Some(_), Some(_)) => {
                    return Err(format!(
                        "band {n}: give either `fwhm_um` or `response`, not both"
                    ))
                }
                (Some(w), None) => Response::Gaussian { fwhm_um: *w },
                (None, Some(r)) => Response::Tabulated {
                    wavelength_um: r.wavelength_um.clone(),
                    weight: r.weight.clone(),
                },
                (None, None) => Response::Point,
            };
            bands.push(Band {
                centre_um: e.centre_um,
                response,
            });
        }
        let table = BandTable::new(bands).map_err(|e| e.to_string())?;
        let noise: Vec<f64> = self.bands.iter().filter_map(|e| e.noise_sigma).collect();
        match noise.len() {
            0 => Ok(table),
            n if n == self.bands.len() => table.with_noise_sigma(noise),
            n => Err(format!(
                "{n} of {} bands give `noise_sigma`: give it for every band or for none",
                self.bands.len()
            )),
        }
    }

    /// The file entries for a band table (for writing sidecars and band sets).
    pub fn entries(table: &BandTable) -> Vec<BandEntry> {
        table
            .bands()
            .iter()
            .enumerate()
            .map(|(i, b)| {
                let (fwhm_um, response) = match &b.response {
                    Response::Point => (None, None),
                    Response::Gaussian { fwhm_um } => (Some(*fwhm_um), None),
                    Response::Tabulated {
                        wavelength_um,
                        weight,
                    } => (
                        None,
                        Some(ResponseEntry {
                            wavelength_um: wavelength_um.clone(),
                            weight: weight.clone(),
                        }),
                    ),
                };
                BandEntry {
                    centre_um: b.centre_um,
                    fwhm_um,
                    response,
                    noise_sigma: table.noise_sigma().map(|s| s[i]),
                    file: None,
                    scale: None,
                    offset: None,
                }
            })
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn gaussian(centre_um: f64, fwhm_um: f64) -> Band {
        Band::gaussian(centre_um, fwhm_um)
    }

    #[test]
    fn centres_must_increase_strictly() {
        let err = BandTable::new(vec![gaussian(0.5, 0.01), gaussian(0.5, 0.01)]).unwrap_err();
        assert!(matches!(err, BandError::NotIncreasing { band: 2, .. }));
    }

    #[test]
    fn centres_must_be_positive() {
        let err = BandTable::new(vec![gaussian(0.0, 0.01), gaussian(0.5, 0.01)]).unwrap_err();
        assert!(matches!(err, BandError::BadCentre { band: 1, .. }));
        let err = BandTable::new(vec![gaussian(-0.4, 0.01)]).unwrap_err();
        assert!(matches!(err, BandError::BadCentre { .. }));
    }

    #[test]
    fn widths_must_be_positive() {
        let err = BandTable::new(vec![gaussian(0.5, 0.0)]).unwrap_err();
        assert!(matches!(err, BandError::BadWidth { band: 1, .. }));
    }

    #[test]
    fn regular_spacing_is_detected() {
        let t = BandTable::new(
            (0..5)
                .map(|i| gaussian(0.4 + 0.1 * i as f64, 0.02))
                .collect(),
        )
        .unwrap();
        assert!((t.regular_step_um().unwrap() - 0.1).abs() < 1e-12);
        assert_eq!(t.uniform_fwhm_um(), Some(0.02));
        let t = BandTable::new(vec![
            gaussian(0.4, 0.02),
            gaussian(0.5, 0.02),
            gaussian(0.7, 0.02),
        ])
        .unwrap();
        assert_eq!(t.regular_step_um(), None);
    }

    #[test]
    fn tabulated_fwhm_of_a_triangle_is_its_half_base() {
        // A triangle of base 2 peaks at 1 and is half as high 0.5 either side: FWHM 1.
        let w = tabulated_fwhm(&[0.0, 1.0, 2.0], &[0.0, 1.0, 0.0]).unwrap();
        assert!((w - 1.0).abs() < 1e-12);
    }

    #[test]
    fn a_band_set_parses_and_validates() {
        let text = r#"
kind = "band-set"
name = "test"
[[band]]
centre_um = 0.45
fwhm_um = 0.02
[[band]]
centre_um = 0.55
response = { wavelength_um = [0.53, 0.55, 0.57], weight = [0.5, 1.0, 0.5] }
"#;
        let f = BandTableFile::parse(text).unwrap();
        let t = f.band_table().unwrap();
        assert_eq!(t.len(), 2);
        assert_eq!(t.bands()[0].fwhm_um(), Some(0.02));
    }

    #[test]
    fn unknown_keys_and_misplaced_keys_are_refused() {
        let typo = "kind = \"band-set\"\n[[band]]\ncentre_um = 0.5\nfwhm = 0.01\n";
        assert!(BandTableFile::parse(typo).unwrap_err().contains("fwhm"));
        let misplaced = "kind = \"band-set\"\n[[band]]\ncentre_um = 0.5\nfile = \"a.png\"\n";
        let f = BandTableFile::parse(misplaced).unwrap();
        assert!(f.band_table().unwrap_err().contains("band-stack"));
    }
}
