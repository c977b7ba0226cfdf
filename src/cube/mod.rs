//! The image cube: f32 samples stored pixel-interleaved (row, column, band) so that one
//! pixel's spectrum is contiguous, with its band table, no-data mask, optional geometry
//! backplanes, radiometric quantity, spatial WCS keywords and free-form description.
//!
//! Readers implement [`CubeReader`]: they describe the cube without reading samples
//! ([`CubeInfo`]) and then deliver any block of rows, so later stages can stream cubes
//! larger than memory. What a block read costs depends on the storage order:
//!
//! | format | a block of rows |
//! |---|---|
//! | FITS, uncompressed | one contiguous run per band (positioned reads, parallel) |
//! | `.fits.gz` | the file is inflated into memory once when opened, then as above |
//! | `.npy`, C order | one contiguous run (whole pixels) |
//! | `.npy`, Fortran order | a full pass over the file, one band plane at a time |
//! | band stack (PNG/TIFF) | every image decoded whole |
//!
//! No-data: a pixel is no-data when any of its samples is NaN or infinite (FITS BLANK,
//! a stack's `nodata` value and non-finite floats all become NaN). Such pixels are
//! masked and counted, never an error.

pub mod bandsets;
pub mod fits;
pub mod npy;
pub mod select;
pub mod stack;
pub mod stats;

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use ndarray::{Array2, Array3, ArrayViewMut3, Axis};
use rayon::prelude::*;

pub use crate::backplane::Backplane;
pub use crate::bands::{self, About, Band, BandTable, Quantity, Response};

use crate::fits::header::Card;

/// What can be wrong with a cube file. Every message names the file.
#[derive(Debug, thiserror::Error)]
pub enum CubeError {
    #[error("{path}: cannot read: {error}")]
    Io {
        path: PathBuf,
        error: std::io::Error,
    },
    #[error("{path}: {reason}")]
    Malformed { path: PathBuf, reason: String },
    #[error("{path}: {reason}")]
    Unsupported { path: PathBuf, reason: String },
    #[error("{path}: {error}")]
    Bands {
        path: PathBuf,
        error: bands::BandError,
    },
}

impl CubeError {
    pub fn malformed(path: &Path, reason: impl Into<String>) -> CubeError {
        CubeError::Malformed {
            path: path.to_path_buf(),
            reason: reason.into(),
        }
    }

    pub fn io(path: &Path, source: std::io::Error) -> CubeError {
        CubeError::Io {
            path: path.to_path_buf(),
            error: source,
        }
    }
}

/// The storage format a cube came from; it decides how pictures are oriented.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Format {
    /// FITS, with the index of the HDU that holds the cube.
    Fits {
        hdu: usize,
    },
    Npy,
    BandStack,
}

impl Format {
    pub fn name(&self) -> &'static str {
        match self {
            Format::Fits { .. } => "FITS",
            Format::Npy => "npy",
            Format::BandStack => "band-stack",
        }
    }

    /// Whether pictures put internal row 0 at the bottom: true for FITS (the
    /// astronomical display convention, FITS row 1 at the bottom), false otherwise.
    pub fn row0_at_bottom(&self) -> bool {
        matches!(self, Format::Fits { .. })
    }
}

/// Everything about a cube except its samples.
#[derive(Debug, Clone)]
pub struct CubeInfo {
    pub path: PathBuf,
    pub format: Format,
    pub rows: usize,
    pub cols: usize,
    pub bands: BandTable,
    pub quantity: Quantity,
    /// Spatial WCS cards (axes 1 and 2) of a FITS input, to copy into outputs.
    pub spatial_wcs: Vec<Card>,
    pub about: About,
    /// Every file the cube was read from (the cube, its sidecar, band images), for
    /// provenance.
    pub inputs: Vec<PathBuf>,
}

impl CubeInfo {
    pub fn pixels(&self) -> usize {
        self.rows * self.cols
    }

    /// Bytes the samples take as f32.
    pub fn f32_bytes(&self) -> u64 {
        (self.rows * self.cols * self.bands.len()) as u64 * 4
    }
}

/// The geometry backplanes present, each a (row, column) plane of degrees.
pub type Backplanes = BTreeMap<Backplane, Array2<f32>>;

