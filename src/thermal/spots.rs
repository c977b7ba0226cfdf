//! The hot-spot table: one row per 8-connected region of thermally fitted pixels, with
//! where it is, how hot, how large and how much it radiates. Pure arithmetic: no I/O.
//!
//! Per region: the pixel centroid; latitude and longitude of the mean of the pixels'
//! unit vectors (safe across the antimeridian) when the backplanes exist; the peak
//! temperature (the hottest component of any pixel) with its error; the temperature
//! weighted by hot area, Σ f A T / Σ f A, with the error Σ (f A σ_T)² propagated as
//! independent; the hot area Σ f A (A the pixel's area on the body: km² with a body radius
//! and the latitude/longitude backplanes, otherwise 1 per pixel, so "pixels × f"); the
//! radiated power ε σ T⁴ f A summed (W, with km² areas only); the unit most of its pixels
//! lie in.

use ndarray::{Array2, ArrayView2, ArrayView3};

use super::STEFAN_BOLTZMANN;

/// The caution every hot-spot product carries.
pub const HOT_SPOT_CAUTION: &str = "Temperatures and areas are model estimates from single-pixel \
fits, with the stated standard errors; they depend on the emissivity assumed and on \
unresolved mixtures of temperatures. Active vents carry SO2 and H2S gas, heat and unstable \
ground: decisions about approaching or observing them defer to local codes, licensed \
practice and mission flight rules.";

/// The caution as the first line of a CSV table: `# ` and a newline.
pub fn caution_line() -> String {
    format!("# {HOT_SPOT_CAUTION}\n")
}

/// One hot spot.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct HotSpot {
    /// 1, 2, … in order of peak temperature, hottest first.
    pub id: usize,
    /// Pixel centroid (row, column; 0-based, row 0 at the top).
    pub row: f64,
    pub col: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub lat_deg: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub lon_deg: Option<f64>,
    pub pixels: usize,
    pub peak_temperature_k: f64,
    pub peak_temperature_k_stderr: f64,
    pub mean_temperature_k: f64,
    pub mean_temperature_k_stderr: f64,
    /// Σ f A: km² when `area_unit` is "km2", else pixel fractions.
    pub hot_area: f64,
    pub area_unit: &'static str,
    /// W; with km² areas only.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub power_w: Option<f64>,
    /// The unit label most of its pixels lie in.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub unit: Option<String>,
}

/// What the table is made from.
pub struct SpotInputs<'a> {
    pub fitted: ArrayView2<'a, bool>,
    /// The thermal planes of [`super::stage::ThermalOutput`] (T, f, σ_T, σ_f per component).
    pub planes: ArrayView3<'a, f32>,
    pub components: usize,
    pub lat_lon: Option<(ArrayView2<'a, f32>, ArrayView2<'a, f32>)>,
    /// Each pixel's area in km² (NaN where unknown), when known.
    pub area_km2: Option<ArrayView2<'a, f64>>,
    pub emissivity: f64,
    /// Unit labels per pixel (0 none) and their names (label 1 = names[0]).
    pub units: Option<(ArrayView2<'a, i16>, &'a [String])>,
}

