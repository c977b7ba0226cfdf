//! Map pictures: a cube in true colour. Pictures follow the orientation convention: FITS
//! cubes put internal row 0 at the bottom, other formats at the top. No-data is black.

use image::RgbImage;

use super::colour::ColourMatrix;
use crate::cube::Cube;

/// The picture row of internal row `r`.
pub fn picture_row(cube: &Cube, r: usize) -> usize {
    if cube.info.format.row0_at_bottom() {
        cube.info.rows - 1 - r
    } else {
        r
    }
}

/// The cube rendered in true colour (CIE 1931 / D65 → sRGB), or in the stated false-colour
/// rule when the bands hold fewer than three visible centres. Returns the picture and
/// whether it is false colour.
pub fn true_colour(cube: &Cube) -> (RgbImage, bool) {
    let m = ColourMatrix::for_wavelengths(&cube.info.bands.centres_um());
    let (rows, cols, _) = cube.data.dim();
    let mut img = RgbImage::new(cols as u32, rows as u32);
    for r in 0..rows {
        let y = picture_row(cube, r) as u32;
        for c in 0..cols {
            let px = if cube.valid[(r, c)] {
                let spectrum = cube.data.slice(ndarray::s![r, c, ..]);
                m.srgb8_f32(spectrum.as_slice().expect("pixels are contiguous"))
            } else {
                [0, 0, 0]
            };
            img.put_pixel(c as u32, y, image::Rgb(px));
        }
    }
    (img, m.is_false_colour())
}

/// Encodes a picture as PNG bytes.
pub fn png_bytes(img: &RgbImage) -> Vec<u8> {
    let mut bytes = Vec::new();
    img.write_to(
        &mut std::io::Cursor::new(&mut bytes),
        image::ImageFormat::Png,
    )
    .expect("encoding a PNG into memory cannot fail");
    bytes
}
