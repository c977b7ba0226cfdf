//! Reading a results folder for the report: every product the page knows, each optional.
//! What a section needs and cannot find or read is recorded in [`Folder::problems`]
//! (shown in the page and on stderr); only a folder with nothing usable is an error.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use ndarray::{Array2, Array3};
use sha2::Digest as _;

/// Why no page could be made.
#[derive(Debug, thiserror::Error)]
pub enum ReportError {
    #[error("{0}: not a folder")]
    NotAFolder(String),
    #[error(
        "{0}: nothing to report (no run.json, summary.json or map product was found or could be read)"
    )]
    Nothing(String),
}

/// A CSV file as its header and rows.
pub type CsvTable = (Vec<String>, Vec<Vec<String>>);

/// A float image product as (rows, cols, planes), internal row = stored row.
pub type Planes = Array3<f32>;

/// What was read from one results folder.
pub struct Folder {
    pub dir: PathBuf,
    /// The folder's own name, as the page names it (no absolute path: the page must not
    /// depend on where the folder lies).
    pub name: String,
    pub run: Option<serde_json::Value>,
    /// The SHA-256 of `run.json`'s bytes.
    pub run_sha256: Option<String>,
    pub summary: Option<serde_json::Value>,
    /// The stages `timings.json` lists, in order (their seconds change between reruns and
    /// stay out of the page).
    pub stages: Vec<String>,
    /// `units.csv` as header and rows.
    pub units_csv: Option<CsvTable>,
    pub abundance: Option<Planes>,
    pub stderr: Option<Planes>,
    pub rmse: Option<Array2<f32>>,
    pub labels: Option<Array2<i32>>,
    /// Pictures by file name (relative to the folder, `/`-separated).
    pub pictures: BTreeMap<String, Vec<u8>>,
    /// SVG texts by file name.
    pub svgs: BTreeMap<String, String>,
    /// `hotspots.csv`: its comment lines, header and rows.
    pub hotspots: Option<(Vec<String>, CsvTable)>,
    /// Files of the folder the page does not show, by name.
    pub others: Vec<String>,
    /// What a section needed and did not find, or found unreadable.
    pub problems: Vec<String>,
}

/// Files the page reads or knowingly leaves out.
const KNOWN: &[&str] = &[
    "run.json",
    "summary.json",
    "timings.json",
    "units.csv",
    "abundance.fits",
    "stderr.fits",
    "fit-rmse.fits",
    "fit-flags.fits",
    "units.fits",
    "true-colour.png",
    "units.png",
    "fit-rmse.png",
    "hotspots.png",
    "units-legend.svg",
    "units-spectra.svg",
    "hotspots.csv",
    "hotspots.json",
    "report.html",
];

impl Folder {
    /// Reads `dir`. `run_json`: the text of `run.json` when it is not written yet.
    pub fn read(dir: &Path, run_json: Option<&str>) -> Result<Folder, ReportError> {
        if !dir.is_dir() {
            return Err(ReportError::NotAFolder(dir.display().to_string()));
        }
        let name = dir
            .canonicalize()
            .ok()
            .and_then(|p| p.file_name().map(|n| n.to_string_lossy().into_owned()))
            .unwrap_or_else(|| dir.display().to_string());
        let mut f = Folder {
            dir: dir.to_path_buf(),
            name,
            run: None,
            run_sha256: None,
            summary: None,
            stages: Vec::new(),
            units_csv: None,
            abundance: None,
            stderr: None,
            rmse: None,
            labels: None,
            pictures: BTreeMap::new(),
            svgs: BTreeMap::new(),
            hotspots: None,
            others: Vec::new(),
            problems: Vec::new(),
        };
        let run_text = match run_json {
            Some(t) => Some(t.to_string()),
            None => f.text("run.json", "provenance and the inspector's cube"),
        };
        if let Some(t) = run_text {
            f.run_sha256 = Some(format!("{:x}", sha2::Sha256::digest(t.as_bytes())));
            match serde_json::from_str::<serde_json::Value>(&t) {
                Ok(v) => {
                    if v["tool"] != "thiomap" {
                        f.problems.push(
                            "run.json was not written by thiomap: provenance may be wrong".into(),
                        );
                    } else if let Some(ver) = v["version"].as_str() {
                        if major_minor(ver) != major_minor(crate::VERSION) {
                            f.problems.push(format!(
                                "run.json was written by thiomap {ver}, this is {}: sections \
                                 whose products changed may be incomplete",
                                crate::VERSION
                            ));
                        }
                    }
                    f.run = Some(v);
                }
                Err(e) => f.problems.push(format!("run.json is not JSON ({e})")),
            }
        }
        f.summary = f
            .text("summary.json", "the overview and the fit quality")
            .and_then(|t| f.json(&t, "summary.json"));
        if let Some(t) = f.text_quiet("timings.json") {
            if let Some(v) = f.json(&t, "timings.json") {
                f.stages = v["stages"]
                    .as_array()
                    .into_iter()
                    .flatten()
                    .filter_map(|s| s["stage"].as_str().map(String::from))
                    .collect();
            }
        }
        if let Some(t) = f.text("units.csv", "the units table") {
            match read_csv(&t) {
                Ok((h, rows)) => f.units_csv = Some((h, rows)),
                Err(e) => f.problems.push(format!("units.csv: {e}")),
            }
        }
        f.abundance = f.planes("abundance.fits", "the abundance maps and the inspector");
        f.stderr = f.planes("stderr.fits", "the standard-error maps and the inspector");
        f.rmse = f
            .planes("fit-rmse.fits", "the RMSE histogram")
            .map(|p| p.index_axis_move(ndarray::Axis(2), 0));
        f.labels = f
            .planes("units.fits", "the inspector's unit map")
            .map(|p| p.index_axis(ndarray::Axis(2), 0).mapv(|v| v as i32));
        for name in [
            "true-colour.png",
            "units.png",
            "fit-rmse.png",
            "hotspots.png",
        ] {
            if let Ok(bytes) = std::fs::read(dir.join(name)) {
                f.pictures.insert(name.into(), bytes);
            }
        }
        for name in ["units-legend.svg", "units-spectra.svg"] {
            if let Some(t) = f.text_quiet(name) {
                f.svgs.insert(name.into(), t);
            }
        }
        if let Some(t) = f.text_quiet("hotspots.csv") {
            let comments: Vec<String> = t
                .lines()
                .take_while(|l| l.starts_with('#'))
                .map(|l| l.trim_start_matches('#').trim().to_string())
                .collect();
            let body: String = t
                .lines()
                .skip_while(|l| l.starts_with('#'))
                .collect::<Vec<_>>()
                .join("\n");
            match read_csv(&body) {
                Ok(table) => f.hotspots = Some((comments, table)),
                Err(e) => f.problems.push(format!("hotspots.csv: {e}")),
            }
        }
        f.others = list_others(dir);
        let usable = f.run.is_some()
            || f.summary.is_some()
            || f.abundance.is_some()
            || f.units_csv.is_some()
            || !f.pictures.is_empty();
        if !usable {
            return Err(ReportError::Nothing(dir.display().to_string()));
        }
        Ok(f)
    }

