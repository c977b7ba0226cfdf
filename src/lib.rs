//! thiomap: composition maps of sulfur-rich volcanic surfaces from multispectral and
//! hyperspectral image cubes.
//!
//! The library holds the whole pipeline without any command-line concerns:
//! [`cube`] reads and writes image cubes, [`fits`] is the FITS byte layer,
//! [`library`] holds the endmember library and its resampling and diagnostics,
//! [`render`] turns spectra into colours and plots, and [`output`] writes result files
//! atomically. See DEVELOPERS.md for the data flow.

pub mod batch;
pub mod cube;
pub mod demo;
pub mod fits;
pub mod library;
pub mod output;
pub mod photometry;
pub mod pipeline;
pub mod recipe;
pub mod render;
pub mod units;
pub mod unmix;

/// The tool's version, recorded in every provenance file.
pub const VERSION: &str = env!("CARGO_PKG_VERSION");
