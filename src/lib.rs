//! thiomap: composition maps of sulfur-rich volcanic surfaces from multispectral and
//! hyperspectral image cubes.
//!
//! The library holds the whole pipeline without any command-line concerns. Its modules,
//! from the ground up (a module uses only those on its own floor or below):
//!
//! 1. Ground: [`atomic`] (every file appears whole or not at all), [`fits`] (FITS
//!    header units and image bytes), [`bands`] (band tables and responses, the band-table
//!    file schema) and [`backplane`] (the names of the geometry angles).
//! 2. Data: [`cube`] (image cubes, their band tables, masks and backplanes; readers and
//!    writers) and [`library`] (the endmember library, its resampling and diagnostics).
//! 3. The numeric core, which does no I/O and never prints: [`unmix`] (the solvers and
//!    their parallel driver), [`units`] (clustering, labels, regions), [`photometry`]
//!    (normalisation by a photometric law) and [`colour`] (CIE colour of spectra).
//! 4. Pictures and scenes: [`render`] (map pictures, plots, legends) and [`demo`]
//!    (synthetic scenes of a fictional world with ground truth).
//! 5. The recipe: [`recipe`] (every result-changing option, checked once).
//! 6. One cube: [`pipeline`] (the stage sequence) and [`results`] (the results folder and
//!    the bytes of each of its files).
//! 7. Many cubes: [`batch`] (archive walks, shards, the worker pool, bookkeeping, merge).
//!
//! The command line (`src/cli/`) sits on top. See DEVELOPERS.md for the data flow.

pub mod atomic;
pub mod backplane;
pub mod bands;
pub mod batch;
pub mod change;
pub mod colour;
pub mod cube;
pub mod demo;
pub mod fits;
pub mod library;
pub mod photometry;
pub mod pipeline;
pub mod recipe;
pub mod render;
pub mod report;
pub mod results;
pub mod targets;
pub mod thermal;
pub mod units;
pub mod unmix;

/// The tool's version, recorded in every provenance file.
pub const VERSION: &str = env!("CARGO_PKG_VERSION");
