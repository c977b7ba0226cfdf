//! The results folder of one cube, as the results-folder contract names its files, and
//! the only code that writes into it.
//!
//! | file | product ([`products`]) |
//! |---|---|
//! | `abundance.fits`, `stderr.fits`, `covariance.fits` (with covariance), `fit-rmse.fits`, `fit-flags.fits`, `residual.fits` (with residuals) | FITS planes |
//! | `abundance/<id>.png`, `fit-rmse.png` | greyscale maps with a colour bar |
//! | `units.fits`, `units.png`, `true-colour.png`, `units-legend.svg`, `units.csv`, `units-spectra.svg` | `map` only |
//! | `summary.json` | [`summary`] |
//! | `timings.json`, `run.json` | [`provenance`]; `run.json` is written last: its presence marks a complete folder |
//!
//! [`write_folder`] writes them in that order. Adding a product means adding one function
//! to [`products`] and one line to `write_products`. Every file is written atomically
//! ([`crate::atomic`]); this module computes nothing a result depends on: it turns the
//! pipeline's data into bytes.

pub mod change;
pub mod products;
pub mod provenance;
pub mod read;
pub mod summary;
pub mod targets;

use std::path::Path;

use crate::atomic::{self, WriteError};
use crate::cube::Cube;
use crate::library::Library;
use crate::recipe::Recipe;
use crate::units::UnitMap;
use crate::unmix::{Model, UnmixOutput};

pub use provenance::{input_records, peak_rss_bytes, sha256_file, InputRecord, Timings};

/// Everything a results folder is made from: one cube's data and what was made of it.
pub struct CubeResult<'a> {
    /// `unmix` or `map`, as `run.json` records it.
    pub command: &'a str,
    /// The input files with their SHA-256 ([`input_records`]), as `run.json` records them.
    pub inputs: &'a [InputRecord],
    pub cube: &'a Cube,
    pub library: &'a Library,
    pub model: &'a Model,
    /// The band weights the model and the cube were scaled by.
    pub weights: &'a crate::unmix::weights::BandWeights,
    pub unmixed: &'a UnmixOutput,
    /// The surface units (`map` only).
    pub units: Option<&'a UnitMap>,
    /// The thermal fit, when one ran.
    pub thermal: Option<&'a crate::thermal::ThermalResult>,
    pub recipe: &'a Recipe,
    /// The warnings the run gave, recorded in `summary.json`.
    pub warnings: &'a [String],
}

/// Refuses `dir` when it exists, is not empty and `overwrite` is not given. Creates
/// nothing: commands call it before reading their inputs, and [`prepare`] once there is
/// something to write.
pub fn check_folder(dir: &Path, overwrite: bool) -> Result<(), WriteError> {
    if overwrite || !dir.exists() {
        return Ok(());
    }
    let non_empty = std::fs::read_dir(dir)
        .map_err(|source| WriteError::Io {
            path: dir.to_path_buf(),
            error: source,
        })?
        .next()
        .is_some();
    if non_empty {
        return Err(WriteError::Exists {
            path: dir.to_path_buf(),
        });
    }
    Ok(())
}

/// Prepares `dir`: refuses an existing non-empty folder unless `overwrite`; with it,
/// removes `run.json` first so the folder reads as incomplete until the run ends, and any
/// temporaries a killed run left behind.
pub fn prepare(dir: &Path, overwrite: bool) -> Result<(), WriteError> {
    let io = |source| WriteError::Io {
        path: dir.to_path_buf(),
        error: source,
    };
    if dir.exists() {
        check_folder(dir, overwrite)?;
        let run = dir.join("run.json");
        if run.exists() {
            std::fs::remove_file(&run).map_err(|source| WriteError::Io {
                path: run,
                error: source,
            })?;
        }
        // A killed run may have left temporaries; they are never results.
        atomic::remove_stale_temporaries(dir).map_err(io)?;
    }
    std::fs::create_dir_all(dir).map_err(io)
}

/// Writes the whole folder `dir` (prepared by [`prepare`]): the data products and
/// `summary.json` (timed as the `write` stage), then `timings.json` and, last, `run.json`. Once this
/// returns, the folder is complete.
pub fn write_folder(
    dir: &Path,
    r: &CubeResult,
    mut timings: Timings,
    threads: usize,
    before_run: &dyn Fn(&str) -> Result<(), WriteError>,
) -> Result<(), WriteError> {
    let steps = timings.time("write", || write_products(dir, r))?;
    timings.steps("write", &steps);
    provenance::write_timings(dir, &timings, threads)?;
    let run = provenance::run_record_text(r);
    // The report (`--report`) goes here: after every other product, before run.json.
    before_run(&run)?;
    atomic::write_bytes(&dir.join("run.json"), run.as_bytes())
}

