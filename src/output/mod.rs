//! Writing results: atomic file creation ([`atomic`]) and the results folder of the
//! results-folder contract ([`results`]).

pub mod atomic;
pub mod results;

use std::path::PathBuf;

/// What can go wrong writing an output.
#[derive(Debug, thiserror::Error)]
pub enum OutputError {
    #[error("{path}: cannot write: {error}")]
    Io {
        path: PathBuf,
        error: std::io::Error,
    },
    #[error("{path}: already exists; pass --overwrite to replace it")]
    Exists { path: PathBuf },
}
