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

/// The thermal stage's results: its plan, the per-pixel planes and the hot-spot table.
#[derive(Debug, Clone)]
pub struct ThermalResult {
    pub plan: plan::Plan,
    pub output: stage::ThermalOutput,
    pub spots: Vec<spots::HotSpot>,
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

/// Samples across a tabulated band's support for the Planck integral.
const STEPS: usize = 400;

/// Gauss–Legendre nodes across a Gaussian band's ±3σ support for the Planck integral.
/// The integrand (the band's Gaussian times Planck's curve) is smooth: 32 nodes agree with
/// 400 trapezoids to 10⁻⁶ and with an independent integration to 3 × 10⁻⁵
/// (`tests/external/check_thermal.py`), at a twelfth of the Planck evaluations that the
/// thermal columns' table makes at every node temperature.
const GAUSS_NODES: usize = 32;

/// Gauss–Legendre nodes and weights on [−1, 1] by the Golub–Welsch method (Golub & Welsch
/// 1969, Math. Comp. 23:221, from memory): the nodes are the eigenvalues of the Jacobi
/// matrix of the Legendre recurrence, off-diagonal k/√(4k² − 1); the weights 2 v₀², v₀ the
/// first component of each unit eigenvector. nalgebra's symmetric eigensolver does the work.
fn gauss_legendre(n: usize) -> (Vec<f64>, Vec<f64>) {
    let mut j = nalgebra::DMatrix::<f64>::zeros(n, n);
    for k in 1..n {
        let b = k as f64 / (4.0 * (k * k) as f64 - 1.0).sqrt();
        j[(k - 1, k)] = b;
        j[(k, k - 1)] = b;
    }
    let eig = j.symmetric_eigen();
    let mut pairs: Vec<(f64, f64)> = (0..n)
        .map(|i| (eig.eigenvalues[i], 2.0 * eig.eigenvectors[(0, i)].powi(2)))
        .collect();
    pairs.sort_by(|a, b| a.0.total_cmp(&b.0));
    pairs.into_iter().unzip()
}

/// The I/F a unit area fraction (f = 1) at `t_k` adds to `band`: π ε d² ∫S B / ∫S F☉.
/// `None` when the band's support leaves the solar table.
pub fn band_iof(band: &Band, t_k: f64, sun_au: f64, emissivity: f64, sun: &Sun) -> Option<f64> {
    let radiance = band_radiance(band, t_k)?;
    let irradiance = crate::library::resample::band_irradiance(sun, band)?;
    Some(std::f64::consts::PI * emissivity * sun_au * sun_au * radiance / irradiance)
}

/// The band's response-weighted Planck radiance ∫S B_λ(T) / ∫S, W m⁻² sr⁻¹ µm⁻¹.
pub fn band_radiance(band: &Band, t_k: f64) -> Option<f64> {
    Quadrature::of(band).radiance(t_k)
}

/// A band's response as nodes and weights for the Planck integral, made once and used at
/// many temperatures (the thermal columns' table): a Gaussian by Gauss–Legendre
/// quadrature over its ±3σ support in [`GAUSS_NODES`] nodes, a point band at its centre;
/// a tabulated response goes through the general resampling at each temperature.
pub enum Quadrature<'a> {
    Nodes { wl: Vec<f64>, w: Vec<f64> },
    General(&'a Band),
}

impl<'a> Quadrature<'a> {
    pub fn of(band: &'a Band) -> Quadrature<'a> {
        use crate::bands::Response;
        match &band.response {
            Response::Point => Quadrature::Nodes {
                wl: vec![band.centre_um],
                w: vec![1.0],
            },
            Response::Gaussian { fwhm_um } => {
                let sigma = fwhm_um / (2.0 * (2.0 * std::f64::consts::LN_2).sqrt());
                let (lo, hi) = support_um(band);
                static RULE: std::sync::OnceLock<(Vec<f64>, Vec<f64>)> = std::sync::OnceLock::new();
                let (nodes, weights) = RULE.get_or_init(|| gauss_legendre(GAUSS_NODES));
                let wl: Vec<f64> = nodes
                    .iter()
                    .map(|x| 0.5 * (lo + hi) + 0.5 * (hi - lo) * x)
                    .collect();
                let mut w: Vec<f64> = wl
                    .iter()
                    .zip(weights)
                    .map(|(x, g)| g * (-0.5 * ((x - band.centre_um) / sigma).powi(2)).exp())
                    .collect();
                let s: f64 = w.iter().sum();
                w.iter_mut().for_each(|v| *v /= s);
                Quadrature::Nodes { wl, w }
            }
            Response::Tabulated { .. } => Quadrature::General(band),
        }
    }

    /// ∫S B_λ(T) / ∫S.
    pub fn radiance(&self, t_k: f64) -> Option<f64> {
        match self {
            Quadrature::Nodes { wl, w } => Some(
                wl.iter()
                    .zip(w)
                    .map(|(x, w)| w * planck_radiance(*x, t_k))
                    .sum(),
            ),
            Quadrature::General(band) => general_radiance(band, t_k),
        }
    }
}

/// [`band_radiance`] through the general resampling (any response).
fn general_radiance(band: &Band, t_k: f64) -> Option<f64> {
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
    fn gauss_legendre_matches_the_handbook_rules() {
        // Abramowitz & Stegun (1964) Table 25.4 (from memory): n = 2, nodes ±1/√3, weights
        // 1; n = 3, nodes 0 and ±√(3/5), weights 8/9 and 5/9.
        let (x, w) = gauss_legendre(2);
        assert!((x[1] - 1.0 / 3f64.sqrt()).abs() < 1e-14 && (x[0] + x[1]).abs() < 1e-14);
        assert!(w.iter().all(|v| (v - 1.0).abs() < 1e-14));
        let (x, w) = gauss_legendre(3);
        assert!(x[1].abs() < 1e-14 && (x[2] - 0.6f64.sqrt()).abs() < 1e-14);
        assert!((w[1] - 8.0 / 9.0).abs() < 1e-14 && (w[0] - 5.0 / 9.0).abs() < 1e-14);
        // An n-point rule integrates polynomials of degree ≤ 2n − 1 exactly: ∫x^k over
        // [−1, 1] is 2/(k + 1) for even k, 0 for odd.
        let (x, w) = gauss_legendre(GAUSS_NODES);
        for k in 0..2 * GAUSS_NODES {
            let got: f64 = x.iter().zip(&w).map(|(x, w)| w * x.powi(k as i32)).sum();
            let want = if k % 2 == 0 {
                2.0 / (k + 1) as f64
            } else {
                0.0
            };
            assert!((got - want).abs() < 1e-12, "x^{k}: {got} vs {want}");
        }
    }

    #[test]
    fn gaussian_band_radiance_agrees_with_a_fine_trapezoid() {
        // The quadrature against 20,000 trapezoids over the same ±3σ support, for a narrow
        // and a broad band where Planck's curve is steep (short waves, low temperature)
        // and where it is flat (common practice: a refined trapezoid as the reference).
        for (centre, fwhm) in [(4.5, 0.03), (0.55, 0.1), (2.2, 0.4)] {
            let band = Band::gaussian(centre, fwhm);
            let sigma = fwhm / (2.0 * (2.0 * std::f64::consts::LN_2).sqrt());
            let (lo, hi) = support_um(&band);
            for t in [300.0, 650.0, 1800.0] {
                let n = 20_000;
                let (mut num, mut den) = (0.0, 0.0);
                for i in 0..=n {
                    let x = lo + (hi - lo) * i as f64 / n as f64;
                    let e = if i == 0 || i == n { 0.5 } else { 1.0 };
                    let s = e * (-0.5 * ((x - centre) / sigma).powi(2)).exp();
                    num += s * planck_radiance(x, t);
                    den += s;
                }
                let got = band_radiance(&band, t).unwrap();
                assert!(
                    (got / (num / den) - 1.0).abs() < 1e-6,
                    "{centre} µm, {t} K: {got} vs {}",
                    num / den
                );
            }
        }
    }

    #[test]
    fn planck_radiance_matches_codata_check_values() {
        // B_λ from the CODATA 2018 h, c, k (the values scipy.constants carries), in
        // W m⁻² sr⁻¹ µm⁻¹, to 10⁻⁵ relative.
        for (wl, t, want) in [
            (4.0, 650.0, 461.388),
            (2.0, 650.0, 58.1064),
            (4.0, 1000.0, 3277.66),
            (10.0, 300.0, 9.92403),
        ] {
            let b = planck_radiance(wl, t);
            assert!(
                (b / want - 1.0).abs() < 1e-5,
                "B({wl} µm, {t} K) = {b}, want {want}"
            );
        }
        // Wien's displacement constant b = 2897.771955 µm K (CODATA 2018), by locating the
        // maximum numerically (golden-section search on −B).
        let (peak, _) = fit::golden(1.0, 6.0, 1e-9, |wl| -planck_radiance(wl, 1000.0));
        assert!((peak * 1000.0 / 2897.771955 - 1.0).abs() < 1e-6, "{peak}");
    }

    #[test]
    fn planck_radiance_matches_wien_and_stefan_boltzmann() {
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
