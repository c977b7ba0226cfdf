//! Provenance: `run.json` (tool version, every input file with its SHA-256, the library's
//! name, version and hash, the recipe, the conventions; written last, so its presence
//! marks a complete folder) and `timings.json` (how the run went: wall time per stage,
//! peak memory, threads, host — kept out of `run.json` so reruns stay byte-identical).

use std::path::{Path, PathBuf};
use std::time::Instant;

use serde::Serialize;

use super::CubeResult;
use crate::atomic::WriteError;
use crate::recipe::Recipe;

/// Wall time per stage.
#[derive(Debug, Default, Serialize)]
pub struct Timings {
    pub stages: Vec<StageTime>,
}

#[derive(Debug, Serialize)]
pub struct StageTime {
    pub stage: String,
    pub seconds: f64,
    /// The stage's own steps, when it times them (seconds each; they sum to about the
    /// stage's time).
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub steps: Vec<StepTime>,
}

#[derive(Debug, Serialize)]
pub struct StepTime {
    pub step: String,
    pub seconds: f64,
}

impl Timings {
    /// Runs `f` as the stage `name` and records its wall time.
    pub fn time<T>(&mut self, name: &str, f: impl FnOnce() -> T) -> T {
        let t = Instant::now();
        let out = f();
        self.stages.push(StageTime {
            stage: name.into(),
            seconds: t.elapsed().as_secs_f64(),
            steps: Vec::new(),
        });
        out
    }

    /// Attaches `steps` to the last stage named `name`.
    pub fn steps(&mut self, name: &str, steps: &[(&'static str, f64)]) {
        if let Some(s) = self.stages.iter_mut().rev().find(|s| s.stage == name) {
            s.steps = steps
                .iter()
                .map(|(step, seconds)| StepTime {
                    step: step.to_string(),
                    seconds: *seconds,
                })
                .collect();
        }
    }
}

/// SHA-256 of a file, hex.
pub fn sha256_file(path: &Path) -> Result<String, WriteError> {
    use sha2::{Digest, Sha256};
    let io = |source| WriteError::Io {
        path: path.to_path_buf(),
        error: source,
    };
    let mut file = std::fs::File::open(path).map_err(io)?;
    let mut h = Sha256::new();
    std::io::copy(&mut file, &mut h).map_err(io)?;
    Ok(format!("{:x}", h.finalize()))
}

/// An input file as provenance records it: its file name and SHA-256.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct InputRecord {
    pub name: String,
    pub sha256: String,
}

/// A path's file name, as provenance and the summary record it.
pub(super) fn file_name(p: &Path) -> String {
    p.file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default()
}

/// The inputs of a cube with their hashes.
pub fn input_records(files: &[PathBuf]) -> Result<Vec<InputRecord>, WriteError> {
    files
        .iter()
        .map(|f| {
            Ok(InputRecord {
                name: file_name(f),
                sha256: sha256_file(f)?,
            })
        })
        .collect()
}

/// The library as provenance records it.
pub fn library_record(library: &crate::library::Library) -> serde_json::Value {
    serde_json::json!({
        "name": library.name,
        "version": library.version,
        "sha256": library.sha256(),
        "band_weighting": "band response × solar spectrum",
        "solar_spectrum": crate::library::solar::Sun::embedded().record(),
    })
}

/// Peak resident memory of this process, bytes (Linux VmHWM; 0 elsewhere).
pub fn peak_rss_bytes() -> u64 {
    std::fs::read_to_string("/proc/self/status")
        .unwrap_or_default()
        .lines()
        .find_map(|l| l.strip_prefix("VmHWM:"))
        .and_then(|v| v.trim().trim_end_matches("kB").trim().parse::<u64>().ok())
        .map(|kb| kb * 1024)
        .unwrap_or(0)
}

/// The provenance record `run.json`.
#[derive(Serialize)]
pub struct RunRecord<'a> {
    pub tool: &'static str,
    pub version: &'static str,
    pub command: &'a str,
    pub inputs: Vec<InputRecord>,
    pub library: serde_json::Value,
    pub recipe: &'a Recipe,
    pub conventions: serde_json::Value,
}

/// Builds `run.json` for a cube's results.
pub fn run_record<'a>(r: &CubeResult<'a>) -> RunRecord<'a> {
    RunRecord {
        tool: "thiomap",
        version: crate::VERSION,
        command: r.command,
        inputs: r.inputs.to_vec(),
        library: library_record(r.library),
        recipe: r.recipe,
        conventions: serde_json::json!({
            "row_order": "row 0 is the first row stored; FITS pictures draw it at the bottom, others at the top",
            "picture_row0": if r.cube.info.format.row0_at_bottom() { "bottom" } else { "top" },
            "nodata": "NaN in float planes",
            "quantity_declared": r.cube.info.quantity.as_str(),
            "quantity_assumed": "reflectance-factor",
            "abundances": "materials renormalised to sum to one without shade; shade fraction reported separately",
        }),
    }
}

/// The text of `run.json` (pretty JSON with a final newline), the last file of a results
/// folder.
pub fn run_record_text(r: &CubeResult) -> String {
    serde_json::to_string_pretty(&run_record(r)).expect("output types serialise") + "\n"
}

/// Writes `timings.json`.
pub fn write_timings(dir: &Path, timings: &Timings, threads: usize) -> Result<(), WriteError> {
    let total: f64 = timings.stages.iter().map(|s| s.seconds).sum();
    super::write_json(
        &dir.join("timings.json"),
        &serde_json::json!({
            "stages": timings.stages,
            "total_seconds": total,
            "peak_rss_bytes": peak_rss_bytes(),
            "threads": threads,
            "host": std::fs::read_to_string("/etc/hostname").unwrap_or_default().trim(),
        }),
    )
}
