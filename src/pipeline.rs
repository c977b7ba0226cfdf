//! The pipeline of one cube, stage by stage: read → select bands → photometric
//! normalisation → resample the library → build the model → unmix → (for `map`) units →
//! write the results folder. [`run_cube`] is the one stage sequence that `unmix`, `map`
//! and `batch` all use, so "inputs are read before the folder is made" and "`run.json` is
//! written last" hold in one place. Progress and messages go through [`Progress`], so this
//! module never prints; the bytes of every file are [`crate::results`]'.

use std::path::Path;

use crate::cube::{self, Cube, OpenOptions, Quantity};
use crate::library::resample::resample;
use crate::recipe::CheckedRecipe;
use crate::results::{self, CubeResult, Timings};
use crate::units::{self, UnitMap};
use crate::unmix::weights::{self, BandWeighting, BandWeights, WeightSource};
use crate::unmix::{self, Model, Precision, UnmixOutput};

/// Receives progress from the pipeline; the command line draws it.
pub trait Progress: Sync {
    /// A stage starts; `total` rows of work when the stage reports rows.
    fn stage(&self, name: &str, total_rows: Option<usize>);
    /// Rows finished in the current stage.
    fn rows(&self, done: usize);
    /// A warning for the user.
    fn warn(&self, message: &str);
    /// Batches: the number of cubes that failed so far.
    fn failures(&self, _count: usize) {}
}

/// A cube and the model, ready to unmix.
pub struct Prepared {
    pub cube: Cube,
    /// The model of the weighted problem (its endmember rows scaled by the band weights).
    pub model: Model,
    /// The band weights the cube is scaled by while it is unmixed.
    pub weights: BandWeights,
    /// The thermal fit to run after unmixing, when there is one.
    pub thermal: Option<crate::thermal::plan::Plan>,
    pub warnings: Vec<String>,
}

/// Reads the cube, applies the band selection and the photometric law, resamples the
/// library and builds the model.
pub fn prepare(
    path: &Path,
    hdu: Option<String>,
    recipe: &CheckedRecipe,
    timings: &mut Timings,
) -> anyhow::Result<Prepared> {
    use anyhow::Context as _;
    let mut cube = timings.time("read", || cube::load(path, &OpenOptions { hdu }))?;
    let kept = recipe
        .selection()
        .apply(&cube.info.bands)
        .map_err(|e| anyhow::anyhow!("{}: {e}", path.display()))?;
    cube.select_bands(&kept);
    let mut warnings = Vec::new();
    let law = recipe.photometry();
    // I/F and the radiance factor differ from the reflectance factor by a brightness per
    // pixel (cos i, topography), which the shade member absorbs; without shade it needs
    // the photometric law.
    let shade_absorbs = recipe.unmix_params().shade
        && matches!(
            cube.info.quantity,
            Quantity::IOverF | Quantity::RadianceFactor
        );
    if cube.info.quantity != Quantity::ReflectanceFactor && law.is_none() && !shade_absorbs {
        warnings.push(format!(
            "{}: the cube declares its quantity as {}; unmixing assumes reflectance factor \
             (--photometry lambert divides I/F by cos i)",
            path.display(),
            cube.info.quantity.as_str()
        ));
    }
    if let Some(law) = law {
        let masked =
            normalise(&mut cube, law).map_err(|e| anyhow::anyhow!("{}: {e}", path.display()))?;
        if masked > 0 {
            warnings.push(format!(
                "photometry {}: {masked} pixels with a photometric factor below {} (grazing \
                 sun or night side) masked as no data",
                law.name(),
                crate::photometry::MIN_FACTOR
            ));
        }
    }
    let params = recipe.unmix_params();
    let resampled = resample(recipe.library(), &cube.info.bands)
        .with_context(|| format!("{}: resampling the library to its bands", path.display()))?;
    let (model, weights, warning) =
        weighted_model(&cube, &resampled, params, recipe.band_weighting(), timings)
            .with_context(|| format!("{}: building the endmember model", path.display()))?;
    warnings.extend(warning);
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
    let r = recipe.recipe();
    let request = crate::thermal::plan::Request {
        mode: r.thermal,
        range_k: (r.thermal_range_k[0], r.thermal_range_k[1]),
        emissivity: r.emissivity,
        sun_distance_au: r.sun_distance_au,
        law,
    };
    let facts = crate::thermal::plan::CubeFacts {
        bands: &cube.info.bands,
        quantity: cube.info.quantity,
        sun_distance_au: cube.info.about.sun_distance_au,
        incidence: cube
            .backplanes
            .get(&cube::Backplane::Incidence)
            .map(|a| a.view()),
        emission: cube
            .backplanes
            .get(&cube::Backplane::Emission)
            .map(|a| a.view()),
    };
    let thermal = match crate::thermal::plan::resolve(
        &request,
        &facts,
        crate::library::solar::Sun::embedded(),
    )
    .map_err(|e| anyhow::anyhow!("{}: {e}", path.display()))?
    {
        crate::thermal::plan::Resolved::Fit(plan) => Some(plan),
        crate::thermal::plan::Resolved::Off(note) => {
            warnings.extend(note);
            None
        }
    };
    Ok(Prepared {
        cube,
        model,
        weights,
        thermal,
        warnings,
    })
}

