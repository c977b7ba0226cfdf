//! Command-line definitions: one file per command. The only place that knows clap and
//! prints; each command turns its flags into library calls and formats the results.

mod batch;
mod common;
mod compare;
mod convert;
mod demo;
mod inspect;
mod library;
mod map;
mod merge;
mod progress;
mod report;
mod targets;
mod unmix;

use std::io::{self, Write};
use std::process::ExitCode;

use clap::{Parser, Subcommand};

/// Composition maps of sulfur-rich volcanic surfaces from image cubes.
#[derive(Debug, Parser)]
#[command(
    name = "thiomap",
    version,
    about = "Composition maps of sulfur-rich volcanic surfaces from image cubes",
    long_about = "thiomap turns multispectral and hyperspectral image cubes of sulfur-rich \
                  volcanic surfaces into composition maps: per-pixel abundances of sulfur \
                  allotropes, SO2 frost and silicates, fit quality and uncertainty, and \
                  labelled surface units.\n\n\
                  Exit codes: 0 success; 1 finished, but some inputs failed; 2 usage or \
                  input error (the message names the file and what is wrong).",
    after_help = "Examples:\n  thiomap map demo-cubes/brimveil-globe-mapper96.fits --out results/globe\n  \
                  thiomap inspect demo-cubes/brimveil-globe-imager7.fits\n  \
                  thiomap library check --bands imager-7\n  \
                  thiomap batch archive/ --out results/ --recipe recipe.toml\n  \
                  thiomap report results/globe\n  \
                  thiomap compare results/2031 results/2033 --out change\n  \
                  thiomap targets results/2033 --since results/2031 --out targets"
)]
pub struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Debug, Subcommand)]
enum Command {
    Inspect(inspect::Args),
    Convert(convert::Args),
    Demo(demo::Args),
    Library(library::Args),
    Unmix(unmix::Args),
    Map(map::Args),
    Batch(batch::Args),
    Merge(merge::Args),
    Report(report::Args),
    Compare(compare::Args),
    Targets(targets::Args),
}

/// Parses the command line and runs the command.
pub fn run() -> anyhow::Result<ExitCode> {
    let cli = Cli::parse();
    match cli.command {
        Command::Inspect(args) => inspect::run(args),
        Command::Convert(args) => convert::run(args),
        Command::Demo(args) => demo::run(args),
        Command::Library(args) => library::run(args),
        Command::Map(args) => map::run(args),
        Command::Batch(args) => batch::run(args),
        Command::Merge(args) => merge::run(args),
        Command::Report(args) => report::run(args),
        Command::Compare(args) => compare::run(args),
        Command::Targets(args) => targets::run(args),
        Command::Unmix(args) => unmix::run(args),
    }
}

/// Writes text to stdout; a closed pipe (`thiomap inspect x | head`) is a clean exit.
pub(crate) fn print_stdout(text: &str) -> anyhow::Result<()> {
    let mut out = io::stdout().lock();
    match out.write_all(text.as_bytes()).and_then(|_| out.flush()) {
        Err(e) if e.kind() == io::ErrorKind::BrokenPipe => Ok(()),
        other => Ok(other?),
    }
}

#[cfg(test)]
mod tests {
    #[test]
    fn clap_definitions_are_consistent() {
        use clap::CommandFactory;
        super::Cli::command().debug_assert();
    }
}
