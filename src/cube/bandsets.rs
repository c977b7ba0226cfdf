//! The instrument band sets shipped with thiomap (`spectra-lib/band-sets/*.toml`, compiled
//! in), and resolving a `--bands` argument: a shipped band set's name, a band-set file, or
//! any cube (whose band table is used).
//!
//! The three shipped sets are invented for this project and copy no real instrument.

use std::path::Path;

use super::{BandTable, CubeError, OpenOptions};
use crate::bands::{BandTableFile, TableKind};

/// Shipped band sets: (name, file text).
pub const SHIPPED: &[(&str, &str)] = &[
    (
        "imager-7",
        include_str!("../../spectra-lib/band-sets/imager-7.toml"),
    ),
    (
        "spectrometer-24",
        include_str!("../../spectra-lib/band-sets/spectrometer-24.toml"),
    ),
    (
        "mapper-96",
        include_str!("../../spectra-lib/band-sets/mapper-96.toml"),
    ),
];

/// A resolved band table and a description of where it came from.
pub struct NamedBands {
    pub label: String,
    pub bands: BandTable,
}

/// Resolves `--bands`: a shipped name, a `.toml` band-set file, or a cube.
pub fn resolve(arg: &str) -> Result<NamedBands, CubeError> {
    if let Some((name, text)) = SHIPPED.iter().find(|(n, _)| *n == arg) {
        let file = BandTableFile::parse(text).expect("shipped band sets are tested");
        return Ok(NamedBands {
            label: format!("{name} (shipped band set)"),
            bands: file.band_table().expect("shipped band sets are tested"),
        });
    }
    let path = Path::new(arg);
    if !path.exists() {
        let names: Vec<&str> = SHIPPED.iter().map(|(n, _)| *n).collect();
        return Err(CubeError::malformed(
            path,
            format!(
                "no such file, and not a shipped band set ({})",
                names.join(", ")
            ),
        ));
    }
    if arg.to_ascii_lowercase().ends_with(".toml") {
        let file = super::read_band_table(path)?;
        if file.kind == TableKind::BandSet {
            let bands = file
                .band_table()
                .map_err(|e| CubeError::malformed(path, e))?;
            return Ok(NamedBands {
                label: format!("{} (band-set file)", path.display()),
                bands,
            });
        }
    }
    let reader = super::open(path, &OpenOptions::default())?;
    Ok(NamedBands {
        label: format!("{} (cube)", path.display()),
        bands: reader.info().bands.clone(),
    })
}
