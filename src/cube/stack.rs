//! Band stacks: one single-band greyscale image per band (8- or 16-bit PNG, 8- or 16-bit
//! or f32 TIFF), listed in a TOML sidecar with `kind = "band-stack"`:
//!
//! ```toml
//! kind = "band-stack"
//! quantity = "reflectance-factor"
//! nodata = 0                    # stored value that marks no data (optional)
//!
//! [[band]]
//! file = "band-01.png"          # relative to this file
//! centre_um = 0.45
//! fwhm_um = 0.02
//! scale = 0.0001                # reflectance = offset + scale × stored value (required)
//! offset = 0.0                  # optional, 0 by default
//! ```
//!
//! PNGs are decoded with the image crate; TIFFs with the tiff crate, because the image
//! crate cannot open f32 greyscale TIFFs. Each image is decoded whole on every read.

use std::path::{Path, PathBuf};

use ndarray::Array3;
use rayon::prelude::*;

use super::{
    check_rows, check_shape, interleave_into, Backplanes, Block, CubeError, CubeInfo, CubeReader,
    Format,
};
use crate::bands::{BandTableFile, TableKind};

/// A band stack opened for reading.
pub struct StackCube {
    info: CubeInfo,
    layers: Vec<Layer>,
    nodata: Option<f64>,
}

struct Layer {
    path: PathBuf,
    scale: f64,
    offset: f64,
}

/// A decoded greyscale image as f64 samples, row-major.
struct Grey {
    width: usize,
    height: usize,
    values: Vec<f64>,
}

fn is_tiff(path: &Path) -> bool {
    let ext = path
        .extension()
        .map(|e| e.to_string_lossy().to_ascii_lowercase())
        .unwrap_or_default();
    ext == "tif" || ext == "tiff"
}

fn decode(path: &Path) -> Result<Grey, CubeError> {
    if is_tiff(path) {
        decode_tiff(path)
    } else {
        decode_png(path)
    }
}

fn decode_png(path: &Path) -> Result<Grey, CubeError> {
    let img = image::ImageReader::open(path)
        .map_err(|e| CubeError::io(path, e))?
        .with_guessed_format()
        .map_err(|e| CubeError::io(path, e))?
        .decode()
        .map_err(|e| CubeError::malformed(path, format!("cannot decode the image: {e}")))?;
    let (width, height) = (img.width() as usize, img.height() as usize);
    let values: Vec<f64> = match img {
        image::DynamicImage::ImageLuma8(g) => g.into_raw().into_iter().map(f64::from).collect(),
        image::DynamicImage::ImageLuma16(g) => g.into_raw().into_iter().map(f64::from).collect(),
        other => {
            return Err(CubeError::Unsupported {
                path: path.to_path_buf(),
                reason: format!(
                    "the image is {:?}; band images must be single-channel greyscale (8 or 16 bit)",
                    other.color()
                ),
            })
        }
    };
    Ok(Grey {
        width,
        height,
        values,
    })
}

fn decode_tiff(path: &Path) -> Result<Grey, CubeError> {
    use tiff::decoder::{Decoder, DecodingResult};
    let file = std::fs::File::open(path).map_err(|e| CubeError::io(path, e))?;
    let bad =
        |e: tiff::TiffError| CubeError::malformed(path, format!("cannot decode the TIFF: {e}"));
    let mut dec = Decoder::new(std::io::BufReader::new(file)).map_err(bad)?;
    let (w, h) = dec.dimensions().map_err(bad)?;
    let colour = dec.colortype().map_err(bad)?;
    if !matches!(colour, tiff::ColorType::Gray(_)) {
        return Err(CubeError::Unsupported {
            path: path.to_path_buf(),
            reason: format!("the TIFF is {colour:?}; band images must be single-channel greyscale"),
        });
    }
    let values: Vec<f64> = match dec.read_image().map_err(bad)? {
        DecodingResult::U8(v) => v.into_iter().map(f64::from).collect(),
        DecodingResult::U16(v) => v.into_iter().map(f64::from).collect(),
        DecodingResult::F32(v) => v.into_iter().map(f64::from).collect(),
        _ => {
            return Err(CubeError::Unsupported {
                path: path.to_path_buf(),
                reason: "TIFF samples must be 8-bit, 16-bit or 32-bit float".into(),
            })
        }
    };
    Ok(Grey {
        width: w as usize,
        height: h as usize,
        values,
    })
}