/// A block of consecutive rows.
#[derive(Debug, Clone)]
pub struct Block {
    pub first_row: usize,
    /// (row, column, band) samples; no-data pixels keep whatever the file held (NaN).
    pub data: Array3<f32>,
    /// true where every sample of the pixel is finite.
    pub valid: Array2<bool>,
    /// How many samples in the block were NaN or infinite.
    pub nonfinite_samples: u64,
}

impl Block {
    /// Wraps freshly read samples and computes the mask and the non-finite count.
    pub fn from_samples(first_row: usize, data: Array3<f32>) -> Block {
        let (rows, cols, _) = data.dim();
        let mut valid = Array2::from_elem((rows, cols), true);
        let nonfinite: u64 = valid
            .axis_iter_mut(Axis(0))
            .into_par_iter()
            .zip(data.axis_iter(Axis(0)).into_par_iter())
            .map(|(mut vrow, drow)| {
                let mut bad = 0u64;
                for (v, px) in vrow.iter_mut().zip(drow.outer_iter()) {
                    let n = px.iter().filter(|x| !x.is_finite()).count() as u64;
                    *v = n == 0;
                    bad += n;
                }
                bad
            })
            .sum();
        Block {
            first_row,
            data,
            valid,
            nonfinite_samples: nonfinite,
        }
    }
}

/// A whole cube in memory.
#[derive(Debug, Clone)]
pub struct Cube {
    pub info: CubeInfo,
    /// (row, column, band) samples.
    pub data: Array3<f32>,
    /// true where the pixel holds data.
    pub valid: Array2<bool>,
    pub nonfinite_samples: u64,
    pub backplanes: Backplanes,
}

impl Cube {
    /// A cube held only in memory, from (row, column, band) samples and their bands, with
    /// the mask computed from the samples (for benchmarks and tests).
    pub fn from_pixels(data: Array3<f32>, bands: BandTable) -> Cube {
        let (rows, cols, _) = data.dim();
        let block = Block::from_samples(0, data);
        Cube {
            info: CubeInfo {
                path: PathBuf::from("memory"),
                format: Format::Npy,
                rows,
                cols,
                bands,
                quantity: Quantity::Undeclared,
                spatial_wcs: Vec::new(),
                about: About::default(),
                inputs: Vec::new(),
            },
            data: block.data,
            valid: block.valid,
            nonfinite_samples: block.nonfinite_samples,
            backplanes: Backplanes::new(),
        }
    }

    pub fn nodata_pixels(&self) -> usize {
        self.valid.iter().filter(|v| !**v).count()
    }
}

/// A cube file opened for reading: its description, then any block of rows.
/// Implementations are safe to share between threads.
pub trait CubeReader: Send + Sync {
    fn info(&self) -> &CubeInfo;

    /// Reads rows `first .. first + count` (internal order: row 0 is the first stored).
    fn read_rows(&self, first: usize, count: usize) -> Result<Block, CubeError>;

    /// Reads the geometry backplanes the file carries (possibly none).
    fn backplanes(&self) -> Result<Backplanes, CubeError>;

    /// Reads the whole cube.
    fn load(&self) -> Result<Cube, CubeError> {
        let info = self.info().clone();
        let block = self.read_rows(0, info.rows)?;
        let backplanes = self.backplanes()?;
        Ok(Cube {
            info,
            data: block.data,
            valid: block.valid,
            nonfinite_samples: block.nonfinite_samples,
            backplanes,
        })
    }
}

/// Options that choose what to read from a file.
#[derive(Debug, Clone, Default)]
pub struct OpenOptions {
    /// FITS only: the HDU holding the cube, by EXTNAME or index (0 = primary).
    pub hdu: Option<String>,
}

/// Whether a file name (any case) is a FITS file: `.fits`, `.fit`, `.fts`, optionally `.gz`.
pub fn is_fits_name(name: &str) -> bool {
    let n = name.to_ascii_lowercase();
    let n = n.strip_suffix(".gz").unwrap_or(&n);
    n.ends_with(".fits") || n.ends_with(".fit") || n.ends_with(".fts")
}

