//! `thiomap compare EARLIER LATER --out DIR`: what changed between two epochs of the same
//! area — per-cell χ² tests with false-discovery control, regions of change with a
//! sentence each, the units' transitions, and a picture.

use std::path::{Path, PathBuf};
use std::process::ExitCode;

use anyhow::Context;
use thiomap::change::{self, Member, Params};
use thiomap::library::Library;
use thiomap::pipeline::{self, Destination, Job};
use thiomap::recipe::{Draft, Scope};
use thiomap::results::{self, change::CompareRun, read::read_result};

use super::common::ThreadArgs;
use super::progress::Bar;

/// Compare two epochs of the same area: significant change per pixel, regions, sentences.
#[derive(Debug, clap::Args)]
#[command(after_help = "Examples:\n  \
    thiomap compare results/2031 results/2033 --out change/2031-2033\n  \
    thiomap compare early.fits late.fits --out change --recipe recipe.toml --report\n  \
    thiomap compare a b --out c --grid 0.5 --fdr 0.05 --max-emission 60\n\n\
    EARLIER and LATER are results folders of `map`, or two cubes, which are first mapped \
    with one recipe into DIR/earlier and DIR/later. When both share a grid (shape, spatial \
    WCS and latitude/longitude backplanes) they are compared pixel for pixel; otherwise on a \
    latitude/longitude grid over their overlap, from their backplanes.\n\n\
    Writes change.fits (delta and z per member, chi2, p, significant), change-units.fits \
    (earlier unit x 100 + later unit), change-regions.csv (one row per region of change, \
    with a sentence), change.png (change over the later true colour: vermillion = \
    significant change, yellow = a hot spot appeared, blue = one went out) and run.json \
    (written last). Exit 2 on bad input, with nothing written.\n\n\
    Change maps are analysis aids: decisions about spacecraft pointing or fieldwork at \
    active vents defer to mission flight rules, local codes and licensed practice.")]
pub struct Args {
    /// The earlier epoch: a results folder, or a cube to map first.
    #[arg(value_name = "EARLIER")]
    earlier: PathBuf,
    /// The later epoch: a results folder, or a cube to map first.
    #[arg(value_name = "LATER")]
    later: PathBuf,
    /// The folder to write.
    #[arg(long, value_name = "DIR")]
    out: PathBuf,
    /// Benjamini–Hochberg false-discovery rate over all tested cells, in (0, 1).
    #[arg(long, value_name = "Q", default_value_t = 0.01)]
    fdr: f64,
    /// Cells seen at an emission angle above this (degrees) in either epoch are left out.
    #[arg(long, value_name = "DEG", default_value_t = 70.0)]
    max_emission: f64,
    /// The latitude/longitude cell size in degrees, when the epochs do not share a grid
    /// (given, it also makes epochs that share one be compared on such a grid). Default:
    /// the coarser epoch's pixel spacing.
    #[arg(long, value_name = "DEG")]
    grid: Option<f64>,
    /// For cubes: the recipe both are mapped with (default: the defaults).
    #[arg(long, value_name = "FILE")]
    recipe: Option<PathBuf>,
    /// Also write report.html: the change section as one self-contained page.
    #[arg(long)]
    report: bool,
    /// Replace an existing folder.
    #[arg(long)]
    overwrite: bool,
    #[command(flatten)]
    threads: ThreadArgs,
}

