//! `thiomap library list | check | export | import | plot`: show the endmember library,
//! diagnose it against a band set, export it as CSV, import laboratory spectra, and plot it.

use std::fmt::Write as _;
use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::{bail, Context as _};
use serde::Serialize;
use thiomap::atomic::WriteError;
use thiomap::colour::{hex, ColourMatrix};
use thiomap::cube::bandsets;
use thiomap::library::diagnostics::{diagnose, DEFAULT_GROUP_ANGLE_DEG};
use thiomap::library::import::{import_csv, ImportOptions, WavelengthUnit};
use thiomap::library::resample::resample;
use thiomap::library::{Class, Library, Source, SourceTag};
use thiomap::render::plot::{write_plot, Series, SpectrumPlot, Strip};

use super::common::{BandArgs, LibraryArgs};

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
    List(ListArgs),
    Check(CheckArgs),
    Export(ExportArgs),
    Import(ImportArgs),
    Plot(PlotArgs),
}

/// List the members: id, class, coverage, conditions.
#[derive(Debug, clap::Args)]
#[command(after_help = "Example:\n  thiomap library list --json | jq '.members[].id'")]
struct ListArgs {
    #[command(flatten)]
    library: LibraryArgs,
    /// Print JSON on stdout.
    #[arg(long)]
    json: bool,
}

/// Can a band set separate the members? Condition number, closest pairs, groups.
#[derive(Debug, clap::Args)]
#[command(after_help = "Examples:\n  thiomap library check --bands imager-7\n  \
                        thiomap library check --bands scene.fits --range 0.4-2.5 --json")]
struct CheckArgs {
    #[command(flatten)]
    library: LibraryArgs,
    /// The bands: a shipped band set (imager-7, spectrometer-24, mapper-96), a band-set
    /// TOML file, or any cube.
    #[arg(long, value_name = "CUBE_OR_BANDSET")]
    bands: String,
    #[command(flatten)]
    select: BandArgs,
    /// Members of one class whose resampled spectra lie within this spectral angle
    /// (degrees) are grouped, transitively. Default 1.
    #[arg(long, value_name = "DEG", default_value_t = DEFAULT_GROUP_ANGLE_DEG)]
    group_angle: f64,
    /// How many of the closest pairs to list.
    #[arg(long, value_name = "N", default_value_t = 5)]
    pairs: usize,
    /// Print JSON on stdout.
    #[arg(long)]
    json: bool,
}

/// Export the spectra as CSV (wavelength_um, then one column per member id).
#[derive(Debug, clap::Args)]
#[command(
    after_help = "Examples:\n  thiomap library export --format csv > library.csv\n  \
                        thiomap library export --bands imager-7 --format csv --out e.csv"
)]
struct ExportArgs {
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

/// Turn laboratory spectra in CSV into library member files.
#[derive(Debug, clap::Args)]
#[command(
    after_help = "Example:\n  thiomap library import lab.csv --class sulfur-allotrope \\\n    \
                        --method \"bidirectional reflectance, i=30 e=0, 20 C\" \\\n    \
                        --source \"read=Author 2030, Journal 1:2\" --out my-library\n\n\
                        The first CSV column holds wavelengths (header wavelength_um or \
                        wavelength_nm, or pass --wavelength-unit); each further column is one \
                        spectrum named by its header. Nothing is written if any input is bad."
)]
struct ImportArgs {
    /// CSV files: a wavelength column, then one reflectance column per spectrum.
    #[arg(value_name = "FILE.csv", required = true)]
    files: Vec<PathBuf>,
    /// Class of every imported spectrum: sulfur-allotrope, so2-frost, silicate or other.
    #[arg(long, value_name = "CLASS", value_parser = parse_class)]
    class: Class,
    /// How the spectra were made (instrument, geometry, sample preparation).
    #[arg(long, value_name = "TEXT")]
    method: String,
    /// A source, as TAG=CITATION with TAG read, from-memory or computed; repeat for more.
    #[arg(long = "source", value_name = "TAG=CITATION", value_parser = parse_source, required = true)]
    sources: Vec<Source>,
    /// Sample temperature, K.
    #[arg(long, value_name = "K")]
    temperature_k: Option<f64>,
    /// Grain size, µm.
    #[arg(long, value_name = "UM")]
    grain_um: Option<f64>,
    /// Unit of the wavelength column, when its header does not say: um or nm.
    #[arg(long, value_name = "UNIT", value_parser = parse_unit)]
    wavelength_unit: Option<WavelengthUnit>,
    /// Multiply every reflectance by this (0.01 for percent). Default 1.
    #[arg(long, value_name = "FACTOR", default_value_t = 1.0)]
    reflectance_scale: f64,
    /// The library folder to add the members to (created with a new index when absent).
    #[arg(long, value_name = "DIR")]
    out: PathBuf,
}

/// Plot the spectra, labelled, optionally with a band set overlaid.
#[derive(Debug, clap::Args)]
#[command(after_help = "Examples:\n  thiomap library plot --out library.svg\n  \
                        thiomap library plot --out vis.png --bands imager-7 --range 0.3-1.1")]