/// The hot spots, hottest first.
pub fn hot_spots(inp: &SpotInputs) -> Vec<HotSpot> {
    let labels: Array2<i16> = inp.fitted.mapv(|f| f as i16);
    let (ids, info) = crate::units::regions::regions(&labels);
    let mut acc: Vec<Acc> = vec![Acc::default(); info.len()];
    for ((r, c), &id) in ids.indexed_iter() {
        if id == 0 {
            continue;
        }
        let a = &mut acc[id as usize - 1];
        a.n += 1;
        a.row += r as f64;
        a.col += c as f64;
        if let Some((lat, lon)) = &inp.lat_lon {
            let (la, lo) = (lat[(r, c)] as f64, lon[(r, c)] as f64);
            if la.is_finite() && lo.is_finite() {
                let (la, lo) = (la.to_radians(), lo.to_radians());
                a.v[0] += la.cos() * lo.cos();
                a.v[1] += la.cos() * lo.sin();
                a.v[2] += la.sin();
                a.has_v = true;
            }
        }
        let area = match &inp.area_km2 {
            Some(k) => k[(r, c)],
            None => 1.0,
        };
        for k in 0..inp.components {
            let t = inp.planes[(r, c, 4 * k)] as f64;
            let f = inp.planes[(r, c, 4 * k + 1)] as f64;
            let st = inp.planes[(r, c, 4 * k + 2)] as f64;
            if !(t.is_finite() && f.is_finite() && f > 0.0) {
                continue;
            }
            if t > a.peak {
                a.peak = t;
                a.peak_err = st;
            }
            if area.is_finite() {
                let w = f * area;
                a.w += w;
                a.wt += w * t;
                a.wt_err2 += (w * st).powi(2);
                a.power += inp.emissivity * STEFAN_BOLTZMANN * t.powi(4) * w * 1e6;
            }
        }
        if let Some((u, _)) = &inp.units {
            *a.units.entry(u[(r, c)]).or_insert(0) += 1;
        }
    }
    let km2 = inp.area_km2.is_some();
    let mut spots: Vec<HotSpot> = acc
        .into_iter()
        .map(|a| {
            let n = a.n as f64;
            let (lat, lon) = if a.has_v {
                let [x, y, z] = a.v;
                let h = (x * x + y * y).sqrt();
                (Some(z.atan2(h).to_degrees()), Some(y.atan2(x).to_degrees()))
            } else {
                (None, None)
            };
            let unit = inp.units.as_ref().and_then(|(_, names)| {
                let (label, _) = a
                    .units
                    .iter()
                    .filter(|(l, _)| **l > 0)
                    .max_by_key(|(l, n)| (**n, -(**l as i32)))?;
                names.get(*label as usize - 1).cloned()
            });
            HotSpot {
                id: 0,
                row: a.row / n,
                col: a.col / n,
                lat_deg: lat,
                lon_deg: lon,
                pixels: a.n,
                peak_temperature_k: a.peak,
                peak_temperature_k_stderr: a.peak_err,
                mean_temperature_k: a.wt / a.w,
                mean_temperature_k_stderr: a.wt_err2.sqrt() / a.w,
                hot_area: a.w,
                area_unit: if km2 { "km2" } else { "pixels" },
                power_w: km2.then_some(a.power),
                unit,
            }
        })
        .collect();
    spots.sort_by(|a, b| b.peak_temperature_k.total_cmp(&a.peak_temperature_k));
    for (i, s) in spots.iter_mut().enumerate() {
        s.id = i + 1;
    }
    spots
}

#[derive(Debug, Clone, Default)]
struct Acc {
    n: usize,
    row: f64,
    col: f64,
    v: [f64; 3],
    has_v: bool,
    peak: f64,
    peak_err: f64,
    w: f64,
    wt: f64,
    wt_err2: f64,
    power: f64,
    units: std::collections::BTreeMap<i16, usize>,
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::Array3;

    #[test]
    fn regions_temperatures_areas_and_power() {
        // Two spots: a 2-pixel one at 800 and 600 K, a 1-pixel one at 1000 K.
        let mut fitted = Array2::from_elem((5, 5), false);
        let mut planes = Array3::from_elem((5, 5, 4), f32::NAN);
        for (r, c, t, f) in [
            (1, 1, 800.0, 0.01),
            (2, 2, 600.0, 0.03),
            (4, 4, 1000.0, 0.002),
        ] {
            fitted[(r, c)] = true;
            planes[(r, c, 0)] = t;
            planes[(r, c, 1)] = f;
            planes[(r, c, 2)] = 10.0;
            planes[(r, c, 3)] = 0.001;
        }
        let area = Array2::from_elem((5, 5), 100.0);
        let spots = hot_spots(&SpotInputs {
            fitted: fitted.view(),
            planes: planes.view(),
            components: 1,
            lat_lon: None,
            area_km2: Some(area.view()),
            emissivity: 1.0,
            units: None,
        });
        assert_eq!(spots.len(), 2);
        assert_eq!((spots[0].pixels, spots[0].peak_temperature_k), (1, 1000.0));
        let s = &spots[1];
        assert_eq!(s.pixels, 2);
        assert_eq!((s.row, s.col), (1.5, 1.5));
        // Hot area 0.04 × 100 km² = 4 km²; T weighted (1×800 + 3×600)/4 = 650 K.
        assert!((s.hot_area - 4.0).abs() < 1e-6);
        assert!((s.mean_temperature_k - 650.0).abs() < 1e-6);
        // Power: σ (800⁴ × 1 + 600⁴ × 3) km² × 10⁶ m²/km² (Stefan–Boltzmann, CODATA 2018).
        let p = STEFAN_BOLTZMANN * (800f64.powi(4) * 1.0 + 600f64.powi(4) * 3.0) * 1e6;
        assert!((s.power_w.unwrap() / p - 1.0).abs() < 1e-6);
        assert!((s.mean_temperature_k_stderr - 1000f64.sqrt() / 4.0).abs() < 1e-6);
    }
}
