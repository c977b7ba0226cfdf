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
    let library = recipe.load_library()?;
    let mut cube = timings.time("read", || cube::load(path, &OpenOptions { hdu }))?;
    let kept = recipe
        .selection()
        .apply(&cube.info.bands)
        .map_err(|e| anyhow::anyhow!("{}: {e}", path.display()))?;
    cube.select_bands(&kept);
    let mut warnings = Vec::new();
    let law = recipe
        .photometry()
        .map_err(|e| anyhow::anyhow!("recipe: {e}"))?;
    if cube.info.quantity != Quantity::ReflectanceFactor && law.is_none() {
        warnings.push(format!(
            "{}: the cube declares its quantity as {}; unmixing assumes reflectance factor \
             (--photometry lambert divides I/F by cos i)",
            path.display(),
            cube.info.quantity.as_str()
        ));
    }
    if let Some(law) = law {
        let masked = crate::photometry::normalise(&mut cube, law)
            .map_err(|e| anyhow::anyhow!("{}: {e}", path.display()))?;
        if masked > 0 {
            warnings.push(format!(
                "photometry {}: {masked} pixels with a photometric factor below {} (grazing \
                 sun or night side) masked as no data",
                law.name(),
                crate::photometry::MIN_FACTOR
            ));
        }
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
    /// The observation time the cube declares, if any.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub observation_time: Option<String>,
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
        observation_time: p.cube.info.about.time.clone(),
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
        &out.stderr(),
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

/// Groups the unmixed pixels into units (the `map` stage after unmixing).
pub fn run_units(
    p: &Prepared,
    out: &UnmixOutput,
    recipe: &Recipe,
    progress: &dyn Progress,
) -> anyhow::Result<(crate::units::UnitMap, crate::units::MaterialSpectra)> {
    let params = recipe
        .unit_params()
        .map_err(|e| anyhow::anyhow!("recipe: {e}"))?;
    let rules = recipe.load_rules().map_err(anyhow::Error::msg)?;
    progress.stage("units", None);
    let materials: Vec<String> = out.ids.iter().filter(|i| *i != "shade").cloned().collect();
    let spectra = crate::units::MaterialSpectra::new(&p.library, &materials);
    let map = crate::units::classify(
        out,
        p.cube.backplanes.get(&crate::cube::Backplane::Emission),
        &spectra,
        &rules,
        &p.library,
        &params,
    )
    .map_err(|e| anyhow::anyhow!("{}: {e}", p.cube.info.path.display()))?;
    if map
        .units
        .iter()
        .filter(|u| u.class != crate::units::rules::UNEXPLAINED)
        .count()
        == 1
    {
        progress.warn("the map holds a single unit: the pixels are too alike to separate");
    }
    Ok((map, spectra))
}

/// The units part of `summary.json` (merged into the unmixing summary by `map`).
pub fn units_summary(map: &crate::units::UnitMap) -> serde_json::Value {
    let units: Vec<serde_json::Value> = map
        .units
        .iter()
        .map(|u| {
            let mut row = serde_json::json!({
                "unit": u.unit, "label": u.label, "class": u.class, "pixels": u.pixels,
                "area_fraction": u.area_fraction, "mean_rmse": u.mean_rmse,
                "colour": hex(u.colour),
            });
            for (i, id) in map.ids.iter().enumerate() {
                row[format!("mean_{id}")] = serde_json::json!(u.mean[i]);
                row[format!("std_{id}")] = serde_json::json!(u.std[i]);
            }
            row
        })
        .collect();
    serde_json::json!({
        "units": units,
        "classes": map.classes,
        "unexplained_pixels": map.unexplained_pixels,
        "unexplained_test": format!(
            "fit RMSE above {} × the median fit RMSE ({:.3e})",
            crate::units::UNEXPLAINED_FACTOR, map.noise_level
        ),
        "regions_before_min_area": map.regions_before,
        "regions_after_min_area": map.regions_after,
        "unit_count_scores": map.scores.iter().map(|(k, s)| serde_json::json!({"units": k, "score": s})).collect::<Vec<_>>(),
        "area_weighting": if map.area_weighted { "surface area: 1/cos(emission), emission capped at 80°" } else { "pixels" },
    })
}

use crate::render::colour::hex;

/// Writes the units products: `units.fits`, `units.png`, `units-legend.svg`,
/// `true-colour.png`, `units.csv`, `units-spectra.svg`.
pub fn write_unit_products(
    dir: &Path,
    p: &Prepared,
    out: &UnmixOutput,
    map: &crate::units::UnitMap,
) -> Result<(), crate::output::OutputError> {
    use crate::output::OutputError;
    let info = &p.cube.info;
    let fail = |name: &str, e: String| OutputError::Io {
        path: dir.join(name),
        error: std::io::Error::other(e),
    };
    results::write_labels(
        &dir.join("units.fits"),
        &map.labels,
        info,
        "surface unit (0 = no data)",
    )?;
    let bottom = info.format.row0_at_bottom();
    let unexplained = map
        .units
        .iter()
        .find(|u| u.class == crate::units::rules::UNEXPLAINED)
        .map(|u| u.unit as i16);
    let colours = map
        .units
        .iter()
        .map(|u| (u.unit as i16, u.colour))
        .collect();
    results::write_png(
        &dir.join("units.png"),
        &crate::render::maps::unit_map(map.labels.view(), &colours, unexplained, bottom),
    )?;
    let (tc, _) = crate::render::maps::true_colour(&p.cube);
    results::write_png(
        &dir.join("true-colour.png"),
        &crate::render::maps::enlarge(&tc, 512),
    )?;
    let rows: Vec<crate::render::units::LegendRow> = map
        .units
        .iter()
        .map(|u| crate::render::units::LegendRow {
            unit: u.unit,
            label: u.label.clone(),
            class: u.class.clone(),
            area_fraction: u.area_fraction,
            colour: u.colour,
            unexplained: Some(u.unit as i16) == unexplained,
        })
        .collect();
    let note = if map.area_weighted {
        "surface-area weighted"
    } else {
        "pixel fraction"
    };
    let legend =
        crate::render::units::legend_svg(&rows, note).map_err(|e| fail("units-legend.svg", e))?;
    crate::output::atomic::write_bytes(&dir.join("units-legend.svg"), legend.as_bytes())?;

    // units.csv: unit, label, class, pixels, area_fraction, mean_<id>…, std_<id>…, mean_rmse, colour
    let mut w = csv::Writer::from_writer(Vec::new());
    let mut header: Vec<String> = ["unit", "label", "class", "pixels", "area_fraction"]
        .iter()
        .map(|s| s.to_string())
        .collect();
    header.extend(map.ids.iter().map(|id| format!("mean_{id}")));
    header.extend(map.ids.iter().map(|id| format!("std_{id}")));
    header.push("mean_rmse".into());
    header.push("colour".into());
    let csv_err = |e: csv::Error| fail("units.csv", e.to_string());
    w.write_record(&header).map_err(csv_err)?;
    for u in &map.units {
        let mut row = vec![
            u.unit.to_string(),
            u.label.clone(),
            u.class.clone(),
            u.pixels.to_string(),
            format!("{:.6}", u.area_fraction),
        ];
        row.extend(u.mean.iter().map(|v| format!("{v:.6}")));
        row.extend(u.std.iter().map(|v| format!("{v:.6}")));
        row.push(format!("{:.6e}", u.mean_rmse));
        row.push(hex(u.colour));
        w.write_record(&row).map_err(csv_err)?;
    }
    let bytes = w
        .into_inner()
        .map_err(|e| fail("units.csv", e.to_string()))?;
    crate::output::atomic::write_bytes(&dir.join("units.csv"), &bytes)?;

    // units-spectra.svg: observed mean ± 1σ and the modelled mean per unit.
    let nb = info.bands.len();
    let centres = info.bands.centres_um();
    let mat = out.ids.iter().filter(|i| *i != "shade").count();
    let shade_plane = out.ids.iter().position(|i| i == "shade");
    let mut panels = Vec::new();
    for u in &map.units {
        let (mut sum, mut sq, mut model) = (vec![0.0; nb], vec![0.0; nb], vec![0.0; nb]);
        let mut n = 0.0;
        for ((r, c), l) in map.labels.indexed_iter() {
            if *l as usize != u.unit {
                continue;
            }
            n += 1.0;
            let bright = shade_plane.map_or(1.0, |s| 1.0 - out.abundance[(r, c, s)] as f64);
            for b in 0..nb {
                let y = p.cube.data[(r, c, b)] as f64;
                sum[b] += y;
                sq[b] += y * y;
                let fit: f64 = (0..mat)
                    .map(|j| p.model.e[(b, j)] * out.abundance[(r, c, j)] as f64)
                    .sum();
                model[b] += bright * fit;
            }
        }
        if n == 0.0 {
            continue;
        }
        let mean: Vec<f64> = sum.iter().map(|s| s / n).collect();
        let std: Vec<f64> = sq
            .iter()
            .zip(&mean)
            .map(|(q, m)| (q / n - m * m).max(0.0).sqrt())
            .collect();
        panels.push(crate::render::units::UnitSpectrum {
            title: format!("{}: {} ({} px)", u.unit, u.label, u.pixels),
            colour: u.colour,
            centres_um: centres.clone(),
            mean,
            std,
            model: model.iter().map(|m| m / n).collect(),
        });
    }
    let svg =
        crate::render::units::spectra_svg(&panels).map_err(|e| fail("units-spectra.svg", e))?;
    crate::output::atomic::write_bytes(&dir.join("units-spectra.svg"), svg.as_bytes())
}

/// An error of one stage of the main job.
#[derive(Debug)]
pub struct StageError {
    pub stage: &'static str,
    pub error: anyhow::Error,
}

impl std::fmt::Display for StageError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{:#}", self.error)
    }
}

