//! `thiomap inspect CUBE`: what a cube holds — shape, band table, no-data fraction,
//! per-band minimum / median / maximum and which geometry backplanes exist — as text,
//! or as JSON with `--json`.

use std::fmt::Write as _;
use std::path::PathBuf;
use std::process::ExitCode;

use serde::Serialize;
use thiomap::cube::{self, stats, Response};

/// Show a cube's shape, bands, no-data fraction, band statistics and backplanes.
#[derive(Debug, clap::Args)]
#[command(
    after_help = "Examples:\n  thiomap inspect demo-cubes/brimveil-globe-mapper96.fits\n  \
                        thiomap inspect scene.npy --json | jq .shape"
)]
pub struct Args {
    /// The cube: FITS (.fits, .fit, .fts, optionally .gz), .npy with its .toml sidecar,
    /// or a band-stack .toml.
    #[arg(value_name = "CUBE")]
    cube: PathBuf,

    /// FITS only: the HDU that holds the cube, by EXTNAME or index (0 = primary).
    /// Default: the first HDU with three axes.
    #[arg(long, value_name = "NAME|INDEX")]
    hdu: Option<String>,

    #[command(flatten)]
    select: super::common::BandArgs,

    /// Print JSON on stdout instead of text (keys: shape [rows, cols, bands], bands
    /// [{centre_um, fwhm_um, min, median, max}], nodata_fraction, …).
    #[arg(long)]
    json: bool,
}

#[derive(Serialize)]
struct Report {
    path: String,
    format: &'static str,
    hdu: Option<usize>,
    shape: [usize; 3],
    quantity: &'static str,
    nodata_pixels: usize,
    nodata_fraction: f64,
    nonfinite_samples: u64,
    backplanes: Vec<&'static str>,
    row0_at_bottom: bool,
    #[serde(skip_serializing_if = "thiomap::cube::About::is_empty")]
    about: thiomap::cube::About,
    bands: Vec<BandReport>,
}

#[derive(Serialize)]
struct BandReport {
    band: usize,
    centre_um: f64,
    fwhm_um: Option<f64>,
    response: &'static str,
    #[serde(skip_serializing_if = "Option::is_none")]
    noise_sigma: Option<f64>,
    min: Option<f32>,
    median: Option<f32>,
    max: Option<f32>,
}

pub fn run(args: Args) -> anyhow::Result<ExitCode> {
    let (cube, kept) = args.select.load_cube(&args.cube, args.hdu)?;
    let stats = stats::band_stats(cube.data.view(), cube.valid.view());
    let info = &cube.info;
    let nodata = cube.nodata_pixels();
    let report = Report {
        path: info.path.display().to_string(),
        format: info.format.name(),
        hdu: match info.format {
            cube::Format::Fits { hdu } => Some(hdu),
            _ => None,
        },
        shape: [info.rows, info.cols, info.bands.len()],
        quantity: info.quantity.as_str(),
        nodata_pixels: nodata,
        nodata_fraction: nodata as f64 / info.pixels() as f64,
        nonfinite_samples: cube.nonfinite_samples,
        backplanes: cube.backplanes.keys().map(|b| b.name()).collect(),
        row0_at_bottom: info.format.row0_at_bottom(),
        about: info.about.clone(),
        bands: info
            .bands
            .bands()
            .iter()
            .zip(&stats)
            .enumerate()
            .map(|(i, (b, s))| BandReport {
                band: kept[i] + 1,
                centre_um: b.centre_um,
                fwhm_um: b.fwhm_um(),
                response: match b.response {
                    Response::Point => "point",
                    Response::Gaussian { .. } => "gaussian",
                    Response::Tabulated { .. } => "tabulated",
                },
                noise_sigma: info.bands.noise_sigma().map(|n| n[i]),
                min: s.map(|s| s.min),
                median: s.map(|s| s.median),
                max: s.map(|s| s.max),
            })
            .collect(),
    };
    let text = if args.json {
        serde_json::to_string_pretty(&report)? + "\n"
    } else {
        format_text(&report)
    };
    super::print_stdout(&text)?;
    Ok(ExitCode::SUCCESS)
}

fn format_text(r: &Report) -> String {
    let mut s = String::new();
    let hdu = r.hdu.map(|h| format!(", HDU {h}")).unwrap_or_default();
    let _ = writeln!(s, "cube        {} ({}{hdu})", r.path, r.format);
    let _ = writeln!(
        s,
        "shape       {} rows × {} columns × {} bands",
        r.shape[0], r.shape[1], r.shape[2]
    );
    let _ = writeln!(s, "quantity    {}", r.quantity);
    let total = r.shape[0] * r.shape[1];
    let _ = writeln!(
        s,
        "no data     {} of {} pixels ({:.1} %); {} non-finite samples",
        r.nodata_pixels,
        total,
        100.0 * r.nodata_fraction,
        r.nonfinite_samples
    );
    let planes = if r.backplanes.is_empty() {
        "none".to_string()
    } else {
        r.backplanes.join(", ")
    };
    let _ = writeln!(s, "backplanes  {planes}");
    let _ = writeln!(
        s,
        "pictures    row 0 drawn at the {}",
        if r.row0_at_bottom { "bottom" } else { "top" }
    );
    for (label, value) in [
        ("target", &r.about.target),
        ("time", &r.about.time),
        ("instrument", &r.about.instrument),
    ] {
        if let Some(v) = value {
            let _ = writeln!(s, "{label:<11} {v}");
        }
    }
    if let Some(d) = r.about.sun_distance_au {
        let _ = writeln!(s, "sun         {d} AU");
    }
    let _ = writeln!(s);
    let _ = writeln!(
        s,
        "{:>5}  {:>10}  {:>9}  {:>10}  {:>10}  {:>10}",
        "band", "centre µm", "FWHM µm", "min", "median", "max"
    );
    let num = |v: Option<f32>| v.map(format_sample).unwrap_or_else(|| "—".into());
    for b in &r.bands {
        let fwhm = b
            .fwhm_um
            .map(|w| format!("{w:.4}"))
            .unwrap_or_else(|| "point".into());
        let _ = writeln!(
            s,
            "{:>5}  {:>10.4}  {:>9}  {:>10}  {:>10}  {:>10}",
            b.band,
            b.centre_um,
            fwhm,
            num(b.min),
            num(b.median),
            num(b.max)
        );
    }
    s
}

/// Reflectance-like values with five decimals; very large or tiny ones in scientific form.
fn format_sample(v: f32) -> String {
    let a = v.abs();
    if a != 0.0 && !(1e-3..1e5).contains(&a) {
        format!("{v:.3e}")
    } else {
        format!("{v:.5}")
    }
}
