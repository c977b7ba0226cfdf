//! The pipeline of one cube, stage by stage, writing the results folder: read → select
//! bands → resample the library → build the model → unmix → write. `map` and `batch`
//! build on the same stages. Progress and messages go through [`Progress`], so this
//! module never prints.

use std::path::Path;
use std::time::Instant;

use serde::Serialize;

use crate::cube::{self, Cube, OpenOptions, Quantity};
use crate::library::resample::resample;
use crate::library::Library;
use crate::output::results::{self, InputRecord};
use crate::recipe::Recipe;
use crate::unmix::{self, Model, RunOptions, UnmixOutput};

/// Receives progress from the pipeline; the command line draws it.
pub trait Progress: Sync {
    /// A stage starts; `total` rows of work when the stage reports rows.
    fn stage(&self, name: &str, total_rows: Option<usize>);
    /// Rows finished in the current stage.
    fn rows(&self, done: usize);
    /// A warning for the user.
    fn warn(&self, message: &str);
}

/// Wall time per stage.
#[derive(Debug, Default, Serialize)]
pub struct Timings {
    pub stages: Vec<StageTime>,
}

#[derive(Debug, Serialize)]
pub struct StageTime {
    pub stage: String,
    pub seconds: f64,
}

impl Timings {
    pub fn time<T>(&mut self, name: &str, f: impl FnOnce() -> T) -> T {
        let t = Instant::now();
        let out = f();
        self.stages.push(StageTime {
            stage: name.into(),
            seconds: t.elapsed().as_secs_f64(),
        });
        out
    }
}

/// A cube, the library and the model, ready to unmix.
pub struct Prepared {
    pub cube: Cube,
    pub library: Library,
    pub model: Model,
    pub warnings: Vec<String>,
}

/// Reads the cube, applies the band selection, resamples the library and builds the model.
pub fn prepare(
    path: &Path,
    hdu: Option<String>,
    recipe: &Recipe,
    timings: &mut Timings,
) -> anyhow::Result<Prepared> {
    use anyhow::Context as _;
    let params = recipe
        .unmix_params()
        .map_err(|e| anyhow::anyhow!("recipe: {e}"))?;
    let library = if recipe.library == "embedded" {
        Library::embedded()
    } else {
        Library::load(Path::new(&recipe.library))?
    };
    let mut cube = timings.time("read", || cube::load(path, &OpenOptions { hdu }))?;
    let kept = recipe
        .selection()
        .apply(&cube.info.bands)
        .map_err(|e| anyhow::anyhow!("{}: {e}", path.display()))?;
    cube.select_bands(&kept);
    let mut warnings = Vec::new();
    if cube.info.quantity != Quantity::ReflectanceFactor {
        warnings.push(format!(
            "{}: the cube declares its quantity as {}; unmixing assumes reflectance factor \
             (photometric normalisation is not yet available)",
            path.display(),
            cube.info.quantity.as_str()
        ));
    }
    let resampled = resample(&library, &cube.info.bands)
        .with_context(|| format!("{}: resampling the library to its bands", path.display()))?;
    let model = Model::build(&resampled, &params)
        .with_context(|| format!("{}: building the endmember model", path.display()))?;
    if let Some(k) = model.subset_size {
        if params.subsets == unmix::Subsets::Auto {
            warnings.push(format!(
                "the band set cannot separate the whole library ({} unknowns, {} bands, \
                 condition number {:.3e}): using subset mode with up to {k} members per pixel",
                model.columns(),
                model.bands(),
                model.condition
            ));
        }
    }
    if params.force && model.condition > unmix::params::MAX_CONDITION {
        warnings.push(format!(
            "--force: unmixing although the condition number is {:.3e}",
            model.condition
        ));
    }
    Ok(Prepared {
        cube,
        library,
        model,
        warnings,
    })
}

/// Runs the unmixing stage with progress.
pub fn run_unmix(p: &Prepared, recipe: &Recipe, progress: &dyn Progress) -> UnmixOutput {
    let opts = RunOptions {
        report_shade: recipe.shade,
        noise: recipe.noise,
        residuals: recipe.residuals,
    };
    progress.stage("unmix", Some(p.cube.info.rows));
    let report = |done: usize| progress.rows(done);
    if recipe.precision == "f64" {
        unmix::unmix::<f64>(&p.cube, &p.model, &opts, &report)
    } else {
        unmix::unmix::<f32>(&p.cube, &p.model, &opts, &report)
    }
}

#[derive(Serialize)]
struct GroupRecord<'a> {
    id: &'a str,
    members: &'a [String],
}

/// What `summary.json` holds after unmixing (extended by `map`).
#[derive(Serialize)]
pub struct UnmixSummary<'a> {
    pub cube: String,
    pub endmembers: &'a [String],
    pub groups: serde_json::Value,
    pub per_member: Vec<unmix::PlaneStats>,
    pub nodata_pixels: usize,
    pub masked_pixels: serde_json::Value,
    pub unmixed_pixels: usize,
    pub mean_rmse: f64,
    pub solver: &'static str,
    pub shade: bool,
    pub subset_size: Option<usize>,
    pub bands_used: usize,
    pub condition_number: Option<f64>,
    pub enumerated_pixels: usize,
    pub warnings: &'a [String],
}

