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
            export::resampled_csv(&lib, &resample(&lib, &bands)?)
        }
        None => {
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
