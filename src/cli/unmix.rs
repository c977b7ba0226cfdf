//! `thiomap unmix CUBE --out DIR`: per-pixel abundances, fit RMSE and standard errors,
//! written as the results-folder contract names them.

use std::path::PathBuf;
use std::process::ExitCode;

use thiomap::output::results;
use thiomap::pipeline::{self, Progress, Timings};
use thiomap::recipe::Recipe;

use super::common::{BandArgs, ThreadArgs};
use super::progress::Bar;

/// Unmix every pixel: abundances, fit RMSE and standard errors.
#[derive(Debug, clap::Args)]
#[command(after_help = "Examples:\n  \
    thiomap unmix demo-cubes/brimveil-globe-mapper96.fits --out results/globe\n  \
    thiomap unmix scene.fits --out r --solver nnls --no-shade --range 0.4-2.5\n  \
    thiomap unmix imager.fits --out r --subset 3\n  \
    thiomap unmix scene.fits --out r --recipe recipe.toml\n\n\
    Writes abundance.fits, stderr.fits, fit-rmse.fits, abundance/<id>.png, fit-rmse.png, \
    summary.json, timings.json and, last, run.json (the recipe and input hashes). Flags \
    given override the recipe; the recipe overrides the defaults.")]
pub struct Args {
    #[command(flatten)]
    pub common: UnmixArgs,
}

/// The flags `unmix` and `map` share.
#[derive(Debug, clap::Args)]
pub struct UnmixArgs {
    /// The cube (any format `inspect` reads).
    #[arg(value_name = "CUBE")]
    pub cube: PathBuf,
    /// The results folder; refused if it exists and is not empty, unless --overwrite.
    #[arg(long, value_name = "DIR")]
    pub out: PathBuf,
    /// A TOML recipe holding result-changing options (see the README); flags override it.
    #[arg(long, value_name = "FILE")]
    pub recipe: Option<PathBuf>,
    /// A library folder instead of the embedded default library.
    #[arg(long, value_name = "PATH")]
    pub library: Option<PathBuf>,
    /// Constraints: fcls (a ≥ 0, Σa = 1; default), nnls (a ≥ 0), sum-to-one, unconstrained.
    #[arg(long, value_name = "SOLVER", value_parser = ["fcls", "nnls", "sum-to-one", "unconstrained"])]
    pub solver: Option<String>,
    /// Add a photometric shade member (zero reflectance) that absorbs brightness; on by default.
    #[arg(long, conflicts_with = "no_shade")]
    pub shade: bool,
    /// No shade member.
    #[arg(long)]
    pub no_shade: bool,
    /// Per-pixel member subsets: auto (default: only when the bands cannot separate the
    /// library), off, or K (up to K members plus shade, chosen and averaged by BIC).
    #[arg(long, value_name = "K|auto|off")]
    pub subset: Option<String>,
    /// Noise σ in reflectance for standard errors. Default: estimated from each pixel's residual.
    #[arg(long, value_name = "SIGMA", allow_hyphen_values = true)]
    pub noise: Option<f64>,
    /// Unmix members the bands cannot separate separately instead of as one group.
    #[arg(long)]
    pub no_groups: bool,
    /// Grouping angle in degrees (members of one class within it are grouped). Default 1.
    #[arg(long, value_name = "DEG", allow_hyphen_values = true)]
    pub group_angle: Option<f64>,
    /// Unmix although the band set cannot separate the library (the guard's refusal).
    #[arg(long)]
    pub force: bool,
    /// Also write residual.fits, the per-band residual y − Ea.
    #[arg(long)]
    pub residuals: bool,
    /// Arithmetic of the solver: f32 (fast, default) or f64 (reference).
    #[arg(long, value_name = "P", value_parser = ["f32", "f64"])]
    pub precision: Option<String>,
    /// Divide each spectrum by a photometric law of its viewing geometry first (needs the
    /// cube's backplanes): lambert (cos i) or lommel-seeliger (2 cos i / (cos i + cos e)).
    /// Default none.
    #[arg(long, value_name = "LAW", value_parser = ["none", "lambert", "lommel-seeliger"])]
    pub photometry: Option<String>,
    #[command(flatten)]
    pub select: BandArgs,
    /// FITS only: the HDU that holds the cube, by EXTNAME or index.
    #[arg(long, value_name = "NAME|INDEX")]
    pub hdu: Option<String>,
    #[command(flatten)]
    pub threads: ThreadArgs,
    /// Replace the contents of an existing results folder.
    #[arg(long)]
    pub overwrite: bool,
}

impl UnmixArgs {
    /// The recipe: defaults, then the recipe file, then the flags given.
    pub fn recipe(&self) -> anyhow::Result<Recipe> {
        let mut r = match &self.recipe {
            Some(p) => Recipe::load(p).map_err(anyhow::Error::msg)?,
            None => Recipe::default(),
        };
        if let Some(l) = &self.library {
            r.library = l.display().to_string();
        }
        if let Some(s) = &self.solver {
            r.solver = s.clone();
        }
        if self.shade {
            r.shade = true;
        }
        if self.no_shade {
            r.shade = false;
        }
        if let Some(s) = &self.subset {
            r.subset = s.clone();
        }
        if self.noise.is_some() {
            r.noise = self.noise;
        }
        if self.no_groups {
            r.groups = false;
        }
        if let Some(a) = self.group_angle {
            r.group_angle_deg = a;
        }
        if self.force {
            r.force = true;
        }
        if self.residuals {
            r.residuals = true;
        }
        if let Some(p) = &self.precision {
            r.precision = p.clone();
        }
        if let Some(p) = &self.photometry {
            r.photometry = p.clone();
        }
        if let Some((a, b)) = self.select.range() {
            r.range_um = Some([a, b]);
        }
        if let Some(x) = self.select.excluded() {
            r.exclude_bands = x;
        }
        r.unmix_params().map_err(anyhow::Error::msg)?;
        Ok(r)
    }
}

pub fn run(args: Args) -> anyhow::Result<ExitCode> {
    let a = args.common;
    let recipe = a.recipe()?;
    let threads = a.threads.init()?;
    results::prepare(&a.out, a.overwrite)?;
    let bar = Bar::new();
    let mut timings = Timings::default();
    let prepared = pipeline::prepare(&a.cube, a.hdu.clone(), &recipe, &mut timings)?;
    for w in &prepared.warnings {
        bar.warn(w);
    }
    let out = timings.time("unmix", || pipeline::run_unmix(&prepared, &recipe, &bar));
    bar.finish();
    timings.time("write", || {
        pipeline::write_unmix_products(&a.out, &prepared, &out)
    })?;
    let summary = pipeline::unmix_summary(&prepared, &out, &prepared.warnings);
    results::write_json(&a.out.join("summary.json"), &summary)?;
    pipeline::write_timings(&a.out, &timings, threads)?;
    let record = pipeline::run_record("unmix", &prepared, &recipe)?;
    results::write_json(&a.out.join("run.json"), &record)?;
    let c = out.counts;
    eprintln!(
        "unmixed {} pixels of {} ({} masked) into {}: {}",
        c.unmixed,
        prepared.cube.info.pixels(),
        c.nodata + c.zero_signal + c.dark,
        a.out.display(),
        out.ids.join(", ")
    );
    Ok(ExitCode::SUCCESS)
}