/// One product's writer, as [`write_products`] runs it.
type Job<'s> = (
    &'static str,
    Box<dyn Fn() -> Result<(), WriteError> + Send + Sync + 's>,
);

/// The data products and the summary, everything but the provenance. Each product is
/// its own file(s) and reads only the finished result, so they are written in parallel
/// (rayon's pool, the run's threads); each is written whole under a temporary name first
/// ([`atomic`]), so a failure leaves no partial product under its final name. The first
/// error in product order is returned. Returns each product's own wall time (they overlap).
fn write_products(dir: &Path, r: &CubeResult) -> Result<Vec<(&'static str, f64)>, WriteError> {
    use rayon::prelude::*;
    // Drawn once, for both pictures that show it.
    let tc = (r.thermal.is_some() || r.units.is_some()).then(|| products::true_colour_image(r));
    let tc = tc.as_ref();
    // Computed once, for stderr.fits and the summary's mean errors.
    let stderr = r.unmixed.stderr();
    let stderr = &stderr;
    let mut jobs: Vec<Job> = vec![
        (
            "summary.json",
            Box::new(|| products::summary(dir, r, stderr)),
        ),
        (
            "abundance.fits",
            Box::new(|| products::abundance_planes(dir, r)),
        ),
        (
            "stderr.fits",
            Box::new(|| products::stderr_planes(dir, r, stderr)),
        ),
        (
            "covariance.fits",
            Box::new(|| products::covariance_planes(dir, r)),
        ),
        (
            "fit-rmse.fits",
            Box::new(|| products::fit_rmse_plane(dir, r)),
        ),
        (
            "fit-flags.fits",
            Box::new(|| products::fit_flags_plane(dir, r)),
        ),
        (
            "thermal.fits",
            Box::new(|| products::thermal_planes(dir, r)),
        ),
        (
            "hot spot tables",
            Box::new(|| products::hot_spot_tables(dir, r)),
        ),
        (
            "residual.fits",
            Box::new(|| products::residual_planes(dir, r)),
        ),
        (
            "fit-rmse.png",
            Box::new(|| products::fit_rmse_picture(dir, r)),
        ),
    ];
    // One job per abundance picture: they are the most numerous.
    for j in 0..r.unmixed.ids.len() {
        jobs.push((
            "abundance pictures",
            Box::new(move || products::abundance_picture(dir, r, j)),
        ));
    }
    if let Some(tc) = tc {
        jobs.push((
            "hot spot picture",
            Box::new(move || products::hot_spot_picture(dir, r, tc)),
        ));
    }
    if let Some(map) = r.units {
        jobs.push((
            "units.fits",
            Box::new(move || products::units_plane(dir, r, map)),
        ));
        jobs.push((
            "units.png",
            Box::new(move || products::units_picture(dir, r, map)),
        ));
        if let Some(tc) = tc {
            jobs.push((
                "true-colour.png",
                Box::new(move || products::true_colour_picture(dir, tc)),
            ));
        }
        jobs.push((
            "units-legend.svg",
            Box::new(move || products::units_legend(dir, map)),
        ));
        jobs.push((
            "units.csv",
            Box::new(move || products::units_table(dir, r, map)),
        ));
        jobs.push((
            "units-spectra.svg",
            Box::new(move || products::units_spectra(dir, r, map)),
        ));
    }
    let done: Vec<(&'static str, f64, Result<(), WriteError>)> = jobs
        .par_iter()
        .map(|(name, job)| {
            let t = std::time::Instant::now();
            let result = job();
            (*name, t.elapsed().as_secs_f64(), result)
        })
        .collect();
    let mut steps: Vec<(&'static str, f64)> = Vec::new();
    for (name, seconds, result) in done {
        result?;
        match steps.iter_mut().find(|(n, _)| *n == name) {
            Some(step) => step.1 += seconds,
            None => steps.push((name, seconds)),
        }
    }
    Ok(steps)
}

/// Writes pretty JSON with a final newline.
pub fn write_json(path: &Path, value: &impl serde::Serialize) -> Result<(), WriteError> {
    let text = serde_json::to_string_pretty(value).expect("output types serialise") + "\n";
    atomic::write_bytes(path, text.as_bytes())
}
