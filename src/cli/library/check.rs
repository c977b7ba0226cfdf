//! `thiomap library check --bands X`: can a band set separate the members? Condition
//! numbers, the closest pairs by spectral angle, the groups.

use std::fmt::Write as _;
use std::process::ExitCode;

use anyhow::bail;

use thiomap::library::diagnostics::{diagnose, DEFAULT_GROUP_ANGLE_DEG};
use thiomap::library::resample::resample;

use super::selected_bands;
use crate::cli::common::{BandArgs, LibraryArgs};

/// Can a band set separate the members? Condition number, closest pairs, groups.
#[derive(Debug, clap::Args)]
#[command(after_help = "Examples:\n  thiomap library check --bands imager-7\n  \
                        thiomap library check --bands scene.fits --range 0.4-2.5 --json")]
pub struct Args {
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

pub fn run(a: Args) -> anyhow::Result<ExitCode> {
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
        crate::cli::print_stdout(&(serde_json::to_string_pretty(&json)? + "\n"))?;
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
    crate::cli::print_stdout(&s)?;
    Ok(ExitCode::SUCCESS)
}
