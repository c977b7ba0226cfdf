//! Writing results: atomic file creation now; the results-folder layout, provenance
//! records and exporters join it as the pipeline grows.

pub mod atomic;

use std::path::PathBuf;

/// What can go wrong writing an output.
#[derive(Debug, thiserror::Error)]
pub enum OutputError {
    #[error("{path}: cannot write: {source}")]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("{path}: already exists; pass --overwrite to replace it")]
    Exists { path: PathBuf },
}