/// Divides the cube's spectra by the photometric law of its backplanes; returns the
/// pixels masked because their factor was too small.
pub fn normalise(
    cube: &mut Cube,
    law: crate::photometry::Law,
) -> Result<usize, crate::photometry::PhotometryError> {
    crate::photometry::normalise(
        cube.data.view_mut(),
        cube.valid.view_mut(),
        &cube.backplanes,
        law,
    )
}

/// The band weights of a cube ([`weights`]) and the model of the weighted problem: the
/// endmember matrix's rows scaled by them. Also a warning when `auto` had nothing to
/// estimate from.
pub fn weighted_model(
    cube: &Cube,
    resampled: &crate::library::resample::Resampled,
    params: &unmix::UnmixParams,
    how: BandWeighting,
    timings: &mut Timings,
) -> anyhow::Result<(Model, BandWeights, Option<String>)> {
    let nb = cube.info.bands.len();
    let weights = match (how, cube.info.bands.noise_sigma()) {
        (BandWeighting::None, _) => BandWeights::uniform(nb),
        (BandWeighting::Auto, Some(sigma)) => {
            BandWeights::from_sigma(sigma, WeightSource::BandTable)
        }
        (BandWeighting::Auto, None) => {
            // The unweighted model: the first round of the estimate, or the answer when
            // the weights stay uniform.
            let plain = Model::build(resampled, params)?;
            if !weights::can_estimate(plain.columns(), nb) {
                let mut w = BandWeights::uniform(nb);
                w.note = Some(format!(
                    "the band table states no noise_sigma and {nb} bands are too few to \
                     estimate each band's noise from the residuals (at least four per \
                     unknown): every band weighs 1"
                ));
                return Ok((plain, w, None));
            }
            let estimate = timings.time("band weights", || {
                weights::estimate_sigma(
                    cube.data.view(),
                    cube.valid.view(),
                    resampled,
                    &plain,
                    params,
                )
            })?;
            match estimate {
                Some(sigma) => BandWeights::from_sigma(&sigma, WeightSource::Residuals),
                None => {
                    let warning = "band weights: too few pixels fit to estimate each band's \
                                   noise; every band weighs 1"
                        .to_string();
                    return Ok((plain, BandWeights::uniform(nb), Some(warning)));
                }
            }
        }
    };
    let model = if weights.is_uniform() {
        Model::build(resampled, params)?
    } else {
        Model::build(&resampled.weighted(&weights.weights), params)?
    };
    Ok((model, weights, None))
}

/// Multiplies (or, `invert`, divides) each band of `data` (rows × cols × bands) by its
/// weight.
pub fn scale_bands(data: &mut ndarray::Array3<f32>, weights: &[f64], invert: bool) {
    use rayon::prelude::*;
    let f: Vec<f32> = weights
        .iter()
        .map(|&w| if invert { 1.0 / w } else { w } as f32)
        .collect();
    let nb = f.len();
    match data.as_slice_mut() {
        // Spectra are contiguous: one pass over memory, in parallel.
        Some(all) if nb > 0 => all.par_chunks_mut(nb * 4096).for_each(|chunk| {
            for spectrum in chunk.chunks_exact_mut(nb) {
                spectrum.iter_mut().zip(&f).for_each(|(v, f)| *v *= f);
            }
        }),
        _ => {
            for (b, &f) in f.iter().enumerate() {
                data.index_axis_mut(ndarray::Axis(2), b)
                    .mapv_inplace(|v| v * f);
            }
        }
    }
}

