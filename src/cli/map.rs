//! `thiomap map CUBE --out DIR`: the main job — unmix every pixel, group the abundances
//! into named, coloured surface units, and write the whole results folder.

use std::process::ExitCode;

use thiomap::pipeline::{self, Job};
use thiomap::recipe::{Clustering, Draft, SampleSize, Scope, UnitCount};

use super::common::count;
use super::progress::Bar;
use super::unmix::UnmixArgs;

/// Map surface units: unmix, cluster into units, name and colour them, write everything.
#[derive(Debug, clap::Args)]
#[command(after_help = "Examples:\n  \
    thiomap map demo-cubes/brimveil-globe-mapper96.fits --out results/globe\n  \
    thiomap map scene.fits --out r --units 6 --min-area 9\n  \
    thiomap map scene.fits --out r --recipe recipe.toml --seed 7\n  \
    thiomap map hot.fits --out r --thermal two --sun-distance 4.8 --body-radius 1500\n  \
    thiomap map scene.fits --out r --report   (then open r/report.html)\n\n\
    Writes everything `unmix` writes plus units.fits, units.png, units-legend.svg, \
    true-colour.png, units.csv and units-spectra.svg; summary.json gains `units` and \
    `classes`. Where emission is fitted: thermal.fits and hotspots.csv/.json/.png, whose \
    temperatures are model estimates (sensitive to emissivity and unresolved mixtures). The maps are analysis aids: decisions about spacecraft pointing or fieldwork \
    at active vents defer to mission flight rules, local codes and licensed practice.")]
pub struct Args {
    #[command(flatten)]
    unmix: UnmixArgs,
    /// The number of units, or `auto` (default: the K in 2–10 with the best silhouette).
    #[arg(long, value_name = "K|auto")]
    units: Option<String>,
    /// The largest K `auto` tries. Default 10.
    #[arg(long, value_name = "K")]
    max_units: Option<usize>,
    /// Pixels k-means is fitted on (seeded sample), or `all`. Default 20000.
    #[arg(long, value_name = "N|all")]
    sample: Option<String>,
    /// Minimum mapping unit: 8-connected regions smaller than this many pixels merge into
    /// the most similar neighbouring unit. Default 4.
    #[arg(long, value_name = "PIXELS")]
    min_area: Option<usize>,
    /// A TOML file of naming rules (default: the shipped rules).
    #[arg(long, value_name = "FILE")]
    rules: Option<std::path::PathBuf>,
    /// Seed of the clustering sample and initialisation. Default 1.
    #[arg(long, value_name = "N")]
    seed: Option<u64>,
    /// Clustering: kmeans (default; K by silhouette), gmm (Gaussian mixture; K by BIC) or
    /// dbscan (finds its own number of units; see --eps and --min-points).
    #[arg(long, value_name = "METHOD", value_parser = ["kmeans", "gmm", "dbscan"])]
    method: Option<String>,
    /// DBSCAN neighbourhood radius, in abundance units (distance between abundance
    /// vectors). Default 0.05.
    #[arg(long, value_name = "EPS")]
    eps: Option<f64>,
    /// DBSCAN: points within --eps that make a core point. Default 10.
    #[arg(long, value_name = "N")]
    min_points: Option<usize>,
    /// Cluster on the albedo (1 − shade fraction, 0–1) as well as the abundances.
    #[arg(long)]
    with_albedo: bool,
    /// Cluster on the fit RMSE (divided by the unexplained threshold, 0–1) as well.
    #[arg(long)]
    with_rmse: bool,
    /// The body's radius in km: unit areas in km² as well as fractions (units.csv
    /// `area_km2`, summary.json), from the latitude and longitude backplanes. Default: none,
    /// fractions only.
    #[arg(long, value_name = "KM", allow_hyphen_values = true)]
    body_radius: Option<f64>,
    /// Also write report.html: one self-contained page of the results (maps, units,
    /// spectra, fit quality, hot spots, provenance, cautions) with a pixel inspector.
    #[arg(long)]
    report: bool,
}

impl Args {
    /// The flag table of the units keys, over the unmixing ones (one line per flag).
    fn draft(&self) -> anyhow::Result<Draft> {
        let mut d = self.unmix.draft()?;
        d.flag(
            "units",
            "--units",
            count("--units", "auto", &self.units, UnitCount::parse)?,
            |r, v| r.units = v,
        );
        d.flag("max_units", "--max-units", self.max_units, |r, v| {
            r.max_units = v
        });
        d.flag(
            "sample",
            "--sample",
            count("--sample", "all", &self.sample, SampleSize::parse)?,
            |r, v| r.sample = v,
        );
        d.flag("min_area", "--min-area", self.min_area, |r, v| {
            r.min_area = v
        });
        d.flag("rules", "--rules", self.rules.as_ref(), |r, p| {
            r.rules = p.display().to_string()
        });
        d.flag("seed", "--seed", self.seed, |r, v| r.seed = v);
        d.flag(
            "method",
            "--method",
            self.method.as_deref().and_then(Clustering::parse),
            |r, v| r.method = v,
        );
        d.flag("eps", "--eps", self.eps, |r, v| r.eps = v);
        d.flag("min_points", "--min-points", self.min_points, |r, v| {
            r.min_points = v
        });
        d.flag(
            "albedo_feature",
            "--with-albedo",
            self.with_albedo.then_some(true),
            |r, v| r.albedo_feature = v,
        );
        d.flag(
            "body_radius_km",
            "--body-radius",
            self.body_radius,
            |r, v| r.body_radius_km = Some(v),
        );
        d.flag(
            "rmse_feature",
            "--with-rmse",
            self.with_rmse.then_some(true),
            |r, v| r.rmse_feature = v,
        );
        Ok(d)
    }
}

pub fn run(args: Args) -> anyhow::Result<ExitCode> {
    let recipe = args.draft()?.check(Scope::Map)?;
    let a = &args.unmix;
    let threads = a.threads.init()?;
    let mut to = a.destination()?;
    to.report = args.report;
    let bar = Bar::new();
    let done = pipeline::run_cube(Job::Map, &a.cube, a.hdu.clone(), to, &recipe, threads, &bar);
    bar.finish();
    let map = done.map_err(|e| e.error)?.units.expect("map makes units");
    eprintln!("mapped {} units into {}:", map.units.len(), a.out.display());
    // Columns as wide as their longest entry, so the areas line up.
    let name_w = map
        .units
        .iter()
        .map(|u| u.label.chars().count())
        .max()
        .unwrap_or(0);
    let class_w = map
        .units
        .iter()
        .map(|u| u.class.len() + 2)
        .max()
        .unwrap_or(0);
    for u in &map.units {
        let pct = 100.0 * u.area_fraction;
        // A unit too small to show at one decimal (a few hot-spot pixels) still exists.
        let area = if pct > 0.0 && pct < 0.05 {
            " <0.1".to_string()
        } else {
            format!("{pct:5.1}")
        };
        let class = format!("[{}]", u.class);
        eprintln!(
            "  {:>2}  {:<name_w$}  {class:<class_w$} {area} %",
            u.unit, u.label
        );
    }
    Ok(ExitCode::SUCCESS)
}
