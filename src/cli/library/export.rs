//! `thiomap library export`: the spectra as CSV, on the library's own wavelengths or
//! resampled to a band set (the table is [`thiomap::library::export`]'s).

use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::{bail, Context as _};
use thiomap::atomic::WriteError;
use thiomap::library::export;
use thiomap::library::resample::resample;

use super::selected_bands;
use crate::cli::common::{BandArgs, LibraryArgs};

/// Export the spectra as CSV (wavelength_um, then one column per member id).
#[derive(Debug, clap::Args)]
#[command(
    after_help = "Examples:\n  thiomap library export --format csv > library.csv\n  \
                        thiomap library export --bands imager-7 --format csv --out e.csv"
)]
pub struct Args {
    #[command(flatten)]
    library: LibraryArgs,
    /// Resample to these bands (a shipped band set, a band-set file or a cube) and write
    /// one row per band centre. Default: the library's own wavelengths.
    #[arg(long, value_name = "CUBE_OR_BANDSET")]
    bands: Option<String>,
    #[command(flatten)]
    select: BandArgs,
    /// With --bands: add a column `emission_<T>K` per temperature T (K, comma-separated):
    /// the I/F a whole pixel at T adds to each band (emissivity 1), for a cube at the
    /// Sun's distance --sun-distance.
    #[arg(long, value_name = "T,…", value_delimiter = ',')]
    emission: Vec<f64>,
    /// The Sun's distance for --emission, AU. Default 1.
    #[arg(
        long,
        value_name = "AU",
        default_value_t = 1.0,
        allow_hyphen_values = true
    )]
    sun_distance: f64,
    /// Output format; only `csv` today.
    #[arg(long, value_name = "FORMAT", default_value = "csv")]
    format: String,
    /// Write to FILE instead of stdout.
    #[arg(long, value_name = "FILE")]
    out: Option<PathBuf>,
}

pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    if a.format != "csv" {
        bail!("--format {}: only csv is supported", a.format);
    }
    if let Some(out) = &a.out {
        if out.exists() {
            return Err(WriteError::Exists { path: out.clone() }.into());
        }
    }
    let lib = a.library.load()?;
    let bytes = match &a.bands {
        Some(arg) => {
            let (_, bands) = selected_bands(arg, &a.select)?;
            if !(a.sun_distance.is_finite() && a.sun_distance > 0.0) {
                bail!(
                    "--sun-distance {}: the Sun's distance must be greater than 0 AU",
                    a.sun_distance
                );
            }
            let sun = thiomap::library::solar::Sun::embedded();
            let mut extra = Vec::new();
            for &t in &a.emission {
                if !(t.is_finite() && t > 0.0) {
                    bail!("--emission {t}: a temperature must be greater than 0 K");
                }
                let v: Option<Vec<f64>> = bands
                    .bands()
                    .iter()
                    .map(|b| thiomap::thermal::band_iof(b, t, a.sun_distance, 1.0, sun))
                    .collect();
                let v = v.ok_or_else(|| {
                    anyhow::anyhow!("--emission: a band lies outside the solar spectrum")
                })?;
                extra.push((format!("emission_{t}K"), v));
            }
            export::resampled_csv_with(&lib, &resample(&lib, &bands)?, &extra)
        }
        None => {
            if !a.emission.is_empty() {
                bail!("--emission needs --bands (the columns are band values)");
            }
            let sel = a.select.selection();
            if !sel.exclude.is_empty() {
                bail!("--exclude-bands needs --bands (the library has no band numbers)");
            }
            export::own_wavelengths_csv(&lib, sel.range_um)
        }
    }
    .context("writing CSV")?;
    match &a.out {
        Some(path) => thiomap::atomic::write_bytes(path, &bytes)?,
        None => crate::cli::print_stdout(&String::from_utf8(bytes)?)?,
    }
    Ok(ExitCode::SUCCESS)
}
