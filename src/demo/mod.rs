//! Synthetic scenes of Brimveil, a fictional sulfur-volcanic moon, with ground truth —
//! for trying thiomap, for its accuracy tests and for its benchmarks.
//!
//! A scene is a globe on dark sky (sky pixels are no-data) or a map-projected tile, whose
//! pixels hold linear mixtures of library members laid out by [`world`]. The physics,
//! stated so the truth can be reasoned about:
//!
//! - **Geometry**: orthographic view from the sub-observer point; per pixel incidence i,
//!   emission e, phase g, latitude, longitude (degrees). A tile is equirectangular
//!   (latitude 40° S–40° N, longitude 50° W–50° E) with the same angles.
//! - **Photometry**: the samples are I/F: reflectance factor of the mixture times a
//!   photometric factor P and a topographic shading t: Lambert P = cos i (the default), or
//!   Lommel–Seeliger P = 2 cos i / (cos i + cos e), both 1 at normal geometry; t is a
//!   smooth seeded field between 0.85 and 1 (5° cells). P·t is the brightness a shade
//!   member absorbs. (Lommel–Seeliger exceeds 1 where i < e: a shade cannot brighten, so
//!   such pixels need photometric normalisation first.) Library spectra enter through the
//!   solar-weighted band responses ([`crate::library::resample`]).
//! - **Noise**: photon and read noise of a detector. A band's detected signal is
//!   D_b = I/F × g_b with g_b ∝ F̄☉,b · Δλ_b · λ_b (the band's mean solar irradiance, its
//!   width and, for photons per joule, its wavelength; common practice), normalised to 1 in
//!   the band nearest 0.55 µm; σ_D² = σ_r² + k·D. SNR is quoted at 0.55 µm: at that band's
//!   mean surface I/F Ī, σ = Ī/SNR, half of the variance from each term. In I/F units a
//!   band's σ_b(s) = √(σ_r² + k g_b s)/g_b, so bands where the Sun is faint are noisier.
//!   Each band's σ at its mean surface signal is written into the cube's band table
//!   (`noise_sigma`). The mean is over sunlit surface pixels.
//! - **Library mismatch** (optional, ±m): each member's spectrum is multiplied by
//!   1 + m·sin(2π λ / Λ + φ) with Λ in 1.5–4 µm and φ seeded per member before resampling;
//!   the truth stays over the library's own members.
//! - **Hot spots** (optional): pixels on the active vent's floor gain thermal emission in
//!   I/F units, f π ε d² ∫S B_λ(T) / ∫S F☉ ([`crate::thermal`]), ε = 1, with T drawn
//!   uniformly in a range (default 550–850 K) and the hot area fraction f log-uniformly in
//!   another (default 10⁻⁴–10⁻³), at the Sun's distance (default [`SUN_DISTANCE_AU`],
//!   recorded as `SUNDIST`); the truth lists each spot's T and f.
//! - **Later epochs** (`changes`, `noise_seed`): the same world with changes overlaid
//!   ([`world::Change`]); the truth marks the changed pixels.
//!
//! Randomness comes from one ChaCha8 stream seeded by `seed`, drawn in a fixed order, so
//! reruns with the same seed are byte-identical; a later epoch draws its noise from a
//! stream of its own (`noise_seed`), the world's draws staying the earlier epoch's.

mod epoch;
pub mod files;
mod shading;
pub mod world;

use epoch::{changed_bits, place_hot_spots, stranger_spectrum};
use shading::Shading;

use ndarray::{Array2, Array3};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

use crate::cube::{About, Backplane, Backplanes, BandTable, Cube, CubeInfo, Format, Quantity};
use crate::library::diagnostics::{diagnose, Group, DEFAULT_GROUP_ANGLE_DEG};
use crate::library::resample::{resample, OutOfCoverage};
use crate::library::Library;

/// Globe or map-projected tile.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SceneKind {
    Globe,
    Tile,
}

pub use crate::photometry::Law;

