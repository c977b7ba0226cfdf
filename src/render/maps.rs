//! Map pictures: a cube in true colour. Pictures follow the orientation convention: FITS
//! cubes put internal row 0 at the bottom, other formats at the top. No-data is black.

use image::RgbImage;

use crate::colour::ColourMatrix;
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

/// The colour no-data pixels take in value maps: a muted blue that no grey can be.
pub const NODATA_RGB: [u8; 3] = [38, 52, 92];

/// A greyscale map of `values` (black at `range.0`, white at `range.1`, clipped), with a
/// title and a labelled colour bar; no-data (non-finite or not `valid`) in
/// [`NODATA_RGB`]. Enlarged by whole pixels to about 512 pixels across.
pub fn grey_map(
    values: ndarray::ArrayView2<f32>,
    valid: ndarray::ArrayView2<bool>,
    row0_at_bottom: bool,
    range: (f32, f32),
    title: &str,
) -> RgbImage {
    use plotters::prelude::*;
    let (rows, cols) = values.dim();
    let scale = (512 / rows.max(cols)).max(1);
    let (mw, mh) = (cols * scale, rows * scale);
    let (left, top, right, bottom) = (12usize, 44usize, 110usize, 16usize);
    let (w, h) = (left + mw + right, top + mh + bottom);
    let mut buf = vec![255u8; w * h * 3];
    let mut put = |x: usize, y: usize, rgb: [u8; 3]| {
        let i = (y * w + x) * 3;
        buf[i..i + 3].copy_from_slice(&rgb);
    };
    let span = (range.1 - range.0).max(f32::EPSILON);
    let grey = |v: f32| {
        let t = ((v - range.0) / span).clamp(0.0, 1.0);
        let g = (t * 255.0).round() as u8;
        [g, g, g]
    };
    for r in 0..rows {
        let pr = if row0_at_bottom { rows - 1 - r } else { r };
        for c in 0..cols {
            let v = values[(r, c)];
            let rgb = if valid[(r, c)] && v.is_finite() {
                grey(v)
            } else {
                NODATA_RGB
            };
            for dy in 0..scale {
                for dx in 0..scale {
                    put(left + c * scale + dx, top + pr * scale + dy, rgb);
                }
            }
        }
    }
    // Colour bar: 18 px wide beside the map, lowest value at the bottom.
    let bx = left + mw + 14;
    for y in 0..mh {
        let t = 1.0 - y as f32 / (mh.max(2) - 1) as f32;
        let rgb = grey(range.0 + t * span);
        for dx in 0..18 {
            put(bx + dx, top + y, rgb);
        }
    }
    for y in [top - 1, top + mh] {
        for dx in 0..18 {
            put(bx + dx, y, [0, 0, 0]);
        }
    }
    super::plot::register_font();
    {
        let area = BitMapBackend::with_buffer(&mut buf, (w as u32, h as u32)).into_drawing_area();
        let text = |s: &str, x: usize, y: usize, size: u32| {
            let _ = area.draw_text(
                s,
                &(super::plot::FAMILY, size).into_font().color(&BLACK),
                (x as i32, y as i32),
            );
        };
        text(title, left, 12, 18);
        let label = |v: f32| {
            if v.abs() >= 100.0 || (v != 0.0 && v.abs() < 0.01) {
                format!("{v:.2e}")
            } else {
                format!("{v:.3}")
            }
        };
        text(&label(range.1), bx + 22, top - 2, 13);
        text(
            &label((range.0 + range.1) / 2.0),
            bx + 22,
            top + mh / 2 - 6,
            13,
        );
        text(&label(range.0), bx + 22, top + mh - 12, 13);
        let _ = area.present();
    }
    RgbImage::from_raw(w as u32, h as u32, buf).expect("buffer matches the size")
}

