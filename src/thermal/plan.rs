//! Whether and how a cube is fitted for emission: the mode resolved against what the cube
//! holds (a band beyond 2.5 µm, the Sun's distance, a quantity the column can be written
//! in), checked before anything is written, and the per-pixel divisor of the thermal
//! column (see [`super::stage`]). Pure: no I/O.

use ndarray::{Array2, ArrayView2};

use super::fit::Columns;
use super::{Mode, NEEDS_BAND_BEYOND_UM};
use crate::bands::{BandTable, Quantity};
use crate::library::solar::Sun;
use crate::photometry::Law;

/// What the plan needs of a cube: its bands, quantity, stated sun distance and the
/// incidence and emission backplanes (degrees) when it has them.
pub struct CubeFacts<'a> {
    pub bands: &'a BandTable,
    pub quantity: Quantity,
    pub sun_distance_au: Option<f64>,
    pub incidence: Option<ArrayView2<'a, f32>>,
    pub emission: Option<ArrayView2<'a, f32>>,
}

/// A resolved thermal fit.
#[derive(Debug, Clone)]
pub struct Plan {
    /// `One` or `Two`.
    pub mode: Mode,
    pub range_k: (f64, f64),
    pub emissivity: f64,
    pub sun_distance_au: f64,
    /// Where the distance came from: "cube" or "recipe".
    pub sun_distance_source: &'static str,
    /// Per pixel, what the column is divided by (None: 1).
    pub divisor: Option<Array2<f32>>,
    /// How the column was written for the cube's quantity.
    pub column_note: String,
}

/// The outcome of resolving: a plan, nothing to do (with a note when `auto` had a reason
/// worth saying), or a refusal naming the rule.
#[derive(Debug)]
pub enum Resolved {
    Fit(Plan),
    Off(Option<String>),
}

/// The request as the recipe states it.
pub struct Request {
    pub mode: Mode,
    pub range_k: (f64, f64),
    pub emissivity: f64,
    pub sun_distance_au: Option<f64>,
    pub law: Option<Law>,
}

/// Resolves `req` for a cube (after band selection and normalisation).
pub fn resolve(req: &Request, cube: &CubeFacts, sun: &Sun) -> Result<Resolved, String> {
    if req.mode == Mode::Off {
        return Ok(Resolved::Off(None));
    }
    let forced = req.mode != Mode::Auto;
    let bands = cube.bands.bands();
    let longest = bands
        .iter()
        .map(|b| b.centre_um)
        .fold(f64::NEG_INFINITY, f64::max);
    if longest <= NEEDS_BAND_BEYOND_UM {
        return if forced {
            Err(format!(
                "--thermal {}: the cube has no band beyond {NEEDS_BAND_BEYOND_UM} µm (its longest is \
                 centred at {longest:.3} µm), where emission would show",
                req.mode.name()
            ))
        } else {
            Ok(Resolved::Off(None))
        };
    }
    let (sun_au, source) = match (req.sun_distance_au, cube.sun_distance_au) {
        (Some(d), _) => (d, "recipe"),
        (None, Some(d)) => (d, "cube"),
        (None, None) => {
            let why = "the cube states no distance from the Sun (FITS SUNDIST, sidecar \
                       sun_distance_au) and none was given (--sun-distance AU)";
            return if forced {
                Err(format!("--thermal {}: {why}", req.mode.name()))
            } else {
                Ok(Resolved::Off(Some(format!(
                    "thermal fitting is off: {why}"
                ))))
            };
        }
    };
    if !(sun_au.is_finite() && sun_au > 0.0) {
        return Err(format!(
            "sun distance {sun_au}: the Sun's distance must be greater than 0 AU"
        ));
    }
    for (i, b) in bands.iter().enumerate() {
        if crate::library::resample::band_irradiance(sun, b).is_none() {
            return Err(format!(
                "band {} ({:.3} µm) lies outside the solar spectrum {}: no thermal column",
                i + 1,
                b.centre_um,
                sun.id
            ));
        }
    }
    let law_factor = |need_cos_i: bool| -> Result<Option<Array2<f32>>, String> {
        if req.law.is_none() && !need_cos_i {
            return Ok(None);
        }
        let inc = cube.incidence.as_ref().ok_or_else(|| {
            "the thermal column of this cube needs the incidence backplane".to_string()
        })?;
        let emi = cube.emission.as_ref();
        Ok(Some(Array2::from_shape_fn(inc.dim(), |(r, c)| {
            let mu0 = (inc[(r, c)] as f64).to_radians().cos();
            let mu = emi.map_or(1.0, |e| (e[(r, c)] as f64).to_radians().cos());
            let p = req.law.map_or(1.0, |l| l.factor(mu0, mu));
            (p * if need_cos_i { mu0 } else { 1.0 }) as f32
        })))
    };
    let (divisor, note) = match cube.quantity {
        Quantity::IOverF | Quantity::RadianceFactor => (
            law_factor(false)?,
            "I/F (radiance factor alike)".to_string(),
        ),
        Quantity::ReflectanceFactor => (
            law_factor(true)?,
            "reflectance factor: the I/F column divided by cos i".to_string(),
        ),
        Quantity::Undeclared => (
            law_factor(false)?,
            "the cube does not declare its quantity: the column assumes I/F".to_string(),
        ),
    };
    let note = match req.law {
        Some(l) => format!(
            "{note}, divided by the {} factor the spectra were",
            l.name()
        ),
        None => note,
    };
    Ok(Resolved::Fit(Plan {
        mode: if req.mode == Mode::Two {
            Mode::Two
        } else {
            Mode::One
        },
        range_k: req.range_k,
        emissivity: req.emissivity,
        sun_distance_au: sun_au,
        sun_distance_source: source,
        divisor,
        column_note: note,
    }))
}

impl Plan {
    /// The unit thermal columns of `bands` over the plan's range (I/F, unweighted).
    pub fn columns(&self, bands: &BandTable, sun: &Sun) -> Columns {
        let bands = bands.bands();
        let k: Vec<f64> = bands
            .iter()
            .map(|b| {
                let f = crate::library::resample::band_irradiance(sun, b).unwrap_or(f64::NAN);
                std::f64::consts::PI * self.emissivity * self.sun_distance_au.powi(2) / f
            })
            .collect();
        let quad: Vec<super::Quadrature> = bands.iter().map(super::Quadrature::of).collect();
        Columns::tabulate(self.range_k, bands.len(), |b, t| {
            quad[b].radiance(t).unwrap_or(0.0) * k[b]
        })
    }
}
