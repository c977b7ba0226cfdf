//! NumPy `.npy` cubes (shape rows × columns × bands, f32 or f64, either byte order,
//! C or Fortran order) with a TOML sidecar of the same stem (`kind = "npy-sidecar"`)
//! that gives the band table, the quantity and a description.
//!
//! Reading is by hand (format spec: NEP 1, "A simple file format for NumPy arrays"):
//! ndarray-npy reads only whole arrays and refuses f64 files into f32 arrays, while
//! thiomap needs row-block reads and a size check against the file before allocating.
//! Writing uses ndarray-npy.

use std::fs::File;
use std::path::{Path, PathBuf};

use ndarray::{Array3, Axis};
use ndarray_npy::WriteNpyExt;
use rayon::prelude::*;

use super::{
    check_rows, check_shape, read_band_table, Backplanes, Block, Cube, CubeError, CubeInfo,
    CubeReader, Format,
};
use crate::bands::{BandTableFile, TableKind};

/// A `.npy` cube opened for reading.
pub struct NpyCube {
    info: CubeInfo,
    file: File,
    data_start: u64,
    dtype: Dtype,
    fortran: bool,
}

#[derive(Debug, Clone, Copy)]
struct Dtype {
    bytes: usize,
    little_endian: bool,
}

impl Dtype {
    fn decode(self, raw: &[u8], out: &mut [f32]) {
        match (self.bytes, self.little_endian) {
            (4, true) => raw
                .chunks_exact(4)
                .zip(out.iter_mut())
                .for_each(|(c, o)| *o = f32::from_le_bytes([c[0], c[1], c[2], c[3]])),
            (4, false) => raw
                .chunks_exact(4)
                .zip(out.iter_mut())
                .for_each(|(c, o)| *o = f32::from_be_bytes([c[0], c[1], c[2], c[3]])),
            (_, true) => raw
                .chunks_exact(8)
                .zip(out.iter_mut())
                .for_each(|(c, o)| *o = f64::from_le_bytes(c.try_into().expect("8 bytes")) as f32),
            (_, false) => raw
                .chunks_exact(8)
                .zip(out.iter_mut())
                .for_each(|(c, o)| *o = f64::from_be_bytes(c.try_into().expect("8 bytes")) as f32),
        }
    }
}

/// The sidecar of a `.npy`: same stem, `.toml`.
pub fn sidecar_path(npy: &Path) -> PathBuf {
    npy.with_extension("toml")
}

struct NpyHeader {
    dtype: Dtype,
    fortran: bool,
    shape: Vec<u64>,
    data_start: u64,
}