/// Everything that decides a scene. Check with [`SceneParams::check`].
#[derive(Debug, Clone, PartialEq)]
pub struct SceneParams {
    pub kind: SceneKind,
    pub rows: usize,
    pub cols: usize,
    /// Signal-to-noise ratio at each band's mean surface signal.
    pub snr: f64,
    /// Library mismatch amplitude (0 = off; 0.03 = ±3 %).
    pub mismatch: f64,
    pub hot_spots: usize,
    /// Hot-spot temperatures are drawn uniformly in this range, K.
    pub hot_temperature_k: (f64, f64),
    /// Hot area fractions are drawn log-uniformly in this range.
    pub hot_fraction: (f64, f64),
    /// The Sun's distance, AU (recorded as `SUNDIST`).
    pub sun_distance_au: f64,
    pub seed: u64,
    pub law: Law,
    /// Sub-solar point (latitude, longitude), degrees.
    pub sun: (f64, f64),
    /// Sub-observer point (latitude, longitude), degrees.
    pub observer: (f64, f64),
    /// Whether internal row 0 is drawn at the bottom (FITS) — north is kept up in pictures.
    pub row0_at_bottom: bool,
    /// A later epoch's changes to the world (none for a first epoch).
    pub changes: Vec<world::Change>,
    /// The noise's own seed, for a later epoch: the world (shading, mismatch, hot spots)
    /// stays the earlier epoch's, drawn from `seed`, while the noise is new. `None` draws
    /// the noise from `seed`'s stream after the world, as a first epoch does.
    pub noise_seed: Option<u64>,
}

impl Default for SceneParams {
    fn default() -> Self {
        SceneParams {
            kind: SceneKind::Globe,
            rows: 96,
            cols: 96,
            snr: 200.0,
            mismatch: 0.0,
            hot_spots: 0,
            hot_temperature_k: HOT_SPOT_K,
            hot_fraction: HOT_SPOT_FRACTION,
            sun_distance_au: SUN_DISTANCE_AU,
            seed: 1,
            law: Law::Lambert,
            sun: (0.0, 30.0),
            observer: (0.0, 0.0),
            row0_at_bottom: true,
            changes: Vec::new(),
            noise_seed: None,
        }
    }
}

/// Why a scene cannot be made.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum DemoError {
    #[error("--snr {0}: the signal-to-noise ratio must be greater than 0")]
    Snr(f64),
    #[error("--size {0}x{1}: a scene needs at least 8 rows and 8 columns")]
    Size(usize, usize),
    #[error("{what} ({lat}, {lon}) is off the globe: latitude must lie in −90…90° and longitude in −180…360°")]
    OffGlobe {
        what: &'static str,
        lat: f64,
        lon: f64,
    },
    #[error("--mismatch {0}: must lie in 0–0.5")]
    Mismatch(f64),
    #[error("--hot-spots {0}: at most 50")]
    HotSpots(usize),
    #[error("--hot-temperature {0}-{1}: the range must run from a lower to a higher temperature above 0 K")]
    HotTemperature(f64, f64),
    #[error("--hot-fraction {0}-{1}: the range must run upwards within (0, 1]")]
    HotFraction(f64, f64),
    #[error("--sun-distance {0}: the Sun's distance must be greater than 0 AU")]
    SunDistance(f64),
    #[error("{0}")]
    Coverage(#[from] OutOfCoverage),
    #[error("the active vent is not in sunlight in this view, so no hot spot can be placed")]
    NoVentInView,
}

