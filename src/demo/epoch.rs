//! What a scene draws beyond its units: hot spots on a vent's floor, and for a later
//! epoch the bits of the changes that touch a pixel and the stranger material's spectrum.

use rand::Rng;
use rand_chacha::ChaCha8Rng;

use super::{pixel_geometry, world, DemoError, HotSpot, SceneParams};
use crate::bands::BandTable;
use crate::library::resample::resample;
use crate::library::Library;

/// Draws `count` hot spots among the sunlit pixels within 6° of `vent` (incidence and
/// emission under 70°): position, temperature and fraction, in that order per spot.
pub(super) fn place_hot_spots(
    p: &SceneParams,
    vent: (f64, f64),
    count: usize,
    rng: &mut ChaCha8Rng,
) -> Result<Vec<HotSpot>, DemoError> {
    let centre = world::unit_vector(vent.0, vent.1);
    let mut candidates: Vec<(f64, usize, usize)> = Vec::new();
    for r in 0..p.rows {
        for c in 0..p.cols {
            if let Some(px) = pixel_geometry(p, r, c) {
                let d = world::angle_deg(world::unit_vector(px.lat, px.lon), centre);
                if d < 6.0 && px.incidence < 70.0 && px.emission < 70.0 {
                    candidates.push((d, r, c));
                }
            }
        }
    }
    if candidates.len() < count {
        return Err(DemoError::NoVentInView);
    }
    let mut spots = Vec::with_capacity(count);
    for _ in 0..count {
        let k = rng.gen_range(0..candidates.len());
        let (_, r, c) = candidates.swap_remove(k);
        let (t0, t1) = p.hot_temperature_k;
        let t_k = t0 + (t1 - t0) * rng.gen::<f64>();
        let (lo, hi) = (p.hot_fraction.0.ln(), p.hot_fraction.1.ln());
        let fraction = (lo + (hi - lo) * rng.gen::<f64>()).exp();
        spots.push(HotSpot {
            row: r,
            col: c,
            temperature_k: t_k,
            fraction,
        });
    }
    Ok(spots)
}

/// The bits of the changes (each taken alone) that alter the composition at a point.
pub(super) fn changed_bits(ids: &[String], lat: f64, lon: f64, changes: &[world::Change]) -> i16 {
    if changes.is_empty() {
        return 0;
    }
    let (w0, _) = world::unit_weights(lat, lon);
    let base = world::abundances(ids, &w0);
    let mut bits = 0;
    for &c in changes {
        let (w, _, cover) = world::epoch_weights(lat, lon, &[c]);
        let a = world::abundances(ids, &w);
        let moved = cover > 0.0 || a.iter().zip(&base).any(|(x, y)| (x - y).abs() > 1e-9);
        if moved {
            bits |= c.bit();
        }
    }
    bits
}

/// The stranger material resampled to `bands` (the library's first member's wavelength
/// grid carries it through the same band responses).
pub(super) fn stranger_spectrum(
    library: &Library,
    bands: &BandTable,
) -> Result<Vec<f64>, DemoError> {
    let mut one = library.clone();
    one.members.truncate(1);
    let m = &mut one.members[0];
    m.id = "stranger".into();
    m.reflectance = m
        .wavelength_um
        .iter()
        .map(|&w| world::stranger_reflectance(w))
        .collect();
    let e = resample(&one, bands)?.matrix;
    Ok((0..bands.len()).map(|b| e[(b, 0)]).collect())
}