struct PlotArgs {
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

fn parse_class(s: &str) -> Result<Class, String> {
    Class::parse(s)
        .ok_or_else(|| "expected sulfur-allotrope, so2-frost, silicate or other".to_string())
}

fn parse_source(s: &str) -> Result<Source, String> {
    let (tag, citation) = s
        .split_once('=')
        .ok_or("expected TAG=CITATION, e.g. \"read=Author 2030, Journal 1:2\"")?;
    let tag = SourceTag::parse(tag.trim()).ok_or("TAG must be read, from-memory or computed")?;
    if citation.trim().is_empty() {
        return Err("the citation is empty".into());
    }
    Ok(Source {
        tag,
        citation: citation.trim().to_string(),
    })
}

fn parse_unit(s: &str) -> Result<WavelengthUnit, String> {
    match s {
        "um" | "µm" => Ok(WavelengthUnit::Micrometre),
        "nm" => Ok(WavelengthUnit::Nanometre),
        _ => Err("expected um or nm".into()),
    }
}

pub fn run(args: Args) -> anyhow::Result<ExitCode> {
    match args.command {
        Sub::List(a) => list(a),
        Sub::Check(a) => check(a),
        Sub::Export(a) => export(a),
        Sub::Import(a) => import(a),
        Sub::Plot(a) => plot(a),
    }
}

/// A band set resolved and narrowed by the band selection.
fn selected_bands(
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

#[derive(Serialize)]
struct MemberRow<'a> {
    id: &'a str,
    name: &'a str,
    class: &'static str,
    coverage_um: [f64; 2],
    samples: usize,
    temperature_k: Option<f64>,
    grain_um: Option<f64>,
    colour: String,
}

fn member_colour(m: &thiomap::library::Endmember) -> [u8; 3] {
    ColourMatrix::for_wavelengths(&m.wavelength_um).srgb8(&m.reflectance)
}

fn list(a: ListArgs) -> anyhow::Result<ExitCode> {
    let lib = a.library.load()?;
    let rows: Vec<MemberRow> = lib
        .members
        .iter()
        .map(|m| MemberRow {
            id: &m.id,
            name: &m.name,
            class: m.class.as_str(),
            coverage_um: [m.coverage_um().0, m.coverage_um().1],
            samples: m.wavelength_um.len(),
            temperature_k: m.temperature_k,
            grain_um: m.grain_um,
            colour: hex(member_colour(m)),
        })
        .collect();
    let text = if a.json {
        serde_json::to_string_pretty(&serde_json::json!({
            "library": lib.name, "version": lib.version, "origin": lib.origin, "members": rows,
        }))? + "\n"
    } else {
        let mut s = String::new();
        let _ = writeln!(
            s,
            "{} — version {} ({})\n",
            lib.name, lib.version, lib.origin
        );
        let _ = writeln!(
            s,
            "{:<24} {:<17} {:>13} {:>7} {:>8}  name",
            "id", "class", "coverage µm", "T K", "colour"
        );
        for r in &rows {
            let t = r
                .temperature_k
                .map(|t| format!("{t:.0}"))
                .unwrap_or_else(|| "—".into());
            let _ = writeln!(
                s,
                "{:<24} {:<17} {:>13} {:>7} {:>8}  {}",
                r.id,
                r.class,
                format!("{:.2}–{:.2}", r.coverage_um[0], r.coverage_um[1]),
                t,
                r.colour,
                r.name
            );
        }
        s
    };
    super::print_stdout(&text)?;
    Ok(ExitCode::SUCCESS)
}

fn check(a: CheckArgs) -> anyhow::Result<ExitCode> {
    if !(a.group_angle.is_finite() && a.group_angle >= 0.0) {
        bail!(
            "--group-angle {}: must be a non-negative angle in degrees",
            a.group_angle
        );
    }
    let lib = a.library.load()?;
    let (label, bands) = selected_bands(&a.bands, &a.select)?;
    let r = resample(&lib, &bands)?;
    let d = diagnose(&r, a.group_angle);
    let finite = |v: f64| v.is_finite().then_some(v);
    if a.json {
        let json = serde_json::json!({
            "bands_from": label,
            "bands": d.bands,
            "members": d.members,
            "condition_number": finite(d.condition),
            "condition_number_with_shade": finite(d.condition_with_shade),
            "group_angle_deg": d.group_angle_deg,
            "closest_pairs": d.pairs.iter().take(a.pairs).map(|p| serde_json::json!({
                "a": p.a, "b": p.b, "angle_deg": p.angle_deg, "same_class": p.same_class,
            })).collect::<Vec<_>>(),
            "groups": d.groups.iter().map(|g| serde_json::json!({
                "id": g.id, "members": g.members, "class": g.class.as_str(),
            })).collect::<Vec<_>>(),
        });
        super::print_stdout(&(serde_json::to_string_pretty(&json)? + "\n"))?;
        return Ok(ExitCode::SUCCESS);
    }
    let kappa = |v: f64| {
        if v.is_finite() {
            format!("{v:.1}")
        } else {
            "infinite (more unknowns than bands, or members linearly dependent)".into()
        }
    };
    let mut s = String::new();
    let _ = writeln!(
        s,
        "library     {} {} ({} members)",
        lib.name, lib.version, d.members
    );
    let _ = writeln!(s, "bands       {label}: {} bands", d.bands);
    let _ = writeln!(
        s,
        "condition   {} (E with a sum-to-one row)",
        kappa(d.condition)
    );
    let _ = writeln!(
        s,
        "            {} (with a shade member)",
        kappa(d.condition_with_shade)
    );
    let _ = writeln!(s, "\nclosest pairs by spectral angle:");
    for p in d.pairs.iter().take(a.pairs) {
        let note = if p.same_class {
            ""
        } else {
            "  (different classes: never grouped)"
        };
        let _ = writeln!(s, "  {:7.3}°  {} — {}{note}", p.angle_deg, p.a, p.b);
    }
    if d.groups.is_empty() {
        let _ = writeln!(
            s,
            "\ngroups: none — every member is separable at {}°",
            d.group_angle_deg
        );
    } else {
        let _ = writeln!(
            s,
            "\ngroups (within {}°, same class; unmixing reports each as one abundance):",
            d.group_angle_deg
        );
        for g in &d.groups {
            let _ = writeln!(s, "  {}  [{}]", g.id, g.class.as_str());
        }
    }
    super::print_stdout(&s)?;
    Ok(ExitCode::SUCCESS)
}

fn export(a: ExportArgs) -> anyhow::Result<ExitCode> {
    if a.format != "csv" {
        bail!("--format {}: only csv is supported", a.format);
    }
    if let Some(out) = &a.out {
        if out.exists() {
            return Err(WriteError::Exists { path: out.clone() }.into());
        }
    }
    let lib = a.library.load()?;
    let mut w = csv::Writer::from_writer(Vec::new());
    let mut header = vec!["wavelength_um".to_string()];
    header.extend(lib.members.iter().map(|m| m.id.clone()));
    w.write_record(&header)?;
    match &a.bands {
        Some(arg) => {
            let (_, bands) = selected_bands(arg, &a.select)?;
            let r = resample(&lib, &bands)?;
            for (i, c) in r.centres_um.iter().enumerate() {
                let mut row = vec![format!("{c}")];
                row.extend(r.matrix.row(i).iter().map(|v| format!("{v:.6}")));
                w.write_record(&row)?;
            }
        }
        None => {
            // The union of every member's wavelengths; empty where a member has no data.
            let sel = a.select.selection();
            let mut grid: Vec<f64> = lib
                .members
                .iter()
                .flat_map(|m| m.wavelength_um.iter().cloned())
                .filter(|w| sel.range_um.is_none_or(|(lo, hi)| *w >= lo && *w <= hi))
                .collect();
            if !sel.exclude.is_empty() {
                bail!("--exclude-bands needs --bands (the library has no band numbers)");
            }
            grid.sort_by(f64::total_cmp);
            grid.dedup();
            for wl in grid {
                let mut row = vec![format!("{wl}")];
                row.extend(
                    lib.members
                        .iter()
                        .map(|m| m.at(wl).map(|v| format!("{v:.5}")).unwrap_or_default()),
                );
                w.write_record(&row)?;
            }
        }
    }
    let bytes = w.into_inner().context("writing CSV")?;
    match &a.out {
        Some(path) => thiomap::atomic::write_bytes(path, &bytes)?,
        None => super::print_stdout(&String::from_utf8(bytes)?)?,
    }
    Ok(ExitCode::SUCCESS)
}

fn import(a: ImportArgs) -> anyhow::Result<ExitCode> {
    if !(a.reflectance_scale.is_finite() && a.reflectance_scale > 0.0) {
        bail!(
            "--reflectance-scale {}: must be a positive number",
            a.reflectance_scale
        );
    }
    let opts = ImportOptions {
        class: a.class,
        method: a.method.clone(),
        sources: a.sources.clone(),
        temperature_k: a.temperature_k,
        grain_um: a.grain_um,
        unit: a.wavelength_unit,
        scale: a.reflectance_scale,
    };
    // Read and check everything before writing anything.
    let mut lib = if a.out.join("library.toml").exists() {
        Library::load(&a.out)?
    } else {
        Library {
            name: "imported laboratory spectra".into(),
            version: "0.1.0".into(),
            origin: a.out.display().to_string(),
            members: Vec::new(),
        }
    };
    let mut added = Vec::new();
    for file in &a.files {
        for m in import_csv(file, &opts)? {
            if lib.members.iter().any(|x| x.id == m.id) {
                bail!(
                    "{}: member id `{}` is already in {} (rename the column)",
                    file.display(),
                    m.id,
                    a.out.display()
                );
            }
            added.push(m.id.clone());
            lib.members.push(m);
        }
    }
    lib.write_folder(&a.out)?;
    eprintln!(
        "added {} member(s) to {}: {}",
        added.len(),
        a.out.display(),
        added.join(", ")
    );
    Ok(ExitCode::SUCCESS)
}

fn plot(a: PlotArgs) -> anyhow::Result<ExitCode> {
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