impl SceneParams {
    pub fn check(&self) -> Result<(), DemoError> {
        if !(self.snr.is_finite() && self.snr > 0.0) {
            return Err(DemoError::Snr(self.snr));
        }
        if self.rows < 8 || self.cols < 8 {
            return Err(DemoError::Size(self.rows, self.cols));
        }
        for (what, (lat, lon)) in [
            ("the sub-solar point", self.sun),
            ("the sub-observer point", self.observer),
        ] {
            if !((-90.0..=90.0).contains(&lat) && (-180.0..=360.0).contains(&lon)) {
                return Err(DemoError::OffGlobe { what, lat, lon });
            }
        }
        if !(0.0..=0.5).contains(&self.mismatch) {
            return Err(DemoError::Mismatch(self.mismatch));
        }
        if self.hot_spots > 50 {
            return Err(DemoError::HotSpots(self.hot_spots));
        }
        let (t0, t1) = self.hot_temperature_k;
        if !(t0.is_finite() && t1.is_finite() && t0 > 0.0 && t1 >= t0) {
            return Err(DemoError::HotTemperature(t0, t1));
        }
        let (f0, f1) = self.hot_fraction;
        if !(f0 > 0.0 && f1 >= f0 && f1 <= 1.0) {
            return Err(DemoError::HotFraction(f0, f1));
        }
        if !(self.sun_distance_au.is_finite() && self.sun_distance_au > 0.0) {
            return Err(DemoError::SunDistance(self.sun_distance_au));
        }
        Ok(())
    }
}

/// The noise model of one band: σ²(s) = read² + coeff·s.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BandNoise {
    pub mean_signal: f64,
    pub read_sigma: f64,
    pub signal_coeff: f64,
}

impl BandNoise {
    /// The detector model of the module doc for a band of gain `gain` (g_b) whose mean
    /// surface I/F is `mean_signal`, with σ = `reference_mean`/SNR at gain 1.
    pub fn detector(mean_signal: f64, gain: f64, reference_mean: f64, snr: f64) -> BandNoise {
        let var = (reference_mean / snr).powi(2);
        let (read2, k) = (0.5 * var, 0.5 * var / reference_mean.max(1e-12));
        BandNoise {
            mean_signal,
            read_sigma: read2.sqrt() / gain,
            signal_coeff: k / gain,
        }
    }

    pub fn sigma(&self, signal: f64) -> f64 {
        (self.read_sigma.powi(2) + self.signal_coeff * signal.max(0.0)).sqrt()
    }
}

/// The right answer for every pixel.
#[derive(Debug, Clone)]
pub struct Truth {
    /// Library member ids, in plane order.
    pub ids: Vec<String>,
    /// (row, col, member) abundances; NaN on sky.
    pub abundance: Array3<f32>,
    /// Unit label (1-based, see [`world::UNITS`]); 0 on sky.
    pub labels: Array2<i16>,
    /// Pixels ≥ 2 pixels from any unit boundary, outside transition zones, not hot.
    pub core: Array2<bool>,
    pub hot: Array2<bool>,
    /// Each hot pixel's temperature and fraction.
    pub hot_spots: Vec<HotSpot>,
    /// For a later epoch: the earlier epoch's hot spots that went out.
    pub hot_spots_off: Vec<HotSpot>,
    /// For a later epoch: per pixel, the bits ([`world::Change::bit`]) of the changes that
    /// touched it; 0 everywhere for a first epoch.
    pub changed: Array2<i16>,
    /// The cover of material outside the library (the stranger patch), 0 elsewhere; the
    /// abundances over the library's members then sum to 1 − this.
    pub stranger: Array2<f32>,
    pub noise: Vec<BandNoise>,
    /// Groups `library check` reports for this band set (default angle).
    pub groups: Vec<Group>,
}

/// A generated scene.
#[derive(Debug, Clone)]
pub struct Scene {
    pub cube: Cube,
    pub truth: Truth,
}

/// Standard normal deviates by the Box–Muller transform.
fn normal(rng: &mut ChaCha8Rng) -> f64 {
    let u1: f64 = 1.0 - rng.gen::<f64>(); // (0, 1]
    let u2: f64 = rng.gen();
    (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
}

/// Brimveil's distance from its sun, AU (a fictional world's value).
pub const SUN_DISTANCE_AU: f64 = 4.8;
/// Hot-spot temperatures, K, drawn uniformly in this range.
pub const HOT_SPOT_K: (f64, f64) = (550.0, 850.0);
/// Hot area fractions, drawn log-uniformly in this range.
pub const HOT_SPOT_FRACTION: (f64, f64) = (1e-4, 1e-3);

/// One hot spot of the truth.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct HotSpot {
    pub row: usize,
    pub col: usize,
    pub temperature_k: f64,
    /// The pixel fraction at that temperature.
    pub fraction: f64,
}

