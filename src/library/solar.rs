//! The solar spectral irradiance at 1 AU that band responses are weighted with.
//!
//! An instrument's band value of a reflectance spectrum R is
//! ∫S(λ)F☉(λ)R(λ)dλ / ∫S(λ)F☉(λ)dλ: it measures reflected sunlight and its calibration
//! divides by the Sun seen through the same band. Every quantity thiomap unmixes
//! (reflectance factor, I/F, radiance factor) is such a ratio, so resampling always uses
//! this weighting.
//!
//! The table ships in `spectra-lib/solar/sun-1au.spectrum` and is compiled in: the
//! ASTM G173-03 extraterrestrial column from 0.28 to 4.0 µm, and beyond 4 µm, where that
//! table ends, a Planck curve scaled to meet it (the file's header and
//! `spectra-lib/solar/make_sun_table.py` say how). No crate carries a solar spectrum, so
//! the parser for its small text format lives here.

use std::sync::OnceLock;

use serde::Deserialize;

use super::interpolate;

/// The compiled-in table.
pub const EMBEDDED: &str = include_str!("../../spectra-lib/solar/sun-1au.spectrum");

/// A solar spectrum: irradiance at 1 AU in W m⁻² µm⁻¹ on a wavelength grid in µm.
#[derive(Debug, Clone, PartialEq)]
pub struct Sun {
    pub id: String,
    pub wavelength_um: Vec<f64>,
    pub irradiance: Vec<f64>,
    /// Where the tabulated part comes from.
    pub source: String,
    /// The model beyond the table.
    pub splice: String,
}

#[derive(Deserialize)]
struct Header {
    id: String,
    units: String,
    table: Part,
    splice: Splice,
}

#[derive(Deserialize)]
struct Part {
    source: String,
}

#[derive(Deserialize)]
struct Splice {
    model: String,
}

const SAMPLES: &str = "--- samples: wavelength_um irradiance_w_m2_um ---";

impl Sun {
    /// The compiled-in spectrum.
    pub fn embedded() -> &'static Sun {
        static SUN: OnceLock<Sun> = OnceLock::new();
        SUN.get_or_init(|| Sun::parse(EMBEDDED).expect("the shipped solar table parses"))
    }

    /// Parses the table format of `spectra-lib/solar/`.
    pub fn parse(text: &str) -> Result<Sun, String> {
        let (head, body) = text
            .split_once(SAMPLES)
            .ok_or_else(|| format!("no line `{SAMPLES}`"))?;
        let h: Header = toml::from_str(head).map_err(|e| e.to_string())?;
        if h.units != "W m-2 um-1" {
            return Err(format!("units `{}`, expected `W m-2 um-1`", h.units));
        }
        let (mut x, mut y) = (Vec::new(), Vec::new());
        for (n, line) in body
            .lines()
            .enumerate()
            .filter(|(_, l)| !l.trim().is_empty())
        {
            let mut it = line.split_whitespace().map(str::parse::<f64>);
            match (it.next(), it.next(), it.next()) {
                (Some(Ok(w)), Some(Ok(v)), None) if w.is_finite() && v >= 0.0 => {
                    if x.last().is_some_and(|&p| w <= p) {
                        return Err(format!("sample {n}: wavelengths must increase"));
                    }
                    x.push(w);
                    y.push(v);
                }
                _ => return Err(format!("sample {n}: expected `wavelength irradiance`")),
            }
        }
        if x.len() < 2 {
            return Err("fewer than two samples".into());
        }
        Ok(Sun {
            id: h.id,
            wavelength_um: x,
            irradiance: y,
            source: h.table.source,
            splice: h.splice.model,
        })
    }

    /// Irradiance at `um`, interpolated linearly; `None` outside the table.
    pub fn at(&self, um: f64) -> Option<f64> {
        interpolate(&self.wavelength_um, &self.irradiance, um)
    }

    /// First and last wavelength, µm.
    pub fn coverage_um(&self) -> (f64, f64) {
        (
            self.wavelength_um[0],
            self.wavelength_um[self.wavelength_um.len() - 1],
        )
    }

    /// ∫ over a range by the trapezoid rule on the table's own samples, W m⁻².
    pub fn integral(&self, lo_um: f64, hi_um: f64) -> f64 {
        let x = &self.wavelength_um;
        let mut sum = 0.0;
        for i in 1..x.len() {
            let (a, b) = (x[i - 1].max(lo_um), x[i].min(hi_um));
            if b > a {
                let (ya, yb) = (self.at(a).unwrap(), self.at(b).unwrap());
                sum += 0.5 * (ya + yb) * (b - a);
            }
        }
        sum
    }

    /// A short record for `run.json`.
    pub fn record(&self) -> serde_json::Value {
        let (lo, hi) = self.coverage_um();
        serde_json::json!({
            "id": self.id,
            "coverage_um": [lo, hi],
            "source": self.source,
            "beyond_the_table": self.splice,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_embedded_table_parses_and_covers_every_shipped_band_set() {
        let sun = Sun::embedded();
        let (lo, hi) = sun.coverage_um();
        assert!(lo <= 0.33 && hi >= 5.15, "{lo}–{hi}");
    }

    #[test]
    fn broken_tables_are_refused() {
        let head = "id = \"x\"\nunits = \"W m-2 um-1\"\n[table]\nsource = \"s\"\n[splice]\nmodel = \"m\"\n";
        assert!(Sun::parse(head).unwrap_err().contains("no line"));
        let t = format!("{head}{SAMPLES}\n0.5 1.0\n0.4 2.0\n");
        assert!(Sun::parse(&t).unwrap_err().contains("increase"));
        let t = format!("{head}{SAMPLES}\n0.5 1.0\n0.6 -2.0\n");
        assert!(Sun::parse(&t).unwrap_err().contains("expected"));
        let t = format!("{head}{SAMPLES}\n0.5 1.0\n0.6 2.0\n");
        assert!((Sun::parse(&t).unwrap().at(0.55).unwrap() - 1.5).abs() < 1e-12);
        let t = t.replace("W m-2 um-1", "W m-2 nm-1");
        assert!(Sun::parse(&t).unwrap_err().contains("units"));
    }
}
