//! The results folder of one cube, as the results-folder contract names its files:
//! `abundance.fits`, `stderr.fits`, `fit-rmse.fits`, `abundance/<id>.png`,
//! `fit-rmse.png`, `summary.json`, `run.json` (written last: its presence marks a complete
//! folder) and `timings.json`. Every file is written atomically.

use std::path::{Path, PathBuf};

use ndarray::{Array2, Array3};
use serde::Serialize;

use super::OutputError;
use crate::cube::CubeInfo;
use crate::fits::header::{Card, Value};
use crate::fits::write::{write_file, ImageData, ImageHdu};

/// Prepares `dir`: refuses an existing non-empty folder unless `overwrite`; with it,
/// removes `run.json` first so the folder reads as incomplete until the run ends, and any
/// temporaries a killed run left behind.
pub fn prepare(dir: &Path, overwrite: bool) -> Result<(), OutputError> {
    let io = |source| OutputError::Io {
        path: dir.to_path_buf(),
        error: source,
    };
    if dir.exists() {
        let non_empty = std::fs::read_dir(dir).map_err(io)?.next().is_some();
        if non_empty && !overwrite {
            return Err(OutputError::Exists {
                path: dir.to_path_buf(),
            });
        }
        let run = dir.join("run.json");
        if run.exists() {
            std::fs::remove_file(&run).map_err(|source| OutputError::Io {
                path: run,
                error: source,
            })?;
        }
        // A killed run may have left temporaries; they are never results.
        super::atomic::remove_stale_temporaries(dir).map_err(io)?;
    }
    std::fs::create_dir_all(dir).map_err(io)
}

fn common_cards(info: &CubeInfo, content: &str) -> Vec<Card> {
    let mut cards = vec![Card::new("CONTENT", Value::Text(content.into()), "")];
    if let Some(t) = &info.about.target {
        cards.push(Card::new("OBJECT", Value::Text(t.clone()), ""));
    }
    cards.push(Card::new(
        "ORIGIN",
        Value::Text(format!("thiomap {}", crate::VERSION)),
        "",
    ));
    cards.extend(info.spatial_wcs.iter().cloned());
    cards
}

/// Writes planes (row, col, plane) as an f32 FITS cube with axes x, y, plane; PLANEn
/// cards name each plane. The input's row order and spatial WCS are kept.
pub fn write_planes(
    path: &Path,
    ids: &[String],
    data: &Array3<f32>,
    info: &CubeInfo,
    content: &str,
) -> Result<(), OutputError> {
    let mut cards = common_cards(info, content);
    for (i, id) in ids.iter().enumerate() {
        cards.push(Card::new(
            &format!("PLANE{}", i + 1),
            Value::Text(id.clone()),
            "",
        ));
    }
    let primary = ImageHdu {
        data: ImageData::Cube(data.view()),
        cards,
    };
    write_file(path, &primary, &[])
}

/// Writes a 2-D f32 plane as FITS.
pub fn write_plane(
    path: &Path,
    data: &Array2<f32>,
    info: &CubeInfo,
    content: &str,
) -> Result<(), OutputError> {
    let primary = ImageHdu {
        data: ImageData::Plane(data.view()),
        cards: common_cards(info, content),
    };
    write_file(path, &primary, &[])
}

/// Writes a 2-D int16 label plane as FITS.
pub fn write_labels(
    path: &Path,
    data: &Array2<i16>,
    info: &CubeInfo,
    content: &str,
) -> Result<(), OutputError> {
    let primary = ImageHdu {
        data: ImageData::Labels(data.view()),
        cards: common_cards(info, content),
    };
    write_file(path, &primary, &[])
}

/// Writes pretty JSON with a final newline.
pub fn write_json(path: &Path, value: &impl Serialize) -> Result<(), OutputError> {
    let text = serde_json::to_string_pretty(value).expect("output types serialise") + "\n";
    super::atomic::write_bytes(path, text.as_bytes())
}

/// Writes a picture as PNG.
pub fn write_png(path: &Path, img: &image::RgbImage) -> Result<(), OutputError> {
    if let Some(parent) = path.parent() {
        std::fs::create_dir_all(parent).map_err(|source| OutputError::Io {
            path: parent.to_path_buf(),
            error: source,
        })?;
    }
    super::atomic::write_bytes(path, &crate::render::maps::png_bytes(img))
}

/// SHA-256 of a file, hex.
pub fn sha256_file(path: &Path) -> Result<String, OutputError> {
    use sha2::{Digest, Sha256};
    let mut file = std::fs::File::open(path).map_err(|source| OutputError::Io {
        path: path.to_path_buf(),
        error: source,
    })?;
    let mut h = Sha256::new();
    std::io::copy(&mut file, &mut h).map_err(|source| OutputError::Io {
        path: path.to_path_buf(),
        error: source,
    })?;
    Ok(format!("{:x}", h.finalize()))
}

/// An input file as provenance records it: its file name and SHA-256.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct InputRecord {
    pub name: String,
    pub sha256: String,
}

/// The inputs of a cube with their hashes.
pub fn input_records(files: &[PathBuf]) -> Result<Vec<InputRecord>, OutputError> {
    files
        .iter()
        .map(|f| {
            Ok(InputRecord {
                name: f
                    .file_name()
                    .map(|n| n.to_string_lossy().into_owned())
                    .unwrap_or_default(),
                sha256: sha256_file(f)?,
            })
        })
        .collect()
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
