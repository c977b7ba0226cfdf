//! `thiomap map CUBE --out DIR`: the main job — unmix every pixel, group the abundances
//! into named, coloured surface units, and write the whole results folder.

use std::process::ExitCode;

use thiomap::output::results;
use thiomap::pipeline;
use thiomap::recipe::{Count, Recipe};

use super::progress::Bar;
use super::unmix::UnmixArgs;

/// Map surface units: unmix, cluster into units, name and colour them, write everything.
#[derive(Debug, clap::Args)]
#[command(after_help = "Examples:\n  \
    thiomap map demo-cubes/brimveil-globe-mapper96.fits --out results/globe\n  \
    thiomap map scene.fits --out r --units 6 --min-area 9\n  \
    thiomap map scene.fits --out r --recipe recipe.toml --seed 7\n\n\
    Writes everything `unmix` writes plus units.fits, units.png, units-legend.svg, \
    true-colour.png, units.csv and units-spectra.svg; summary.json gains `units` and \
    `classes`. The maps are analysis aids: decisions about spacecraft pointing or fieldwork \
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
}

fn count(s: &str) -> Count {
    s.parse::<usize>()
        .map(Count::N)
        .unwrap_or_else(|_| Count::Word(s.to_string()))
}

impl Args {
    fn recipe(&self) -> anyhow::Result<Recipe> {
        let mut r = self.unmix.recipe()?;
        if let Some(u) = &self.units {
            r.units = count(u);
        }
        if let Some(k) = self.max_units {
            r.max_units = k;
        }
        if let Some(s) = &self.sample {
            r.sample = count(s);
        }
        if let Some(a) = self.min_area {
            r.min_area = a;
        }
        if let Some(p) = &self.rules {
            r.rules = p.display().to_string();
        }
        if let Some(s) = self.seed {
            r.seed = s;
        }
        if let Some(m) = &self.method {
            r.method = m.clone();
        }
        if let Some(e) = self.eps {
            r.eps = e;
        }
        if let Some(n) = self.min_points {
            r.min_points = n;
        }
        if self.with_albedo {
            r.albedo_feature = true;
        }
        if self.with_rmse {
            r.rmse_feature = true;
        }
        r.unit_params().map_err(anyhow::Error::msg)?;
        r.load_rules().map_err(anyhow::Error::msg)?;
        Ok(r)
    }
}

pub fn run(args: Args) -> anyhow::Result<ExitCode> {
    let recipe = args.recipe()?;
    let a = &args.unmix;
    let threads = a.threads.init()?;
    results::prepare(&a.out, a.overwrite)?;
    let bar = Bar::new();
    let map = pipeline::map_cube(&a.cube, a.hdu.clone(), &a.out, &recipe, threads, &bar);
    bar.finish();
    let map = map.map_err(|e| e.error)?;
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
