//! `thiomap unmix CUBE --out DIR`: per-pixel abundances, fit RMSE and standard errors,
//! written as the results-folder contract names them.

use std::path::PathBuf;
use std::process::ExitCode;

use thiomap::photometry::Law;
use thiomap::pipeline::{self, Destination, Job};
use thiomap::recipe::{Draft, Scope};
use thiomap::results;
use thiomap::unmix::{Precision, Solver, Subsets};

use super::common::{word, BandArgs, ThreadArgs};
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
    /// Also write covariance.fits: each pixel's full covariance of the reported planes
    /// (upper triangle; `compare` uses it when stderr.fits carries no noise model, as in
    /// subset mode).
    #[arg(long)]
    pub covariance: bool,
    /// False-alarm probability of the unexplained test: a pixel whose residual is this
    /// improbable under the noise (χ² test) is flagged unexplained. Default 0.001.
    #[arg(long, value_name = "P", allow_hyphen_values = true)]
    pub unexplained_p: Option<f64>,
    /// Arithmetic of the solver: f32 (fast, default) or f64 (reference).
    #[arg(long, value_name = "P", value_parser = ["f32", "f64"])]
    pub precision: Option<String>,
    /// Divide each spectrum by a photometric law of its viewing geometry first (needs the
    /// cube's backplanes): lambert (cos i) or lommel-seeliger (2 cos i / (cos i + cos e)).
    /// Default none.
    #[arg(long, value_name = "LAW", value_parser = ["none", "lambert", "lommel-seeliger"])]
    pub photometry: Option<String>,
    /// Weight each band by 1/σ, its noise: auto (default) takes σ from the cube's band
    /// table (`noise_sigma`) or, when it has none, estimates it from the residuals of an
    /// unweighted fit of a sample of pixels; none weighs every band alike.
    #[arg(long, value_name = "HOW", value_parser = ["auto", "none"])]
    pub band_weights: Option<String>,
    /// Fit thermal emission with the reflected light where something glows: auto (default:
    /// one temperature, when the cube has bands beyond 2.5 µm and the Sun's distance is
    /// known), one, two (two temperatures per pixel) or off. Writes thermal.fits and the
    /// hot-spot table.
    #[arg(long, value_name = "MODE", value_parser = ["off", "auto", "one", "two"])]
    pub thermal: Option<String>,
    /// The temperatures searched, K, as MIN-MAX. Default 300-1800.
    #[arg(long, value_name = "MIN-MAX", value_parser = parse_kelvin_range, allow_hyphen_values = true)]
    pub thermal_range: Option<(f64, f64)>,
    /// Emissivity of the hot surface, in (0, 1]. Default 1.
    #[arg(long, value_name = "E", allow_hyphen_values = true)]
    pub emissivity: Option<f64>,
    /// The Sun's distance in AU, over the cube's SUNDIST / sun_distance_au.
    #[arg(long, value_name = "AU", allow_hyphen_values = true)]
    pub sun_distance: Option<f64>,
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
    /// The flag table of the unmixing keys: each flag given sets its recipe key over the
    /// recipe file and the defaults (one line per flag).
    pub fn draft(&self) -> anyhow::Result<Draft> {
        let mut d = Draft::new(self.recipe.as_deref())?;
        d.flag("library", "--library", self.library.as_ref(), |r, p| {
            r.library = p.display().to_string()
        });
        d.flag(
            "solver",
            "--solver",
            word(&self.solver, Solver::parse),
            |r, v| r.solver = v,
        );
        d.flag("shade", "--shade", self.shade.then_some(true), |r, v| {
            r.shade = v
        });
        d.flag(
            "shade",
            "--no-shade",
            self.no_shade.then_some(false),
            |r, v| r.shade = v,
        );
        d.flag(
            "subset",
            "--subset",
            self.subset
                .as_deref()
                .map(Subsets::parse)
                .transpose()
                .map_err(|e| anyhow::anyhow!("--subset {e}"))?,
            |r, v| r.subset = v,
        );
        d.flag("noise", "--noise", self.noise, |r, v| r.noise = Some(v));
        d.flag(
            "groups",
            "--no-groups",
            self.no_groups.then_some(false),
            |r, v| r.groups = v,
        );
        d.flag(
            "group_angle_deg",
            "--group-angle",
            self.group_angle,
            |r, v| r.group_angle_deg = v,
        );
        d.flag("force", "--force", self.force.then_some(true), |r, v| {
            r.force = v
        });
        d.flag(
            "residuals",
            "--residuals",
            self.residuals.then_some(true),
            |r, v| r.residuals = v,
        );
        d.flag(
            "unexplained_p",
            "--unexplained-p",
            self.unexplained_p,
            |r, v| r.unexplained_p = v,
        );
        d.flag(
            "covariance",
            "--covariance",
            self.covariance.then_some(true),
            |r, v| r.covariance = v,
        );
        d.flag(
            "precision",
            "--precision",
            word(&self.precision, Precision::parse),
            |r, v| r.precision = v,
        );
        d.flag(
            "photometry",
            "--photometry",
            self.photometry.as_deref().map(Law::parse),
            |r, v| r.photometry = v,
        );
        d.flag(
            "band_weights",
            "--band-weights",
            self.band_weights
                .as_deref()
                .map(thiomap::unmix::weights::BandWeighting::parse)
                .transpose()
                .map_err(|e| anyhow::anyhow!("--band-weights {e}"))?,
            |r, v| r.band_weights = v,
        );
        d.flag(
            "thermal",
            "--thermal",
            self.thermal
                .as_deref()
                .map(thiomap::thermal::Mode::parse)
                .transpose()
                .map_err(|e| anyhow::anyhow!("--thermal {e}"))?,
            |r, v| r.thermal = v,
        );
        d.flag(
            "thermal_range_k",
            "--thermal-range",
            self.thermal_range,
            |r, (a, b)| r.thermal_range_k = [a, b],
        );
        d.flag("emissivity", "--emissivity", self.emissivity, |r, v| {
            r.emissivity = v
        });
        d.flag(
            "sun_distance_au",
            "--sun-distance",
            self.sun_distance,
            |r, v| r.sun_distance_au = Some(v),
        );
        d.flag("range_um", "--range", self.select.range(), |r, (a, b)| {
            r.range_um = Some([a, b])
        });
        d.flag(
            "exclude_bands",
            "--exclude-bands",
            self.select.excluded(),
            |r, v| r.exclude_bands = v,
        );
        Ok(d)
    }

    /// The results folder, refused early (before any input is read) when it exists and
    /// `--overwrite` is not given.
    pub fn destination(&self) -> anyhow::Result<Destination<'_>> {
        results::check_folder(&self.out, self.overwrite)?;
        Ok(Destination {
            dir: &self.out,
            overwrite: self.overwrite,
            report: false,
        })
    }
}

pub fn run(args: Args) -> anyhow::Result<ExitCode> {
    let a = args.common;
    let recipe = a.draft()?.check(Scope::Unmix)?;
    let threads = a.threads.init()?;
    let to = a.destination()?;
    let bar = Bar::new();
    let done = pipeline::run_cube(
        Job::Unmix,
        &a.cube,
        a.hdu.clone(),
        to,
        &recipe,
        threads,
        &bar,
    );
    bar.finish();
    let done = done.map_err(|e| e.error)?;
    let c = done.counts;
    eprintln!(
        "unmixed {} pixels of {} ({} masked) into {}: {}",
        c.unmixed,
        done.pixels,
        c.nodata + c.zero_signal + c.dark,
        a.out.display(),
        done.ids.join(", ")
    );
    Ok(ExitCode::SUCCESS)
}

/// `MIN-MAX` in kelvin.
fn parse_kelvin_range(s: &str) -> Result<(f64, f64), String> {
    super::common::min_max(s, "in K, e.g. 300-1800")
}