/// Opens a cube by its file name: `.fits`, `.fit`, `.fts` (optionally `.gz`), `.npy`
/// (with its `.toml` sidecar), or a band-table `.toml` (a band stack, or the sidecar of
/// a `.npy`).
pub fn open(path: &Path, opts: &OpenOptions) -> Result<Box<dyn CubeReader>, CubeError> {
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().to_ascii_lowercase())
        .unwrap_or_default();
    if opts.hdu.is_some() && !is_fits_name(&name) {
        return Err(CubeError::Unsupported {
            path: path.to_path_buf(),
            reason: "--hdu applies to FITS files only".into(),
        });
    }
    if is_fits_name(&name) {
        Ok(Box::new(fits::FitsCube::open(path, opts.hdu.as_deref())?))
    } else if name.ends_with(".npy") {
        Ok(Box::new(npy::NpyCube::open(path)?))
    } else if name.ends_with(".toml") {
        let file = read_band_table(path)?;
        match file.kind {
            bands::TableKind::BandStack => Ok(Box::new(stack::StackCube::from_table(path, file)?)),
            bands::TableKind::NpySidecar => {
                Ok(Box::new(npy::NpyCube::open(&path.with_extension("npy"))?))
            }
            bands::TableKind::BandSet => Err(CubeError::malformed(
                path,
                "this is a band-set file (an instrument's bands), not a cube; \
                 a cube is a FITS file, a .npy with its sidecar, or a band-stack sidecar",
            )),
        }
    } else {
        Err(CubeError::Unsupported {
            path: path.to_path_buf(),
            reason: "unknown cube format: expected .fits, .fit, .fts (optionally .gz), \
                     .npy with a .toml sidecar, or a band-stack .toml"
                .into(),
        })
    }
}

/// Opens and reads a whole cube.
pub fn load(path: &Path, opts: &OpenOptions) -> Result<Cube, CubeError> {
    open(path, opts)?.load()
}

/// Reads and parses a band-table TOML file, with errors that name it.
pub fn read_band_table(path: &Path) -> Result<bands::BandTableFile, CubeError> {
    let text = std::fs::read_to_string(path).map_err(|e| CubeError::io(path, e))?;
    bands::BandTableFile::parse(&text).map_err(|e| CubeError::malformed(path, e))
}

/// Checks the shape every reader must refuse: empty, or a single band.
pub(crate) fn check_shape(
    path: &Path,
    rows: usize,
    cols: usize,
    bands: usize,
) -> Result<(), CubeError> {
    if rows == 0 || cols == 0 || bands == 0 {
        return Err(CubeError::malformed(
            path,
            format!("the cube is empty ({rows} rows × {cols} columns × {bands} bands)"),
        ));
    }
    if bands == 1 {
        return Err(CubeError::malformed(
            path,
            "the cube has a single band: a spectrum needs at least two bands",
        ));
    }
    Ok(())
}

/// Checks a row range against the cube.
pub(crate) fn check_rows(info: &CubeInfo, first: usize, count: usize) -> Result<(), CubeError> {
    if first.checked_add(count).is_none_or(|end| end > info.rows) {
        return Err(CubeError::malformed(
            &info.path,
            format!(
                "rows {first}..{} requested but the cube has {} rows",
                first.saturating_add(count),
                info.rows
            ),
        ));
    }
    Ok(())
}

/// Fills a (rows, cols, bands) block from band-major planes: `planes[b]` holds the
/// block's `rows × cols` samples of band `b`. Transposes in tiles for cache locality.
pub(crate) fn interleave_into(mut out: ArrayViewMut3<f32>, planes: &[f32]) {
    let (rows, cols, bands) = out.dim();
    let n = rows * cols;
    debug_assert_eq!(planes.len(), n * bands);
    let out = out
        .as_slice_mut()
        .expect("blocks are allocated in standard layout");
    const TILE: usize = 64;
    for start in (0..n).step_by(TILE) {
        let end = (start + TILE).min(n);
        for b in 0..bands {
            let plane = &planes[b * n + start..b * n + end];
            for (k, v) in plane.iter().enumerate() {
                out[(start + k) * bands + b] = *v;
            }
        }
    }
}
