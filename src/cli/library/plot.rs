//! `thiomap library plot`: the spectra, labelled, optionally with a band set overlaid.

use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::bail;
use thiomap::atomic::WriteError;
use thiomap::render::plot::{write_plot, Series, SpectrumPlot, Strip};

use super::{member_colour, selected_bands};
use crate::cli::common::{BandArgs, LibraryArgs};

/// Plot the spectra, labelled, optionally with a band set overlaid.
#[derive(Debug, clap::Args)]
#[command(after_help = "Examples:\n  thiomap library plot --out library.svg\n  \
                        thiomap library plot --out vis.png --bands imager-7 --range 0.3-1.1")]
pub struct Args {
    #[command(flatten)]
    library: LibraryArgs,
    /// The picture to write: .svg or .png.
    #[arg(long, value_name = "FILE")]
    out: PathBuf,
    /// Overlay these bands (a shipped band set, a band-set file or a cube).
    #[arg(long, value_name = "CUBE_OR_BANDSET")]
    bands: Option<String>,
    #[command(flatten)]
    select: BandArgs,
    /// Replace FILE if it exists.
    #[arg(long)]
    overwrite: bool,
}

pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let ext = a
        .out
        .extension()
        .map(|e| e.to_string_lossy().to_ascii_lowercase())
        .unwrap_or_default();
    if ext != "svg" && ext != "png" {
        bail!(
            "--out {}: the picture must be .svg or .png",
            a.out.display()
        );
    }
    if a.out.exists() && !a.overwrite {
        return Err(WriteError::Exists {
            path: a.out.clone(),
        }
        .into());
    }
    let lib = a.library.load()?;
    let sel = a.select.selection();
    let lo = lib
        .members
        .iter()
        .map(|m| m.coverage_um().0)
        .fold(f64::INFINITY, f64::min);
    let hi = lib
        .members
        .iter()
        .map(|m| m.coverage_um().1)
        .fold(0.0, f64::max);
    let x_range = sel.range_um.unwrap_or((lo, hi));
    let (strips, strip_label, bands_title) = match &a.bands {
        Some(arg) => {
            let (label, bands) = selected_bands(arg, &a.select)?;
            let strips: Vec<Strip> = bands
                .bands()
                .iter()
                .map(|b| {
                    let half = b.fwhm_um().unwrap_or(0.004) / 2.0;
                    Strip {
                        lo: b.centre_um - half,
                        hi: b.centre_um + half,
                    }
                })
                .collect();
            let n = bands.len();
            (
                strips,
                Some(format!("{n} bands (centre ± FWHM/2)")),
                format!(", bands of {label}"),
            )
        }
        None => (Vec::new(), None, String::new()),
    };
    let series: Vec<Series> = lib
        .members
        .iter()
        .map(|m| Series {
            label: format!("{} ({})", m.id, m.class.as_str()),
            x: m.wavelength_um.clone(),
            y: m.reflectance.clone(),
            colour: member_colour(m),
        })
        .collect();
    let y_max = lib
        .members
        .iter()
        .flat_map(|m| m.reflectance.iter().cloned())
        .fold(0.0, f64::max)
        .max(0.1)
        * 1.45; // headroom above the spectra for the legend
    let plot = SpectrumPlot {
        title: format!("{} {}{bands_title}", lib.name, lib.version),
        x_range,
        y_max,
        series: &series,
        strips: &strips,
        strip_label,
    };
    write_plot(&a.out, &plot)?;
    eprintln!("wrote {}", a.out.display());
    Ok(ExitCode::SUCCESS)
}
