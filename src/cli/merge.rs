//! `thiomap merge DIR… --out FOLDER`: one archive table, its JSON and a chart from the
//! results folders and bookkeeping files found under batch output folders.

use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::Context as _;
use thiomap::batch;

/// Merge batch results into one archive table, its JSON and a chart.
#[derive(Debug, clap::Args)]
#[command(after_help = "Examples:\n  thiomap merge results/ --out archive/\n  \
    thiomap merge results/ --out archive/ --report   (then open archive/archive.html)\n\n\
    Writes archive.csv (cube, status, area_<class>…, mean_<id>…, mean_rmse, hot_spots, \
    hottest_k), archive-hotspots.csv (every hot spot of every cube), archive.json \
    and archive-classes.svg; joins the shards' failure lists and lists every manifest entry \
    that has no result.")]
pub struct Args {
    /// Batch output folders (shards may write to one or several).
    #[arg(value_name = "DIR", required = true)]
    dirs: Vec<PathBuf>,
    /// The folder for archive.csv, archive.json and the chart.
    #[arg(long, value_name = "FOLDER")]
    out: PathBuf,
    /// Also write archive.html: the class areas by cube, the cubes with links to their
    /// own report.html (batch --report), the failures and the hot-spot timeline.
    #[arg(long)]
    report: bool,
}

pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    // Everything is read and drawn before the folder is made.
    let archive = batch::merge::merge(&a.dirs)?;
    let csv = archive.to_csv()?;
    let spots = archive.spots_csv()?;
    let svg = archive.chart_svg().map_err(anyhow::Error::msg)?;
    std::fs::create_dir_all(&a.out)
        .with_context(|| format!("{}: cannot create", a.out.display()))?;
    thiomap::atomic::write_bytes(&a.out.join("archive.csv"), &csv)?;
    thiomap::atomic::write_bytes(&a.out.join("archive-hotspots.csv"), &spots)?;
    thiomap::results::write_json(&a.out.join("archive.json"), &archive)?;
    thiomap::atomic::write_bytes(&a.out.join("archive-classes.svg"), svg.as_bytes())?;
    if a.report {
        let sha = thiomap::results::provenance::sha256_file(&a.out.join("archive.json"))?;
        let html = thiomap::batch::page::page(&archive, &a.out, &svg, &sha);
        thiomap::atomic::write_bytes(&a.out.join("archive.html"), html.as_bytes())?;
    }
    let count = |s: &str| archive.rows.iter().filter(|r| r.status == s).count();
    eprintln!(
        "merged {} cubes into {}: {} ok, {} failed, {} missing",
        archive.rows.len(),
        a.out.display(),
        count("ok"),
        count("failed"),
        count("missing")
    );
    Ok(ExitCode::SUCCESS)
}