pub fn run(a: Args) -> anyhow::Result<ExitCode> {
    results::check_folder(&a.out, a.overwrite)?;
    a.threads.init()?;
    let threads = thiomap_threads();
    let earlier = folder_of(&a, &a.earlier, "earlier", threads)?;
    let later = folder_of(&a, &a.later, "later", threads)?;
    let e = read_result(&earlier)?;
    let l = read_result(&later)?;
    let target = |s: &serde_json::Value| s["target"].as_str().map(String::from);
    if let (Some(x), Some(y)) = (target(&e.summary), target(&l.summary)) {
        if x != y {
            anyhow::bail!(
                "{} is of {x}, {} of {y}: compare needs two epochs of the same target",
                earlier.display(),
                later.display()
            );
        }
    }
    let library = library_of(&l.run)?;
    let members = members_of(&library, &l.epoch.ids);
    let params = Params {
        fdr: a.fdr,
        max_emission_deg: a.max_emission,
        grid_deg: a.grid,
        force_grid: a.grid.is_some(),
    };
    let c = change::compare(&e.epoch, &l.epoch, &members, &params)
        .map_err(|err| anyhow::anyhow!("{} vs {}: {err}", earlier.display(), later.display()))?;
    let sha = |d: &Path| thiomap::results::provenance::sha256_file(&d.join("run.json"));
    let run = CompareRun {
        inputs: vec![
            ("earlier", e.epoch.name.clone(), sha(&earlier)?),
            ("later", l.epoch.name.clone(), sha(&later)?),
        ],
        params: &params,
        target: target(&l.summary),
        later_row0_at_bottom: l.row0_at_bottom,
    };
    let png = results::change::change_png(&c, &run);
    // Cubes were mapped into DIR/earlier and DIR/later: the folder is ours to complete.
    let mapped = !a.earlier.is_dir() || !a.later.is_dir();
    results::prepare(&a.out, a.overwrite || mapped)?;
    if a.report {
        // The page is written before run.json, which marks the folder complete.
        let page = thiomap::report::change::page(&c, &run, &png);
        thiomap::atomic::write_bytes(&a.out.join("report.html"), page.as_bytes())?;
    }
    results::change::write_compare(&a.out, &c, &run, &png)?;
    let grid = match c.grid {
        change::Grid::Pixels { rows, cols } => format!("pixel for pixel ({cols} × {rows})"),
        change::Grid::LatLon {
            cell_deg,
            rows,
            cols,
            ..
        } => {
            format!("on a {cell_deg:.3}° latitude/longitude grid ({cols} × {rows} cells)")
        }
    };
    eprintln!(
        "compared {grid}: {} cells tested ({} left out for emission above {}°{}), {} significant \
         ({:.2} % of the tested area) at a false-discovery rate of {}",
        c.counts.tested,
        c.counts.emission_left_out,
        a.max_emission,
        if c.counts.edge_left_out > 0 {
            format!(", {} at unit boundaries", c.counts.edge_left_out)
        } else {
            String::new()
        },
        c.counts.significant,
        (100.0 * c.significant_area_fraction).max(0.0),
        a.fdr
    );
    for r in c.regions.iter().take(8) {
        eprintln!(
            "  {:>2}  {:>6.2} %  {}",
            r.id,
            100.0 * r.area_fraction,
            r.sentence
        );
    }
    if c.regions.len() > 8 {
        eprintln!("  … {} more in change-regions.csv", c.regions.len() - 8);
    }
    eprintln!("wrote {}", a.out.display());
    Ok(ExitCode::SUCCESS)
}

fn thiomap_threads() -> usize {
    rayon::current_num_threads()
}

/// A results folder as given, or a cube mapped into DIR/<role> first.
fn folder_of(a: &Args, given: &Path, role: &str, threads: usize) -> anyhow::Result<PathBuf> {
    if given.is_dir() {
        return Ok(given.to_path_buf());
    }
    if !given.is_file() {
        anyhow::bail!("{}: no such results folder or cube", given.display());
    }
    let dir = a.out.join(role);
    let recipe = Draft::new(a.recipe.as_deref())?.check(Scope::Map)?;
    let bar = Bar::new();
    let to = Destination {
        dir: &dir,
        overwrite: a.overwrite,
        report: false,
    };
    let done = pipeline::run_cube(Job::Map, given, None, to, &recipe, threads, &bar);
    bar.finish();
    done.map_err(|e| e.error)?;
    eprintln!("mapped {} into {}", given.display(), dir.display());
    Ok(dir)
}

/// The library a result was mapped with (its recipe's), for the members' names.
fn library_of(run: &serde_json::Value) -> anyhow::Result<Library> {
    match run["recipe"]["library"].as_str() {
        Some(p) if p != "embedded" && Path::new(p).exists() => {
            Library::load(Path::new(p)).with_context(|| format!("loading the library {p}"))
        }
        _ => Ok(Library::embedded()),
    }
}

/// A member's name up to its first comma or parenthesis ("SO2 frost, fine-grained (≈50
/// µm)" → "SO2 frost"), as sentences use it.
fn short_name(name: &str) -> &str {
    let end = name.find([',', '(']).unwrap_or(name.len());
    name[..end].trim()
}

/// Names and classes of plane ids (a group joins its members' names with " + ").
pub fn members_of(library: &Library, ids: &[String]) -> Vec<Member> {
    ids.iter()
        .map(|id| {
            let parts: Vec<&thiomap::library::Endmember> = id
                .split('+')
                .filter_map(|p| library.members.iter().find(|m| m.id == p))
                .collect();
            Member {
                id: id.clone(),
                name: if parts.is_empty() {
                    id.clone()
                } else {
                    let mut short: Vec<&str> = Vec::new();
                    for m in &parts {
                        let s = short_name(&m.name);
                        if !short.contains(&s) {
                            short.push(s);
                        }
                    }
                    short.join(" + ")
                },
                class: parts
                    .first()
                    .map_or(thiomap::library::Class::Other, |m| m.class),
            }
        })
        .collect()
}