struct Pixel {
    lat: f64,
    lon: f64,
    incidence: f64,
    emission: f64,
    phase: f64,
}

/// Geometry of pixel (r, c), or `None` for sky.
fn pixel_geometry(p: &SceneParams, r: usize, c: usize) -> Option<Pixel> {
    let (rows, cols) = (p.rows as f64, p.cols as f64);
    // y grows northward in pictures; internal rows run bottom-up for FITS.
    let rr = if p.row0_at_bottom {
        r as f64 + 0.5
    } else {
        rows - (r as f64 + 0.5)
    };
    let o = world::unit_vector(p.observer.0, p.observer.1);
    let s = world::unit_vector(p.sun.0, p.sun.1);
    let point = match p.kind {
        SceneKind::Globe => {
            let radius = rows.min(cols) / 2.0 - 2.0;
            let x = (c as f64 + 0.5 - cols / 2.0) / radius;
            let y = (rr - rows / 2.0) / radius;
            let z2 = 1.0 - x * x - y * y;
            if z2 < 0.0 {
                return None;
            }
            let z = z2.sqrt();
            let (la, lo) = (p.observer.0.to_radians(), p.observer.1.to_radians());
            let east = [-lo.sin(), lo.cos(), 0.0];
            let north = [-la.sin() * lo.cos(), -la.sin() * lo.sin(), la.cos()];
            [0, 1, 2].map(|k| x * east[k] + y * north[k] + z * o[k])
        }
        SceneKind::Tile => {
            let lat = -40.0 + 80.0 * rr / rows;
            let lon = -50.0 + 100.0 * (c as f64 + 0.5) / cols;
            world::unit_vector(lat, lon)
        }
    };
    let lat = point[2].clamp(-1.0, 1.0).asin().to_degrees();
    let lon = point[1].atan2(point[0]).to_degrees();
    Some(Pixel {
        lat,
        lon,
        incidence: world::angle_deg(point, s),
        emission: world::angle_deg(point, o),
        phase: world::angle_deg(s, o),
    })
}

/// The deepest topographic shading: t runs from 1 − this to 1.
pub const SHADING_DEPTH: f64 = 0.15;

