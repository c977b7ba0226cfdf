//! `thiomap library list`: the members, their class, coverage, conditions and colour.

use std::fmt::Write as _;
use std::process::ExitCode;

use serde::Serialize;
use thiomap::colour::hex;

use super::member_colour;
use crate::cli::common::LibraryArgs;

/// List the members: id, class, coverage, conditions.
#[derive(Debug, clap::Args)]
#[command(after_help = "Example:\n  thiomap library list --json | jq '.members[].id'")]
pub struct Args {
    #[command(flatten)]
    library: LibraryArgs,
    /// Print JSON on stdout.
    #[arg(long)]
    json: bool,
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

pub fn run(a: Args) -> anyhow::Result<ExitCode> {
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
    crate::cli::print_stdout(&text)?;
    Ok(ExitCode::SUCCESS)
}