impl std::error::Error for StageError {}

fn at<T, E: Into<anyhow::Error>>(stage: &'static str, r: Result<T, E>) -> Result<T, StageError> {
    r.map_err(|e| StageError {
        stage,
        error: e.into(),
    })
}

/// The main job for one cube: read, unmix, map units, write the whole results folder into
/// `out` (which the caller has prepared), `run.json` last.
pub fn map_cube(
    cube: &Path,
    hdu: Option<String>,
    out: &Path,
    recipe: &Recipe,
    threads: usize,
    progress: &dyn Progress,
) -> Result<crate::units::UnitMap, StageError> {
    let mut timings = Timings::default();
    let prepared = at("read", prepare(cube, hdu, recipe, &mut timings))?;
    for w in &prepared.warnings {
        progress.warn(w);
    }
    let unmixed = timings.time("unmix", || run_unmix(&prepared, recipe, progress));
    let (map, _) = at(
        "units",
        timings.time("units", || run_units(&prepared, &unmixed, recipe, progress)),
    )?;
    at(
        "write",
        timings.time("write", || -> Result<(), crate::output::OutputError> {
            write_unmix_products(out, &prepared, &unmixed)?;
            write_unit_products(out, &prepared, &unmixed, &map)
        }),
    )?;
    let mut summary = at(
        "write",
        serde_json::to_value(unmix_summary(&prepared, &unmixed, &prepared.warnings)),
    )?;
    if let (Some(s), serde_json::Value::Object(u)) = (summary.as_object_mut(), units_summary(&map))
    {
        s.extend(u);
    }
    at(
        "write",
        results::write_json(&out.join("summary.json"), &summary),
    )?;
    at("write", write_timings(out, &timings, threads))?;
    let record = at("write", run_record("map", &prepared, recipe))?;
    at("write", results::write_json(&out.join("run.json"), &record))?;
    Ok(map)
}