/// Runs the unmixing stage with progress. The cube's bands are scaled by the band weights
/// for the solver and scaled back afterwards (to within an f32 rounding); the residuals
/// are reported unweighted, in the cube's units.
pub fn run_unmix(p: &mut Prepared, recipe: &CheckedRecipe, progress: &dyn Progress) -> UnmixOutput {
    let opts = &p.weights.apply(*recipe.run_options());
    progress.stage("unmix", Some(p.cube.info.rows));
    let report = |done: usize| progress.rows(done);
    let weighted = !p.weights.is_uniform();
    if weighted {
        scale_bands(&mut p.cube.data, &p.weights.weights, false);
    }
    let (data, valid) = (p.cube.data.view(), p.cube.valid.view());
    let mut out = match recipe.precision() {
        Precision::F64 => unmix::unmix::<f64>(data, valid, &p.model, opts, &report),
        Precision::F32 => unmix::unmix::<f32>(data, valid, &p.model, opts, &report),
    };
    if weighted {
        scale_bands(&mut p.cube.data, &p.weights.weights, true);
        if let Some(r) = out.residual.as_mut() {
            scale_bands(r, &p.weights.weights, true);
        }
    }
    out
}

/// Groups the unmixed pixels into units (the `map` stage after unmixing).
pub fn run_units(
    p: &Prepared,
    out: &UnmixOutput,
    recipe: &CheckedRecipe,
    progress: &dyn Progress,
) -> anyhow::Result<UnitMap> {
    let (params, rules) = recipe
        .units()
        .ok_or_else(|| anyhow::anyhow!("the recipe was checked for unmixing only"))?;
    progress.stage("units", None);
    let materials: Vec<String> = out.ids.iter().filter(|i| *i != "shade").cloned().collect();
    let library = recipe.library();
    let spectra = units::MaterialSpectra::new(library, &materials);
    let plane = |b| p.cube.backplanes.get(&b);
    let geometry = units::Geometry {
        latitude: plane(cube::Backplane::Latitude),
        longitude: plane(cube::Backplane::Longitude),
        emission: plane(cube::Backplane::Emission),
    };
    let map = units::classify(out, geometry, &spectra, rules, library, params)
        .map_err(|e| anyhow::anyhow!("{}: {e}", p.cube.info.path.display()))?;
    if map
        .units
        .iter()
        .filter(|u| u.class != units::rules::UNEXPLAINED)
        .count()
        == 1
    {
        progress.warn("the map holds a single unit: the pixels are too alike to separate");
    }
    Ok(map)
}

/// Fits emission where the screen finds it ([`crate::thermal::stage`]), updating the
/// unmixing output of the fitted pixels.
pub fn run_thermal(
    p: &Prepared,
    out: &mut UnmixOutput,
    recipe: &CheckedRecipe,
    progress: &dyn Progress,
) -> Option<crate::thermal::stage::ThermalOutput> {
    let plan = p.thermal.as_ref()?;
    progress.stage("thermal", None);
    let centres = p.cube.info.bands.centres_um();
    let inputs = crate::thermal::stage::Inputs {
        data: p.cube.data.view(),
        weights: &p.weights.weights,
        centres_um: &centres,
        model: &p.model,
        divisor: plan.divisor.as_ref().map(|d| d.view()),
        mode: plan.mode,
        range_k: plan.range_k,
        noise: recipe.run_options().noise,
    };
    let sun = crate::library::solar::Sun::embedded();
    Some(crate::thermal::stage::run(&inputs, out, || {
        plan.columns(&p.cube.info.bands, sun)
    }))
}

