//! Reading whole image HDUs back as arrays: the primary image or a named extension, as
//! (rows, cols, planes) f32 with internal row = stored row, scaling applied. Used by the
//! readers of results folders (the report, `compare`, `targets`); cubes have their own
//! reader with selection and no-data handling ([`crate::cube::fits`]).

use std::path::Path;

use ndarray::Array3;

use super::header::Header;
use super::{read_elements, scan, HduKind, Scaling, Source};

/// An image HDU read whole.
pub struct Image {
    pub header: Header,
    /// (rows, cols, planes); a 2-D image has one plane.
    pub data: Array3<f32>,
}

/// Reads the primary image and every image extension with an EXTNAME (upper-cased), in
/// file order.
pub fn read_all(path: &Path) -> Result<(Image, Vec<(String, Image)>), String> {
    let src = Source::open(path).map_err(|e| e.to_string())?;
    let hdus = scan(&src).map_err(|e| e.to_string())?;
    let first = hdus.first().ok_or("no HDU")?;
    let primary = read_hdu(&src, first)?;
    let mut extensions = Vec::new();
    for h in hdus.iter().skip(1) {
        if h.kind != HduKind::Image {
            continue;
        }
        if let Some(name) = h.name() {
            extensions.push((name, read_hdu(&src, h)?));
        }
    }
    Ok((primary, extensions))
}

/// Reads the primary image only.
pub fn read_primary(path: &Path) -> Result<Image, String> {
    let src = Source::open(path).map_err(|e| e.to_string())?;
    let hdus = scan(&src).map_err(|e| e.to_string())?;
    read_hdu(&src, hdus.first().ok_or("no HDU")?)
}

fn read_hdu(src: &Source, hdu: &super::Hdu) -> Result<Image, String> {
    hdu.check_within(src.len()).map_err(|e| e.to_string())?;
    let axes = hdu.axes();
    if axes.is_empty() || axes.len() > 3 {
        return Err(format!(
            "HDU {}: {} axes, expected 2 or 3",
            hdu.index,
            axes.len()
        ));
    }
    let (nx, ny) = (axes[0] as usize, *axes.get(1).unwrap_or(&1) as usize);
    let np = *axes.get(2).unwrap_or(&1) as usize;
    let scaling = Scaling::from_header(&hdu.header).map_err(|e| e.to_string())?;
    let mut flat = vec![0f32; nx * ny * np];
    let mut scratch = Vec::new();
    read_elements(src, hdu, &scaling, 0, &mut flat, &mut scratch).map_err(|e| e.to_string())?;
    Ok(Image {
        header: hdu.header.clone(),
        data: Array3::from_shape_fn((ny, nx, np), |(y, x, p)| flat[(p * ny + y) * nx + x]),
    })
}