fn dimensions(path: &Path) -> Result<(usize, usize), CubeError> {
    if is_tiff(path) {
        let file = std::fs::File::open(path).map_err(|e| CubeError::io(path, e))?;
        let mut dec = tiff::decoder::Decoder::new(std::io::BufReader::new(file))
            .map_err(|e| CubeError::malformed(path, format!("cannot read the TIFF: {e}")))?;
        let (w, h) = dec
            .dimensions()
            .map_err(|e| CubeError::malformed(path, format!("cannot read the TIFF: {e}")))?;
        Ok((w as usize, h as usize))
    } else {
        let (w, h) = image::image_dimensions(path)
            .map_err(|e| CubeError::malformed(path, format!("cannot read the image: {e}")))?;
        Ok((w as usize, h as usize))
    }
}

impl StackCube {
    /// Builds a stack from its parsed sidecar at `path`; checks that every image exists
    /// and that all have one size, reading only their headers.
    pub fn from_table(path: &Path, table: BandTableFile) -> Result<StackCube, CubeError> {
        debug_assert_eq!(table.kind, TableKind::BandStack);
        let bands = table
            .band_table()
            .map_err(|e| CubeError::malformed(path, e))?;
        let folder = path.parent().unwrap_or(Path::new("."));
        let mut layers = Vec::with_capacity(table.bands.len());
        let mut size: Option<(usize, usize, PathBuf)> = None;
        for (i, entry) in table.bands.iter().enumerate() {
            let n = i + 1;
            let file = entry.file.as_deref().unwrap_or_default();
            let image = folder.join(file);
            if !image.is_file() {
                return Err(CubeError::malformed(
                    path,
                    format!(
                        "band {n}: the image file {} does not exist",
                        image.display()
                    ),
                ));
            }
            let scale = entry.scale.ok_or_else(|| {
                CubeError::malformed(
                    path,
                    format!("band {n}: `scale` is missing (reflectance = offset + scale × stored value)"),
                )
            })?;
            let offset = entry.offset.unwrap_or(0.0);
            if !(scale.is_finite() && scale != 0.0 && offset.is_finite()) {
                return Err(CubeError::malformed(
                    path,
                    format!("band {n}: scale {scale} and offset {offset} must be finite, scale non-zero"),
                ));
            }
            let (w, h) = dimensions(&image)?;
            match &size {
                None => size = Some((w, h, image.clone())),
                Some((w0, h0, first)) if (*w0, *h0) != (w, h) => {
                    return Err(CubeError::malformed(
                        path,
                        format!(
                            "band images differ in size: {} is {w} × {h} but {} is {w0} × {h0}",
                            image.display(),
                            first.display()
                        ),
                    ))
                }
                Some(_) => {}
            }
            layers.push(Layer {
                path: image,
                scale,
                offset,
            });
        }
        let (cols, rows, _) = size.unwrap_or((0, 0, PathBuf::new()));
        check_shape(path, rows, cols, layers.len())?;
        Ok(StackCube {
            info: CubeInfo {
                path: path.to_path_buf(),
                format: Format::BandStack,
                rows,
                cols,
                bands,
                quantity: table.quantity.unwrap_or_default(),
                spatial_wcs: Vec::new(),
                inputs: std::iter::once(path.to_path_buf())
                    .chain(layers.iter().map(|l| l.path.clone()))
                    .collect(),
                about: table.about,
            },
            layers,
            nodata: table.nodata,
        })
    }
}

impl CubeReader for StackCube {
    fn info(&self) -> &CubeInfo {
        &self.info
    }

    fn read_rows(&self, first: usize, count: usize) -> Result<Block, CubeError> {
        check_rows(&self.info, first, count)?;
        let (rows, cols) = (self.info.rows, self.info.cols);
        let per_band = count * cols;
        let mut planes = vec![0f32; per_band * self.layers.len()];
        planes
            .par_chunks_exact_mut(per_band)
            .zip(self.layers.par_iter())
            .try_for_each(|(plane, layer)| {
                let grey = decode(&layer.path)?;
                if (grey.width, grey.height) != (cols, rows) {
                    return Err(CubeError::malformed(
                        &layer.path,
                        format!(
                            "the image is {} × {} but the stack is {cols} × {rows}",
                            grey.width, grey.height
                        ),
                    ));
                }
                let src = &grey.values[first * cols..(first + count) * cols];
                for (o, &v) in plane.iter_mut().zip(src) {
                    *o = if Some(v) == self.nodata {
                        f32::NAN
                    } else {
                        (layer.offset + layer.scale * v) as f32
                    };
                }
                Ok(())
            })?;
        let mut data = Array3::<f32>::zeros((count, cols, self.layers.len()));
        interleave_into(data.view_mut(), &planes);
        Ok(Block::from_samples(first, data))
    }

    fn backplanes(&self) -> Result<Backplanes, CubeError> {
        Ok(Backplanes::new())
    }
}