/// Generates a scene of `library` seen through `bands`.
pub fn generate(
    p: &SceneParams,
    library: &Library,
    bands: &BandTable,
    instrument: &str,
) -> Result<Scene, DemoError> {
    p.check()?;
    let mut rng = ChaCha8Rng::seed_from_u64(p.seed);
    let ids: Vec<String> = library.members.iter().map(|m| m.id.clone()).collect();
    let clean = resample(library, bands)?;
    let groups = diagnose(&clean, DEFAULT_GROUP_ANGLE_DEG).groups;

    // The spectra the scene is made of: the library, optionally mismatched.
    let mut used = library.clone();
    if p.mismatch > 0.0 {
        for m in &mut used.members {
            let period = 1.5 + 2.5 * rng.gen::<f64>();
            let phi = std::f64::consts::TAU * rng.gen::<f64>();
            for (r, w) in m.reflectance.iter_mut().zip(&m.wavelength_um) {
                *r *= 1.0 + p.mismatch * (std::f64::consts::TAU * w / period + phi).sin();
            }
        }
    }
    let e = resample(&used, bands)?.matrix;
    let shading = Shading::new(&mut rng);
    let (rows, cols, nb, nm) = (p.rows, p.cols, bands.len(), ids.len());

    let mut abundance = Array3::<f32>::from_elem((rows, cols, nm), f32::NAN);
    let mut labels = Array2::<i16>::zeros((rows, cols));
    let mut transition = Array2::<bool>::from_elem((rows, cols), false);
    let mut stranger = Array2::<f32>::zeros((rows, cols));
    let mut changed = Array2::<i16>::zeros((rows, cols));
    let stranger_e = if p.changes.contains(&world::Change::Stranger) {
        Some(stranger_spectrum(library, bands)?)
    } else {
        None
    };
    let mut brightness = Array2::<f64>::zeros((rows, cols));
    let mut planes: Backplanes = Backplane::ALL
        .iter()
        .map(|b| (*b, Array2::<f32>::from_elem((rows, cols), f32::NAN)))
        .collect();
    for r in 0..rows {
        for c in 0..cols {
            let Some(px) = pixel_geometry(p, r, c) else {
                continue;
            };
            let (w, trans, cover) = if p.changes.is_empty() {
                let (w, t) = world::unit_weights(px.lat, px.lon);
                (w, t, 0.0)
            } else {
                world::epoch_weights(px.lat, px.lon, &p.changes)
            };
            let a = world::abundances(&ids, &w);
            labels[(r, c)] = world::nearest_unit(&ids, &a) as i16;
            transition[(r, c)] = trans;
            stranger[(r, c)] = cover as f32;
            for (j, v) in a.iter().enumerate() {
                abundance[(r, c, j)] = (*v * (1.0 - cover)) as f32;
            }
            changed[(r, c)] = changed_bits(&ids, px.lat, px.lon, &p.changes);
            let t = 1.0 - SHADING_DEPTH * shading.at(px.lat, px.lon);
            let (mu0, mu) = (
                px.incidence.to_radians().cos(),
                px.emission.to_radians().cos(),
            );
            brightness[(r, c)] = p.law.factor(mu0, mu) * t;
            for (plane, v) in [
                (Backplane::Incidence, px.incidence),
                (Backplane::Emission, px.emission),
                (Backplane::Phase, px.phase),
                (Backplane::Latitude, px.lat),
                (Backplane::Longitude, px.lon),
            ] {
                planes.get_mut(&plane).expect("all planes made")[(r, c)] = v as f32;
            }
        }
    }

    // Noiseless signal.
    let mut signal = Array3::<f64>::zeros((rows, cols, nb));
    for r in 0..rows {
        for c in 0..cols {
            if labels[(r, c)] == 0 {
                continue;
            }
            for b in 0..nb {
                let mut mix: f64 = (0..nm)
                    .map(|j| abundance[(r, c, j)] as f64 * e[(b, j)])
                    .sum();
                if let Some(se) = &stranger_e {
                    mix += stranger[(r, c)] as f64 * se[b];
                }
                signal[(r, c, b)] = brightness[(r, c)] * mix;
            }
        }
    }

    // Hot spots on a vent's sunlit floor: Tolvar Kiln's, or Sesk Kiln's once its vents
    // switch on (Tolvar's spots are then drawn as before, but only recorded as gone).
    let mut hot = Array2::<bool>::from_elem((rows, cols), false);
    let mut hot_spots = Vec::new();
    let mut hot_spots_off = Vec::new();
    let vents = p.changes.contains(&world::Change::Vents);
    if p.hot_spots > 0 || vents {
        if p.hot_spots > 0 {
            let spots = place_hot_spots(p, world::ACTIVE_VENT, p.hot_spots, &mut rng)?;
            if vents {
                hot_spots_off = spots;
            } else {
                hot_spots = spots;
            }
        }
        if vents {
            let n = if p.hot_spots > 0 { p.hot_spots } else { 3 };
            hot_spots = place_hot_spots(p, world::QUIET_VENT, n, &mut rng)?;
        }
        let sun = crate::library::solar::Sun::embedded();
        for h in &hot_spots {
            hot[(h.row, h.col)] = true;
            for (b, band) in bands.bands().iter().enumerate() {
                let unit =
                    crate::thermal::band_iof(band, h.temperature_k, p.sun_distance_au, 1.0, sun)
                        .ok_or_else(|| OutOfCoverage::solar(band, b, sun))?;
                signal[(h.row, h.col, b)] += h.fraction * unit;
            }
        }
        if vents {
            for h in hot_spots.iter().chain(&hot_spots_off) {
                changed[(h.row, h.col)] |= world::Change::Vents.bit();
            }
        }
    }

    // Noise: the detector model of the module doc, SNR quoted at 0.55 µm.
    let sun = crate::library::solar::Sun::embedded();
    let mean_signal: Vec<f64> = (0..nb)
        .map(|b| {
            let (mut sum, mut n) = (0.0, 0usize);
            for r in 0..rows {
                for c in 0..cols {
                    if labels[(r, c)] != 0 && brightness[(r, c)] > 0.0 && !hot[(r, c)] {
                        sum += signal[(r, c, b)];
                        n += 1;
                    }
                }
            }
            if n > 0 {
                sum / n as f64
            } else {
                0.0
            }
        })
        .collect();
    let gains = detector_gains(bands, sun);
    let reference = reference_band(bands);
    let noise: Vec<BandNoise> = (0..nb)
        .map(|b| BandNoise::detector(mean_signal[b], gains[b], mean_signal[reference], p.snr))
        .collect();
    let mut data = Array3::<f32>::from_elem((rows, cols, nb), f32::NAN);
    let mut own_noise = p.noise_seed.map(ChaCha8Rng::seed_from_u64);
    let noise_rng = own_noise.as_mut().unwrap_or(&mut rng);
    for r in 0..rows {
        for c in 0..cols {
            if labels[(r, c)] == 0 {
                continue;
            }
            for b in 0..nb {
                let s = signal[(r, c, b)];
                data[(r, c, b)] = (s + noise[b].sigma(s) * normal(noise_rng)) as f32;
            }
        }
    }

    let mut core = core_mask(&labels, &transition, &hot);
    core.zip_mut_with(&stranger, |k, s| *k &= *s == 0.0);
    let valid = labels.mapv(|l| l != 0);
    let cube = Cube {
        info: CubeInfo {
            path: Default::default(),
            format: if p.row0_at_bottom {
                Format::Fits { hdu: 0 }
            } else {
                Format::Npy
            },
            rows,
            cols,
            bands: bands
                .clone()
                .with_noise_sigma(
                    noise
                        .iter()
                        .map(|n| n.sigma(n.mean_signal).max(1e-9))
                        .collect(),
                )
                .expect("noise σ is positive"),
            quantity: Quantity::IOverF,
            spatial_wcs: Vec::new(),
            inputs: Vec::new(),
            about: About {
                target: Some("Brimveil (fictional; synthetic scene)".into()),
                time: None,
                instrument: Some(instrument.to_string()),
                sun_distance_au: Some(p.sun_distance_au),
                extra: Default::default(),
            },
        },
        data,
        valid,
        nonfinite_samples: 0,
        backplanes: planes,
    };
    Ok(Scene {
        cube,
        truth: Truth {
            ids,
            abundance,
            labels,
            core,
            hot,
            hot_spots,
            hot_spots_off,
            changed,
            stranger,
            noise,
            groups,
        },
    })
}