/// The hot-spot table of a thermal output, with areas in km² when the recipe gives the
/// body's radius and the cube the latitude and longitude backplanes.
pub fn hot_spots(
    p: &Prepared,
    output: &crate::thermal::stage::ThermalOutput,
    map: Option<&UnitMap>,
    recipe: &CheckedRecipe,
) -> Vec<crate::thermal::spots::HotSpot> {
    let plane = |b| p.cube.backplanes.get(&b);
    let lat_lon = match (
        plane(cube::Backplane::Latitude),
        plane(cube::Backplane::Longitude),
    ) {
        (Some(a), Some(b)) => Some((a.view(), b.view())),
        _ => None,
    };
    let area = match (lat_lon, recipe.recipe().body_radius_km) {
        (Some((lat, lon)), Some(radius)) => {
            units::area::cell_areas_sr(lat, lon).map(|sr| sr.mapv(|s| s * radius * radius))
        }
        _ => None,
    };
    let names: Vec<String> = map
        .map(|m| m.units.iter().map(|u| u.label.clone()).collect())
        .unwrap_or_default();
    crate::thermal::spots::hot_spots(&crate::thermal::spots::SpotInputs {
        fitted: output.fitted.view(),
        planes: output.planes.view(),
        components: output.components,
        lat_lon,
        area_km2: area.as_ref().map(|a| a.view()),
        emissivity: p.thermal.as_ref().map_or(1.0, |t| t.emissivity),
        units: map.map(|m| (m.labels.view(), names.as_slice())),
    })
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

/// What a job makes of one cube.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Job {
    /// Abundances, fit RMSE and standard errors.
    Unmix,
    /// The main job: unmixing, then surface units.
    Map,
}

impl Job {
    /// The command name `run.json` records.
    pub fn name(self) -> &'static str {
        match self {
            Job::Unmix => "unmix",
            Job::Map => "map",
        }
    }
}

/// Where a job writes: the results folder, and whether an existing one may be replaced.
#[derive(Debug, Clone, Copy)]
pub struct Destination<'a> {
    pub dir: &'a Path,
    pub overwrite: bool,
    /// Also write `report.html` (before `run.json`).
    pub report: bool,
}

/// What a finished job reports to its caller.
#[derive(Debug, Clone)]
pub struct Outcome {
    /// The plane ids written.
    pub ids: Vec<String>,
    pub counts: unmix::Counts,
    /// Pixels of the cube.
    pub pixels: usize,
    /// The surface units (`map`).
    pub units: Option<UnitMap>,
}

/// One cube, start to end: read and check the inputs, only then prepare the results folder
/// (refusing an existing one unless `overwrite`), unmix, map units for [`Job::Map`], and
/// write every product, `run.json` last.
pub fn run_cube(
    job: Job,
    cube: &Path,
    hdu: Option<String>,
    to: Destination,
    recipe: &CheckedRecipe,
    threads: usize,
    progress: &dyn Progress,
) -> Result<Outcome, StageError> {
    let mut timings = Timings::default();
    let mut prepared = at("read", prepare(cube, hdu, recipe, &mut timings))?;
    at("write", results::prepare(to.dir, to.overwrite))?;
    // The inputs are hashed for run.json while the cube is unmixed and mapped, not before.
    let hashing = {
        let files = prepared.cube.info.inputs.clone();
        std::thread::spawn(move || results::input_records(&files))
    };
    for w in &prepared.warnings {
        progress.warn(w);
    }
    let mut unmixed = timings.time("unmix", || run_unmix(&mut prepared, recipe, progress));
    // Timed only when a thermal fit runs, so timings.json lists the stages that ran.
    let thermal_out = match prepared.thermal {
        Some(_) => timings.time("thermal", || {
            run_thermal(&prepared, &mut unmixed, recipe, progress)
        }),
        None => None,
    };
    let map = match job {
        Job::Unmix => None,
        Job::Map => Some(at(
            "units",
            timings.time("units", || run_units(&prepared, &unmixed, recipe, progress)),
        )?),
    };
    if let Some(m) = &map {
        timings.steps("units", &m.steps);
    }
    let thermal = thermal_out.map(|output| crate::thermal::ThermalResult {
        plan: prepared
            .thermal
            .clone()
            .expect("a thermal output has its plan"),
        spots: hot_spots(&prepared, &output, map.as_ref(), recipe),
        output,
    });
    let inputs = at(
        "write",
        hashing.join().unwrap_or_else(|_| {
            Err(crate::atomic::WriteError::Io {
                path: prepared.cube.info.path.clone(),
                error: std::io::Error::other("hashing the input failed"),
            })
        }),
    )?;
    let result = CubeResult {
        inputs: &inputs,
        command: job.name(),
        thermal: thermal.as_ref(),
        cube: &prepared.cube,
        library: recipe.library(),
        model: &prepared.model,
        weights: &prepared.weights,
        unmixed: &unmixed,
        units: map.as_ref(),
        recipe: recipe.recipe(),
        warnings: &prepared.warnings,
    };
    let report = |run: &str| -> Result<(), crate::atomic::WriteError> {
        if !to.report {
            return Ok(());
        }
        let spectra = report_spectra(&prepared, recipe);
        let path = to.dir.join("report.html");
        let (html, problems) = crate::report::render(to.dir, Some(run), Some(&spectra), None)
            .map_err(|e| crate::atomic::WriteError::Io {
                path: path.clone(),
                error: std::io::Error::other(e.to_string()),
            })?;
        for p in problems {
            progress.warn(&format!("report: {p}"));
        }
        crate::atomic::write_bytes(&path, html.as_bytes())
    };
    at(
        "write",
        results::write_folder(to.dir, &result, timings, threads, &report),
    )?;
    Ok(Outcome {
        ids: unmixed.ids.clone(),
        counts: unmixed.counts,
        pixels: prepared.cube.info.pixels(),
        units: map,
    })
}