/// Enlarges a picture by whole pixels to about `target` pixels across (nearest neighbour).
pub fn enlarge(img: &RgbImage, target: u32) -> RgbImage {
    let f = (target / img.width().max(img.height()).max(1)).max(1);
    if f == 1 {
        return img.clone();
    }
    image::imageops::resize(
        img,
        img.width() * f,
        img.height() * f,
        image::imageops::FilterType::Nearest,
    )
}

/// A unit map: each unit in its colour, unexplained pixels as a magenta and black
/// checkerboard (a pattern no unit colour can be), no-data in [`NODATA_RGB`]. Enlarged to
/// about 512 pixels across.
pub fn unit_map(
    labels: ndarray::ArrayView2<i16>,
    colours: &std::collections::BTreeMap<i16, [u8; 3]>,
    unexplained: Option<i16>,
    row0_at_bottom: bool,
) -> RgbImage {
    let (rows, cols) = labels.dim();
    let f = (512 / rows.max(cols)).max(2);
    let mut img = RgbImage::new((cols * f) as u32, (rows * f) as u32);
    for r in 0..rows {
        let pr = if row0_at_bottom { rows - 1 - r } else { r };
        for c in 0..cols {
            let l = labels[(r, c)];
            for dy in 0..f {
                for dx in 0..f {
                    let rgb = if Some(l) == unexplained {
                        if (dx * 2 / f + dy * 2 / f) % 2 == 0 {
                            [255, 0, 255]
                        } else {
                            [0, 0, 0]
                        }
                    } else {
                        colours.get(&l).copied().unwrap_or(NODATA_RGB)
                    };
                    img.put_pixel((c * f + dx) as u32, (pr * f + dy) as u32, image::Rgb(rgb));
                }
            }
        }
    }
    img
}

/// A marked spot on a picture: its centre in cube pixels (row, col; internal rows) and a
/// label.
pub struct Marker {
    pub row: f64,
    pub col: f64,
    pub label: String,
}

/// Draws each marker on `img` (a picture of a `rows`-row cube enlarged by a whole factor)
/// as a ring in a colour no unit or true colour is likely to be (cyan with a black casing)
/// with its label beside it, in the compiled-in font.
pub fn mark_spots(
    img: &RgbImage,
    rows: usize,
    row0_at_bottom: bool,
    markers: &[Marker],
) -> RgbImage {
    use plotters::prelude::*;
    super::plot::register_font();
    let (w, h) = img.dimensions();
    let f = h as f64 / rows.max(1) as f64;
    let mut buf = img.as_raw().clone();
    {
        let root = BitMapBackend::with_buffer(&mut buf, (w, h)).into_drawing_area();
        let radius = (f * 2.0).max(7.0) as i32;
        let font = (super::plot::FAMILY, (f * 2.5).clamp(13.0, 22.0))
            .into_font()
            .color(&WHITE);
        for m in markers {
            let pr = if row0_at_bottom {
                rows as f64 - 1.0 - m.row
            } else {
                m.row
            };
            let (x, y) = (((m.col + 0.5) * f) as i32, ((pr + 0.5) * f) as i32);
            let _ = root.draw(&Circle::new((x, y), radius + 1, BLACK.stroke_width(4)));
            let _ = root.draw(&Circle::new((x, y), radius, CYAN.stroke_width(2)));
            let at = (x + radius + 4, y - radius);
            // A dark halo behind the text, so it reads on light ground.
            for (dx, dy) in [(-1, 0), (1, 0), (0, -1), (0, 1)] {
                let halo = (super::plot::FAMILY, (f * 2.5).clamp(13.0, 22.0))
                    .into_font()
                    .color(&BLACK);
                let _ = root.draw(&Text::new(m.label.clone(), (at.0 + dx, at.1 + dy), halo));
            }
            let _ = root.draw(&Text::new(m.label.clone(), at, font.clone()));
        }
        let _ = root.present();
    }
    RgbImage::from_raw(w, h, buf).expect("the buffer keeps its size")
}
