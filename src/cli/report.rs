//! `thiomap report RESULT_DIR [--out FILE.html]`: one self-contained page of a results
//! folder.

use std::path::PathBuf;
use std::process::ExitCode;

/// Write one self-contained HTML page of a results folder.
#[derive(Debug, clap::Args)]
#[command(after_help = "Examples:\n  \
    thiomap report results/globe                  (writes results/globe/report.html)\n  \
    thiomap report results/globe --out globe.html --cube demo-cubes/brimveil-globe-mapper96.fits\n\n\
    The page holds everything inline (pictures, charts, styles, script): it makes no \
    network request and opens from a USB stick. The pixel inspector shows spectra when \
    the input cube named in run.json is found (beside the results folder, in the working \
    directory, or given by --cube) and its SHA-256 matches; otherwise abundances only. \
    What a section could not show is said in the page and on stderr. Exit 2 only when the \
    folder holds nothing to report.")]
pub struct Args {
    /// The results folder (`map`'s or `unmix`'s --out).
    #[arg(value_name = "RESULT_DIR")]
    dir: PathBuf,
    /// Where to write the page. Default: RESULT_DIR/report.html.
    #[arg(long, value_name = "FILE.html")]
    out: Option<PathBuf>,
    /// The input cube, when it is not where run.json's name finds it.
    #[arg(long, value_name = "PATH")]
    cube: Option<PathBuf>,
}

pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    let (html, problems) = thiomap::pipeline::report_from_disk(&a.dir, a.cube.as_deref())?;
    for p in &problems {
        eprintln!("warning: {}: {p}", a.dir.display());
    }
    let out = a.out.unwrap_or_else(|| a.dir.join("report.html"));
    thiomap::atomic::write_bytes(&out, html.as_bytes())?;
    eprintln!(
        "wrote {} ({:.1} MB){}",
        out.display(),
        html.len() as f64 / 1e6,
        if problems.is_empty() {
            String::new()
        } else {
            format!("; {} sections incomplete, see above", problems.len())
        }
    );
    Ok(ExitCode::SUCCESS)
}
