//! Keep-out areas given as circles on the body: each a centre (latitude, longitude) and an
//! angular radius, all in degrees; a pixel is kept out when its centre lies within any
//! circle (great-circle distance). Masks given as pictures are read by the caller.
//!
//! No I/O and no printing here.

use ndarray::Array2;
use serde::Deserialize;

/// One keep-out circle.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Circle {
    pub lat_deg: f64,
    pub lon_deg: f64,
    pub radius_deg: f64,
    /// What it protects (shown in messages).
    #[serde(default)]
    pub name: String,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct File {
    circle: Vec<Circle>,
}

/// Parses a TOML list of `[[circle]]` tables; `origin` names it in messages.
pub fn parse(origin: &str, text: &str) -> Result<Vec<Circle>, String> {
    let f: File = toml::from_str(text).map_err(|e| format!("{origin}: {}", e.message()))?;
    for (i, c) in f.circle.iter().enumerate() {
        if !(c.lat_deg.abs() <= 90.0
            && c.lon_deg.is_finite()
            && c.radius_deg > 0.0
            && c.radius_deg <= 180.0)
        {
            return Err(format!(
                "{origin}: circle {}: latitude must lie in −90…90°, the radius in (0, 180]°",
                i + 1
            ));
        }
    }
    Ok(f.circle)
}

/// The pixels within any circle, from the latitude and longitude backplanes.
pub fn mask(circles: &[Circle], lat: &Array2<f32>, lon: &Array2<f32>) -> Array2<bool> {
    let v = |la: f64, lo: f64| {
        let (a, b) = (la.to_radians(), lo.to_radians());
        [a.cos() * b.cos(), a.cos() * b.sin(), a.sin()]
    };
    let centres: Vec<([f64; 3], f64)> = circles
        .iter()
        .map(|c| (v(c.lat_deg, c.lon_deg), c.radius_deg.to_radians().cos()))
        .collect();
    Array2::from_shape_fn(lat.dim(), |(r, c)| {
        let (la, lo) = (lat[(r, c)] as f64, lon[(r, c)] as f64);
        if !(la.is_finite() && lo.is_finite()) {
            return false;
        }
        let p = v(la, lo);
        centres
            .iter()
            .any(|(q, cos_r)| p[0] * q[0] + p[1] * q[1] + p[2] * q[2] >= *cos_r)
    })
}