/// The cube as the solver saw it, for the report's inspector, named by what its samples are.
fn report_spectra<'a>(p: &'a Prepared, recipe: &CheckedRecipe) -> crate::report::Spectra<'a> {
    let quantity = p.cube.info.quantity.as_str();
    let what = match recipe.photometry() {
        Some(law) => format!("{quantity} divided by the {} law", law.name()),
        None => quantity.to_string(),
    };
    crate::report::Spectra::of(&p.cube, &p.model, &p.weights.weights, what)
}

/// The report of a results folder read from disk (`thiomap report`, and `batch --report`
/// on a folder that was already complete): the page and what it could not show. The
/// inspector's spectra come from `cube` (or the input `run.json` names, looked for beside
/// the results folder and in the working directory) when its SHA-256 matches the record.
pub fn report_from_disk(
    dir: &Path,
    cube: Option<&Path>,
) -> Result<(String, Vec<String>), crate::report::ReportError> {
    let mut note = None;
    let run: Option<serde_json::Value> = std::fs::read_to_string(dir.join("run.json"))
        .ok()
        .and_then(|t| serde_json::from_str(&t).ok());
    let prepared = run.as_ref().and_then(|run| {
        let name = run["inputs"][0]["name"].as_str()?;
        let want = run["inputs"][0]["sha256"].as_str()?;
        let candidates: Vec<std::path::PathBuf> = match cube {
            Some(c) => vec![c.to_path_buf()],
            None => {
                let mut v = Vec::new();
                if let Some(parent) = dir.parent() {
                    v.push(parent.join(name));
                }
                v.push(std::path::PathBuf::from(name));
                v
            }
        };
        let Some(path) = candidates.iter().find(|p| p.is_file()) else {
            note = Some(format!(
                "the input cube {name} was not found (pass --cube PATH): the inspector shows \
                 abundances only"
            ));
            return None;
        };
        match results::provenance::sha256_file(path) {
            Ok(h) if h == want => {}
            _ => {
                note = Some(format!(
                    "{} is not the cube of this run (its SHA-256 differs from run.json's): \
                     the inspector shows abundances only",
                    path.display()
                ));
                return None;
            }
        }
        let recipe: crate::recipe::Recipe = serde_json::from_value(run["recipe"].clone()).ok()?;
        let checked =
            match crate::recipe::Draft::from_recipe(recipe).check(crate::recipe::Scope::Map) {
                Ok(c) => c,
                Err(e) => {
                    note = Some(format!(
                        "the run's recipe cannot be used again ({e}): no spectra"
                    ));
                    return None;
                }
            };
        let mut t = Timings::default();
        match prepare(path, None, &checked, &mut t) {
            Ok(p) => Some((p, checked)),
            Err(e) => {
                note = Some(format!("{}: {e:#}: no spectra", path.display()));
                None
            }
        }
    });
    match &prepared {
        Some((p, checked)) => {
            let spectra = report_spectra(p, checked);
            crate::report::render(dir, None, Some(&spectra), None)
        }
        None => crate::report::render(dir, None, None, note.as_deref()),
    }
}