/// Builds the unmixing part of `summary.json`.
pub fn unmix_summary<'a>(
    p: &'a Prepared,
    out: &'a UnmixOutput,
    warnings: &'a [String],
) -> UnmixSummary<'a> {
    let c = out.counts;
    let (mut s, mut n) = (0.0, 0usize);
    for ((r, cc), ok) in out.unmixed.indexed_iter() {
        if *ok {
            s += out.rmse[(r, cc)] as f64;
            n += 1;
        }
    }
    UnmixSummary {
        cube: name_of(&p.cube.info.path),
        endmembers: &out.ids,
        groups: serde_json::to_value(
            p.model
                .groups
                .iter()
                .map(|g| GroupRecord {
                    id: &g.id,
                    members: &g.members,
                })
                .collect::<Vec<_>>(),
        )
        .expect("groups serialise"),
        per_member: unmix::plane_stats(out),
        nodata_pixels: c.nodata + c.zero_signal + c.dark,
        masked_pixels: serde_json::json!({
            "input_nodata": c.nodata,
            "zero_signal": c.zero_signal,
            "too_dark": c.dark,
        }),
        unmixed_pixels: c.unmixed,
        mean_rmse: if n > 0 { s / n as f64 } else { f64::NAN },
        solver: p.model.solver.name(),
        shade: p.model.shade,
        subset_size: p.model.subset_size,
        bands_used: p.model.bands(),
        condition_number: p.model.condition.is_finite().then_some(p.model.condition),
        enumerated_pixels: c.enumerated,
        warnings,
    }
}

fn name_of(p: &Path) -> String {
    p.file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default()
}

/// Writes the unmixing products into `dir` (everything but summary, run and timings).
pub fn write_unmix_products(
    dir: &Path,
    p: &Prepared,
    out: &UnmixOutput,
) -> Result<(), crate::output::OutputError> {
    let info = &p.cube.info;
    results::write_planes(
        &dir.join("abundance.fits"),
        &out.ids,
        &out.abundance,
        info,
        "abundance: materials sum to 1 without shade; shade last",
    )?;
    results::write_planes(
        &dir.join("stderr.fits"),
        &out.ids,
        &out.stderr,
        info,
        "standard errors of the abundances",
    )?;
    results::write_plane(
        &dir.join("fit-rmse.fits"),
        &out.rmse,
        info,
        "fit RMSE, reflectance",
    )?;
    if let Some(res) = &out.residual {
        let ids: Vec<String> = info
            .bands
            .centres_um()
            .iter()
            .map(|c| format!("{c}"))
            .collect();
        results::write_planes(
            &dir.join("residual.fits"),
            &ids,
            res,
            info,
            "residual y - Ea per band",
        )?;
    }
    let bottom = info.format.row0_at_bottom();
    for (j, id) in out.ids.iter().enumerate() {
        let plane = out.abundance.index_axis(ndarray::Axis(2), j);
        let img = crate::render::maps::grey_map(
            plane,
            out.unmixed.view(),
            bottom,
            (0.0, 1.0),
            &format!("abundance of {id}"),
        );
        results::write_png(&dir.join("abundance").join(format!("{id}.png")), &img)?;
    }
    let mut rm: Vec<f32> = out.rmse.iter().cloned().filter(|v| v.is_finite()).collect();
    rm.sort_by(f32::total_cmp);
    let hi = rm
        .get(rm.len().saturating_sub(1) * 99 / 100)
        .cloned()
        .unwrap_or(1.0)
        .max(1e-6);
    let img = crate::render::maps::grey_map(
        out.rmse.view(),
        out.unmixed.view(),
        bottom,
        (0.0, hi),
        "fit RMSE (reflectance; bar clipped at the 99th percentile)",
    );
    results::write_png(&dir.join("fit-rmse.png"), &img)
}

/// The provenance record `run.json`.
#[derive(Serialize)]
pub struct RunRecord<'a> {
    pub tool: &'static str,
    pub version: &'static str,
    pub command: &'a str,
    pub inputs: Vec<InputRecord>,
    pub library: serde_json::Value,
    pub recipe: &'a Recipe,
    pub conventions: serde_json::Value,
}

/// Builds `run.json` for a cube's results.
pub fn run_record<'a>(
    command: &'a str,
    p: &Prepared,
    recipe: &'a Recipe,
) -> Result<RunRecord<'a>, crate::output::OutputError> {
    Ok(RunRecord {
        tool: "thiomap",
        version: crate::VERSION,
        command,
        inputs: results::input_records(&p.cube.info.inputs)?,
        library: serde_json::json!({
            "name": p.library.name,
            "version": p.library.version,
            "sha256": p.library.sha256(),
        }),
        recipe,
        conventions: serde_json::json!({
            "row_order": "row 0 is the first row stored; FITS pictures draw it at the bottom, others at the top",
            "nodata": "NaN in float planes",
            "quantity_declared": p.cube.info.quantity.as_str(),
            "quantity_assumed": "reflectance-factor",
            "abundances": "materials renormalised to sum to one without shade; shade fraction reported separately",
        }),
    })
}

/// Writes `timings.json`.
pub fn write_timings(
    dir: &Path,
    timings: &Timings,
    threads: usize,
) -> Result<(), crate::output::OutputError> {
    let total: f64 = timings.stages.iter().map(|s| s.seconds).sum();
    results::write_json(
        &dir.join("timings.json"),
        &serde_json::json!({
            "stages": timings.stages,
            "total_seconds": total,
            "peak_rss_bytes": results::peak_rss_bytes(),
            "threads": threads,
            "host": std::fs::read_to_string("/etc/hostname").unwrap_or_default().trim(),
        }),
    )
}