/// The band nearest 0.55 µm, where SNR is quoted.
fn reference_band(bands: &BandTable) -> usize {
    let c = bands.centres_um();
    (0..c.len())
        .min_by(|&a, &b| (c[a] - 0.55).abs().total_cmp(&(c[b] - 0.55).abs()))
        .unwrap_or(0)
}

/// g_b ∝ F̄☉,b · Δλ_b · λ_b, 1 in the reference band. A band without a width counts the
/// reference band's (or 1 µm when that has none too).
pub fn detector_gains(bands: &BandTable, sun: &crate::library::solar::Sun) -> Vec<f64> {
    let reference = reference_band(bands);
    let ref_width = bands.bands()[reference].fwhm_um().unwrap_or(1.0);
    let raw: Vec<f64> = bands
        .bands()
        .iter()
        .map(|b| {
            let f = crate::library::resample::band_irradiance(sun, b)
                .or_else(|| sun.at(b.centre_um))
                .unwrap_or(0.0);
            f * b.fwhm_um().unwrap_or(ref_width) * b.centre_um
        })
        .collect();
    let r = raw[reference].max(f64::MIN_POSITIVE);
    raw.iter().map(|g| (g / r).max(1e-6)).collect()
}

/// Core pixels: surface, outside transitions, not hot, and every pixel within two
/// (Chebyshev distance ≤ 2) on the surface with the same label.
fn core_mask(labels: &Array2<i16>, transition: &Array2<bool>, hot: &Array2<bool>) -> Array2<bool> {
    let (rows, cols) = labels.dim();
    Array2::from_shape_fn((rows, cols), |(r, c)| {
        let l = labels[(r, c)];
        if l == 0 || transition[(r, c)] || hot[(r, c)] {
            return false;
        }
        for dr in -2i64..=2 {
            for dc in -2i64..=2 {
                let (rr, cc) = (r as i64 + dr, c as i64 + dc);
                if rr < 0 || cc < 0 || rr >= rows as i64 || cc >= cols as i64 {
                    return false;
                }
                if labels[(rr as usize, cc as usize)] != l {
                    return false;
                }
            }
        }
        true
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn measured_noise_matches_the_model_at_a_uniform_signal() {
        // The noise model as stated: σ² = σ_r² + k s, half of each at the mean signal.
        let model = BandNoise::detector(0.4, 1.0, 0.4, 100.0);
        assert!(
            (model.sigma(0.4) - 0.004).abs() < 1e-12,
            "SNR 100 at the mean signal"
        );
        let mut rng = ChaCha8Rng::seed_from_u64(7);
        let s = 0.8; // a brighter uniform patch
        let n = 20_000;
        let draws: Vec<f64> = (0..n)
            .map(|_| s + model.sigma(s) * normal(&mut rng))
            .collect();
        let mean = draws.iter().sum::<f64>() / n as f64;
        let sd = (draws.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1) as f64).sqrt();
        assert!(
            (sd / model.sigma(s) - 1.0).abs() < 0.10,
            "{sd} vs {}",
            model.sigma(s)
        );
    }

    #[test]
    fn the_detector_model_holds_the_snr_at_the_reference_and_scales_with_gain() {
        // At gain 1 and the reference mean, σ = mean/SNR; at gain g the I/F noise of the
        // read term is σ_r/g (common practice: noise in detected units, divided back).
        let n = BandNoise::detector(0.5, 1.0, 0.5, 100.0);
        assert!((n.sigma(0.5) - 0.005).abs() < 1e-12);
        let faint = BandNoise::detector(0.5, 0.1, 0.5, 100.0);
        assert!((faint.read_sigma - n.read_sigma / 0.1).abs() < 1e-12);
        assert!(faint.sigma(0.5) > 3.0 * n.sigma(0.5));
    }

    #[test]
    fn far_infrared_bands_of_the_mapper_are_noisier() {
        let bands = crate::cube::bandsets::resolve("mapper-96").unwrap().bands;
        let g = detector_gains(&bands, crate::library::solar::Sun::embedded());
        let c = bands.centres_um();
        let at = |um: f64| g[c.iter().position(|&x| (x - um).abs() < 0.03).unwrap()];
        assert!((at(0.55) - 1.0).abs() < 0.2);
        assert!(at(4.5) < 0.5 * at(0.55), "{} vs {}", at(4.5), at(0.55));
    }

    #[test]
    fn bad_parameters_are_refused() {
        let ok = SceneParams::default();
        assert!(ok.check().is_ok());
        assert!(matches!(
            SceneParams {
                snr: 0.0,
                ..ok.clone()
            }
            .check(),
            Err(DemoError::Snr(_))
        ));
        assert!(matches!(
            SceneParams {
                rows: 0,
                ..ok.clone()
            }
            .check(),
            Err(DemoError::Size(..))
        ));
        assert!(matches!(
            SceneParams {
                sun: (95.0, 0.0),
                ..ok.clone()
            }
            .check(),
            Err(DemoError::OffGlobe { .. })
        ));
    }

    #[test]
    fn incidence_is_zero_at_the_sub_solar_point_and_ninety_on_the_terminator() {
        // Spherical geometry, common practice: cos i = p·s.
        let p = SceneParams::default();
        let s = world::unit_vector(p.sun.0, p.sun.1);
        assert!(world::angle_deg(s, s).abs() < 1e-9);
        let terminator = world::unit_vector(0.0, p.sun.1 - 90.0);
        assert!((world::angle_deg(terminator, s) - 90.0).abs() < 1e-9);
    }
}