fn parse_header(path: &Path, file: &File) -> Result<NpyHeader, CubeError> {
    use std::os::unix::fs::FileExt;
    let bad = |r: String| CubeError::malformed(path, r);
    let len = file.metadata().map_err(|e| CubeError::io(path, e))?.len();
    let mut pre = [0u8; 12];
    if len < 10 {
        return Err(bad(format!(
            "the file is {len} bytes long, too short for a .npy header"
        )));
    }
    let pre_len = (len.min(12)) as usize;
    file.read_exact_at(&mut pre[..pre_len], 0)
        .map_err(|e| CubeError::io(path, e))?;
    if &pre[..6] != b"\x93NUMPY" {
        return Err(bad(
            "not a .npy file (the magic string \\x93NUMPY is missing)".into(),
        ));
    }
    let (header_len, start) = match pre[6] {
        1 => (u16::from_le_bytes([pre[8], pre[9]]) as u64, 10u64),
        2 | 3 if pre_len == 12 => (
            u32::from_le_bytes([pre[8], pre[9], pre[10], pre[11]]) as u64,
            12u64,
        ),
        v => return Err(bad(format!(".npy format version {v} is not supported"))),
    };
    if start + header_len > len {
        return Err(bad("the .npy header runs past the end of the file".into()));
    }
    let mut text = vec![0u8; header_len as usize];
    file.read_exact_at(&mut text, start)
        .map_err(|e| CubeError::io(path, e))?;
    let text = String::from_utf8_lossy(&text).into_owned();
    let field = |key: &str| -> Option<String> {
        let at = text.find(&format!("'{key}'"))?;
        let rest = text[at + key.len() + 2..].trim_start().strip_prefix(':')?;
        Some(rest.trim_start().to_string())
    };
    let descr = field("descr")
        .and_then(|r| {
            r.strip_prefix('\'')
                .map(|s| s.split('\'').next().unwrap_or("").to_string())
        })
        .ok_or_else(|| bad("the .npy header has no 'descr'".into()))?;
    let dtype = match descr.as_str() {
        "<f4" => Dtype {
            bytes: 4,
            little_endian: true,
        },
        ">f4" => Dtype {
            bytes: 4,
            little_endian: false,
        },
        "<f8" => Dtype {
            bytes: 8,
            little_endian: true,
        },
        ">f8" => Dtype {
            bytes: 8,
            little_endian: false,
        },
        other => {
            return Err(CubeError::Unsupported {
                path: path.to_path_buf(),
                reason: format!(
                    "dtype '{other}' is not supported (expected float32 or float64, '<f4', \
                     '>f4', '<f8' or '>f8')"
                ),
            })
        }
    };
    let fortran = match field("fortran_order") {
        Some(r) if r.starts_with("True") => true,
        Some(r) if r.starts_with("False") => false,
        _ => return Err(bad("the .npy header has no 'fortran_order'".into())),
    };
    let shape_text = field("shape")
        .and_then(|r| {
            r.strip_prefix('(')
                .map(|s| s.split(')').next().unwrap_or("").to_string())
        })
        .ok_or_else(|| bad("the .npy header has no 'shape'".into()))?;
    let shape = shape_text
        .split(',')
        .map(str::trim)
        .filter(|s| !s.is_empty())
        .map(|s| s.parse::<u64>())
        .collect::<Result<Vec<_>, _>>()
        .map_err(|_| {
            bad(format!(
                "the .npy shape ({shape_text}) is not a list of sizes"
            ))
        })?;
    if shape.len() != 3 {
        return Err(bad(format!(
            "the array has {} axes ({shape_text}); a cube is rows × columns × bands",
            shape.len()
        )));
    }
    let data_start = start + header_len;
    let declared = shape
        .iter()
        .try_fold(dtype.bytes as u64, |acc, &n| acc.checked_mul(n))
        .ok_or_else(|| bad("the declared shape overflows 64 bits".into()))?;
    let held = len - data_start;
    if declared != held {
        return Err(bad(format!(
            "the header declares {declared} data bytes but the file holds {held} \
             ({})",
            if held < declared {
                "truncated file"
            } else {
                "trailing bytes"
            }
        )));
    }
    Ok(NpyHeader {
        dtype,
        fortran,
        shape,
        data_start,
    })
}

impl NpyCube {
    /// Opens a `.npy` cube and its sidecar.
    pub fn open(path: &Path) -> Result<NpyCube, CubeError> {
        let file = File::open(path).map_err(|e| CubeError::io(path, e))?;
        let header = parse_header(path, &file)?;
        let side = sidecar_path(path);
        if !side.exists() {
            return Err(CubeError::malformed(
                path,
                format!(
                    "the sidecar {} is missing: a .npy cube needs a TOML file of the same \
                     stem with kind = \"npy-sidecar\" and its [[band]] table",
                    side.display()
                ),
            ));
        }
        let table = read_band_table(&side)?;
        if table.kind != TableKind::NpySidecar {
            return Err(CubeError::malformed(
                &side,
                format!(
                    "kind = \"{}\", expected \"npy-sidecar\"",
                    table.kind.as_str()
                ),
            ));
        }
        let bands = table
            .band_table()
            .map_err(|e| CubeError::malformed(&side, e))?;
        let to_usize = |v: u64| usize::try_from(v).unwrap_or(usize::MAX);
        let (rows, cols, nb) = (
            to_usize(header.shape[0]),
            to_usize(header.shape[1]),
            to_usize(header.shape[2]),
        );
        check_shape(path, rows, cols, nb)?;
        if bands.len() != nb {
            return Err(CubeError::malformed(
                &side,
                format!(
                    "the sidecar lists {} bands but the array has {nb}",
                    bands.len()
                ),
            ));
        }
        Ok(NpyCube {
            info: CubeInfo {
                path: path.to_path_buf(),
                format: Format::Npy,
                rows,
                cols,
                bands,
                quantity: table.quantity.unwrap_or_default(),
                spatial_wcs: Vec::new(),
                about: table.about,
                inputs: vec![path.to_path_buf(), side.clone()],
            },
            file,
            data_start: header.data_start,
            dtype: header.dtype,
            fortran: header.fortran,
        })
    }

