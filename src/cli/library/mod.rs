//! `thiomap library list | check | export | import | plot`: show the endmember library,
//! diagnose it against a band set, export it as CSV, import laboratory spectra, and plot
//! it. One file per subcommand; the helpers they share are here.

mod check;
mod export;
mod import;
mod list;
mod plot;

use std::process::ExitCode;

use thiomap::colour::ColourMatrix;
use thiomap::cube::bandsets;

use super::common::BandArgs;

/// Show, diagnose, export, import or plot the endmember library.
#[derive(Debug, clap::Args)]
#[command(after_help = "Examples:\n  thiomap library list\n  \
                        thiomap library check --bands imager-7\n  \
                        thiomap library export --bands mapper-96 --format csv > e.csv\n  \
                        thiomap library plot --out library.svg --bands imager-7\n  \
                        thiomap library import lab.csv --class silicate \\\n    \
                        --method \"lab reflectance, i=30 e=0\" --source \"read=Smith 2030\" --out my-lib")]
pub struct Args {
    #[command(subcommand)]
    command: Sub,
}

#[derive(Debug, clap::Subcommand)]
enum Sub {
    List(list::Args),
    Check(check::Args),
    Export(export::Args),
    Import(import::Args),
    Plot(plot::Args),
}

pub fn run(args: Args) -> anyhow::Result<ExitCode> {
    match args.command {
        Sub::List(a) => list::run(a),
        Sub::Check(a) => check::run(a),
        Sub::Export(a) => export::run(a),
        Sub::Import(a) => import::run(a),
        Sub::Plot(a) => plot::run(a),
    }
}

/// A band set resolved and narrowed by the band selection.
pub(super) fn selected_bands(
    arg: &str,
    select: &BandArgs,
) -> anyhow::Result<(String, thiomap::cube::BandTable)> {
    let named = bandsets::resolve(arg)?;
    let kept = select
        .selection()
        .apply(&named.bands)
        .map_err(|e| anyhow::anyhow!("--bands {arg}: {e}"))?;
    Ok((named.label, named.bands.subset(&kept)))
}

/// A member's rendered colour (CIE 1931, D65).
pub(super) fn member_colour(m: &thiomap::library::Endmember) -> [u8; 3] {
    ColourMatrix::for_wavelengths(&m.wavelength_um).srgb8(&m.reflectance)
}
