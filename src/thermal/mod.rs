//! Thermal emission in I/F units: what a hot surface adds to a band of reflected light.
//!
//! A fraction f of a pixel at temperature T with emissivity ε adds to a band's I/F
//!
//!   f · π ε d² ∫S(λ) B_λ(T) dλ / ∫S(λ) F☉(λ) dλ,
//!
//! with S the band's response, B_λ Planck's spectral radiance, F☉ the solar spectral
//! irradiance at 1 AU (the shipped table, [`crate::library::solar`]) and d the Sun's
//! distance in AU: I/F is radiance over (F☉(1 AU)/d²)/π. The response alone weights both
//! integrals (the band's calibration divides by the Sun seen through it, not by the Sun
//! again). Pure arithmetic: no I/O.

pub mod fit;
pub mod plan;
pub mod spots;
pub mod stage;

use serde::{Deserialize, Serialize};

/// `--thermal`, recipe `thermal`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Mode {
    /// Never fit emission.
    Off,
    /// One temperature, where the cube has a band beyond 2.5 µm and the Sun's distance is
    /// known; otherwise off, with a note.
    #[default]
    Auto,
    /// One temperature; refused where the cube cannot support it.
    One,
    /// Two temperatures (Dozier 1981); refused where the cube cannot support it.
    Two,
}

impl Mode {
    pub fn parse(s: &str) -> Result<Mode, String> {
        match s {
            "off" => Ok(Mode::Off),
            "auto" => Ok(Mode::Auto),
            "one" => Ok(Mode::One),
            "two" => Ok(Mode::Two),
            other => Err(format!("\"{other}\": expected off, auto, one or two")),
        }
    }

    pub fn name(self) -> &'static str {
        match self {
            Mode::Off => "off",
            Mode::Auto => "auto",
            Mode::One => "one",
            Mode::Two => "two",
        }
    }
}

/// The default temperature range of the search, K.
pub const DEFAULT_RANGE_K: (f64, f64) = (300.0, 1800.0);
/// A cube needs a band centred beyond this wavelength for thermal fitting, µm.
pub const NEEDS_BAND_BEYOND_UM: f64 = 2.5;
/// Stefan–Boltzmann constant, W m⁻² K⁻⁴ (CODATA 2018).
pub const STEFAN_BOLTZMANN: f64 = 5.670_374_419e-8;

use crate::bands::Band;
use crate::library::resample::{band_value, support_um};
use crate::library::solar::Sun;

/// First radiation constant for spectral radiance, 2hc², in W m⁻² sr⁻¹ µm⁻¹ · µm⁵
/// (CODATA 2018: 1.191 042 972 × 10⁻¹⁶ W m² sr⁻¹).
pub const C1L_W_UM4: f64 = 1.191_042_972e8;
/// Second radiation constant hc/k, µm K (CODATA 2018).
pub const C2_UM_K: f64 = 14_387.768_775;

/// Planck's spectral radiance B_λ(T), W m⁻² sr⁻¹ µm⁻¹, λ in µm.
pub fn planck_radiance(wl_um: f64, t_k: f64) -> f64 {
    C1L_W_UM4 / wl_um.powi(5) / (C2_UM_K / (wl_um * t_k)).exp_m1()
}

/// Samples across a band's support for the Planck integral.
const STEPS: usize = 2000;

/// The I/F a unit area fraction (f = 1) at `t_k` adds to `band`: π ε d² ∫S B / ∫S F☉.
/// `None` when the band's support leaves the solar table.
pub fn band_iof(band: &Band, t_k: f64, sun_au: f64, emissivity: f64, sun: &Sun) -> Option<f64> {
    let radiance = band_radiance(band, t_k)?;
    let irradiance = crate::library::resample::band_irradiance(sun, band)?;
    Some(std::f64::consts::PI * emissivity * sun_au * sun_au * radiance / irradiance)
}

/// The band's response-weighted Planck radiance ∫S B_λ(T) / ∫S, W m⁻² sr⁻¹ µm⁻¹.
pub fn band_radiance(band: &Band, t_k: f64) -> Option<f64> {
    let (lo, hi) = support_um(band);
    let (lo, hi) = if hi > lo {
        (lo, hi)
    } else {
        (lo * (1.0 - 1e-6), hi * (1.0 + 1e-6))
    };
    let x: Vec<f64> = (0..=STEPS)
        .map(|i| lo + (hi - lo) * i as f64 / STEPS as f64)
        .collect();
    let y: Vec<f64> = x.iter().map(|&w| planck_radiance(w, t_k)).collect();
    band_value(&x, &y, band)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn planck_radiance_matches_a_hand_value_and_wien() {
        // B_λ(4 µm, 650 K) = c1L / λ⁵ / (e^{c2/λT} − 1) = 461.0 W m⁻² sr⁻¹ µm⁻¹ (worked by hand
        // from the CODATA constants).
        let b = planck_radiance(4.0, 650.0);
        assert!((b - 461.0).abs() < 0.5, "{b}");
        // Wien's displacement law, λ_max T = 2897.77 µm K (CODATA 2018).
        let t = 1000.0;
        let peak = (1..6000)
            .map(|i| 0.5 + 0.001 * i as f64)
            .max_by(|a, b| planck_radiance(*a, t).total_cmp(&planck_radiance(*b, t)))
            .unwrap();
        assert!((peak * t - 2897.77).abs() < 1.5, "{peak}");
        // Stefan–Boltzmann: π ∫B dλ = σT⁴, σ = 5.670374e-8 W m⁻² K⁻⁴ (CODATA 2018).
        let (mut sum, step) = (0.0, 0.001);
        for i in 1..200_000 {
            sum += planck_radiance(step * i as f64, t) * step;
        }
        let sigma_t4 = 5.670_374e-8 * t.powi(4);
        assert!((std::f64::consts::PI * sum / sigma_t4 - 1.0).abs() < 1e-3);
    }

    #[test]
    fn band_iof_scales_with_the_square_of_the_distance_and_the_emissivity() {
        let sun = Sun::embedded();
        let band = Band::gaussian(4.0, 0.1);
        let a = band_iof(&band, 650.0, 1.0, 1.0, sun).unwrap();
        let b = band_iof(&band, 650.0, 5.0, 0.9, sun).unwrap();
        assert!((b / a - 25.0 * 0.9).abs() < 1e-9);
        // Against the point values: π B(4 µm, 650 K) / F☉(4 µm), F☉ = 8.68 W m⁻² µm⁻¹ (ASTM
        // G173-03 at 4000 nm), ≈ 166.8 at 1 AU; a 0.1 µm band averages both, within 3 %.
        let point = std::f64::consts::PI * planck_radiance(4.0, 650.0) / 8.68;
        assert!((a / point - 1.0).abs() < 0.03, "{a} vs {point}");
    }
}