    /// The plane ids of `abundance.fits` / `stderr.fits`, from the summary.
    pub fn ids(&self) -> Vec<String> {
        self.summary
            .as_ref()
            .and_then(|s| s["endmembers"].as_array())
            .map(|a| {
                a.iter()
                    .filter_map(|v| v.as_str().map(String::from))
                    .collect()
            })
            .unwrap_or_default()
    }

    /// Whether pictures draw row 0 at the bottom (FITS inputs).
    pub fn row0_at_bottom(&self) -> bool {
        let picture = self
            .run
            .as_ref()
            .and_then(|r| r["conventions"]["picture_row0"].as_str().map(String::from));
        match picture.as_deref() {
            Some(p) => p == "bottom",
            None => self
                .run
                .as_ref()
                .and_then(|r| r["inputs"][0]["name"].as_str().map(String::from))
                .is_some_and(|n| {
                    let n = n.to_ascii_lowercase();
                    [".fits", ".fit", ".fts", ".fits.gz"]
                        .iter()
                        .any(|e| n.ends_with(e))
                }),
        }
    }

    fn text(&mut self, name: &str, needed_for: &str) -> Option<String> {
        match std::fs::read_to_string(self.dir.join(name)) {
            Ok(t) => Some(t),
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => {
                self.problems
                    .push(format!("{name} is missing: {needed_for} cannot be shown"));
                None
            }
            Err(e) => {
                self.problems.push(format!("{name} cannot be read ({e})"));
                None
            }
        }
    }

    fn text_quiet(&mut self, name: &str) -> Option<String> {
        std::fs::read_to_string(self.dir.join(name)).ok()
    }

    fn json(&mut self, text: &str, name: &str) -> Option<serde_json::Value> {
        match serde_json::from_str(text) {
            Ok(v) => Some(v),
            Err(e) => {
                self.problems.push(format!("{name} is not JSON ({e})"));
                None
            }
        }
    }

    fn planes(&mut self, name: &str, needed_for: &str) -> Option<Planes> {
        let path = self.dir.join(name);
        if !path.is_file() {
            self.problems
                .push(format!("{name} is missing: {needed_for} cannot be shown"));
            return None;
        }
        match read_image(&path) {
            Ok(p) => Some(p),
            Err(e) => {
                self.problems.push(format!("{name} cannot be read ({e})"));
                None
            }
        }
    }
}

/// The primary image of a FITS file as (rows, cols, planes).
fn read_image(path: &Path) -> Result<Planes, String> {
    crate::fits::image::read_primary(path).map(|i| i.data)
}

fn read_csv(text: &str) -> Result<CsvTable, String> {
    let mut r = csv::ReaderBuilder::new()
        .has_headers(true)
        .flexible(true)
        .from_reader(text.as_bytes());
    let header = r
        .headers()
        .map_err(|e| e.to_string())?
        .iter()
        .map(String::from)
        .collect();
    let mut rows = Vec::new();
    for rec in r.records() {
        rows.push(
            rec.map_err(|e| e.to_string())?
                .iter()
                .map(String::from)
                .collect(),
        );
    }
    Ok((header, rows))
}

/// The folder's files the page does not show, sorted (`abundance/*.png` counted as
/// shown: the page draws the same maps from `abundance.fits`).
fn list_others(dir: &Path) -> Vec<String> {
    let mut out = Vec::new();
    let Ok(entries) = std::fs::read_dir(dir) else {
        return out;
    };
    for e in entries.flatten() {
        let name = e.file_name().to_string_lossy().into_owned();
        if KNOWN.contains(&name.as_str()) || name == "abundance" || name.starts_with('.') {
            continue;
        }
        if e.path().is_dir() {
            out.push(format!("{name}/"));
        } else {
            out.push(name);
        }
    }
    out.sort();
    out
}

fn major_minor(v: &str) -> String {
    v.split('.').take(2).collect::<Vec<_>>().join(".")
}