    fn read_at(&self, elem: u64, out: &mut [f32], scratch: &mut Vec<u8>) -> Result<(), CubeError> {
        use std::os::unix::fs::FileExt;
        let b = self.dtype.bytes;
        scratch.resize(out.len() * b, 0);
        self.file
            .read_exact_at(scratch, self.data_start + elem * b as u64)
            .map_err(|e| CubeError::io(&self.info.path, e))?;
        self.dtype.decode(scratch, out);
        Ok(())
    }
}

impl CubeReader for NpyCube {
    fn info(&self) -> &CubeInfo {
        &self.info
    }

    fn read_rows(&self, first: usize, count: usize) -> Result<Block, CubeError> {
        check_rows(&self.info, first, count)?;
        let (rows, cols, nb) = (self.info.rows, self.info.cols, self.info.bands.len());
        let mut data = Array3::<f32>::zeros((count, cols, nb));
        if !self.fortran {
            // C order: the block is one contiguous run of whole pixels.
            let group = ((1usize << 18) / (cols * nb)).max(1);
            data.axis_chunks_iter_mut(Axis(0), group)
                .into_par_iter()
                .enumerate()
                .try_for_each(|(g, mut chunk)| {
                    let start = ((first + g * group) * cols * nb) as u64;
                    let out = chunk.as_slice_mut().expect("standard layout");
                    self.read_at(start, out, &mut Vec::new())
                })?;
        } else {
            // Fortran order: element (r, c, b) lies at r + rows·(c + cols·b); read one
            // band plane at a time (a full pass over the file for any block).
            let mut plane = vec![0f32; rows * cols];
            let mut scratch = Vec::new();
            for b in 0..nb {
                self.read_at((b * rows * cols) as u64, &mut plane, &mut scratch)?;
                for r in 0..count {
                    for c in 0..cols {
                        data[(r, c, b)] = plane[first + r + rows * c];
                    }
                }
            }
        }
        Ok(Block::from_samples(first, data))
    }

    fn backplanes(&self) -> Result<Backplanes, CubeError> {
        Ok(Backplanes::new())
    }
}

/// Writes a cube as a little-endian f32 C-order `.npy` and its sidecar (same stem,
/// `.toml`). Backplanes and spatial WCS are not carried by this format. Each file
/// appears whole or not at all.
pub fn write_cube(path: &Path, cube: &Cube) -> Result<(), crate::atomic::WriteError> {
    let sidecar = BandTableFile {
        kind: TableKind::NpySidecar,
        name: None,
        quantity: Some(cube.info.quantity),
        nodata: None,
        about: cube.info.about.clone(),
        bands: BandTableFile::entries(&cube.info.bands),
    };
    let text = toml::to_string(&sidecar).expect("band tables always serialise");
    crate::atomic::write_with(path, |f| {
        let mut w = std::io::BufWriter::new(f);
        cube.data
            .write_npy(&mut w)
            .map_err(|e| std::io::Error::other(e.to_string()))
    })?;
    crate::atomic::write_bytes(&sidecar_path(path), text.as_bytes())
}
